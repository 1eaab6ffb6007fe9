//! `cairn slurm-worker SPEC` (hidden): what each Slurm job runs. Evaluates the spec's jobs and
//! writes their results beside it (see `slurm::worker`). Not for people to type.

use std::path::PathBuf;

#[derive(clap::Args, Debug)]
pub struct Args {
    /// The spec file written by the Slurm executor (DIR/cluster/jobs/<hash>/spec.json).
    pub spec: PathBuf,
}

/// Exit status: 0 when every evaluation has a result file, 2 when the spec could not be run.
pub fn run(args: &Args) -> i32 {
    crate::slurm::worker::run(&args.spec)
}
