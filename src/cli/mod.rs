//! The command line. Each command lives in its own file with its own clap `Args`.

pub mod check;
pub mod evaluate;
pub mod run;
pub mod status;

use clap::{Parser, Subcommand};

pub mod band;
pub mod engines;
pub mod irc;
pub mod modes;
pub mod record;
pub mod relax;
pub mod report;
pub mod saddle;
pub mod scan;
pub mod slurm_worker;
pub mod thermo;
pub mod walk;

#[derive(Parser, Debug)]
#[command(
    name = "cairn",
    version,
    about = "Find and verify transition states with real quantum-chemistry engines"
)]
pub struct Cli {
    #[command(subcommand)]
    pub command: Command,
}

#[derive(Subcommand, Debug)]
pub enum Command {
    /// List the engines: adapter files found, their executables, built-in model surfaces.
    Engines(engines::Args),
    Evaluate(evaluate::Args),
    /// Validate a study file and print its plan (reactions, stages, estimated engine calls).
    Check(check::Args),
    /// Climbing-image nudged elastic band between two minima.
    Band(band::Args),
    /// Relaxed scan of a bond, angle or dihedral (1-D or 2-D).
    Scan(scan::Args),
    /// Walk uphill from a minimum along a soft mode to a saddle.
    Walk(walk::Args),
    /// Intrinsic reaction coordinate from a saddle, both directions.
    Irc(irc::Args),
    /// Minimise the energy of a geometry; writes the relaxed XYZ and a JSON record.
    Relax(relax::Args),
    /// Refine a transition-state guess to a first-order saddle (P-RFO or Newton–Raphson).
    Saddle(saddle::Args),
    /// Harmonic frequencies, normal modes and reduced masses of a geometry.
    Modes(modes::Args),
    /// Run a study: every reaction's stages, results in --dir.
    Run(run::Args),
    /// Show the state of a run directory.
    Status(status::Args),
    /// Write report.html, report.md and summary.csv from a run directory.
    Report(report::Args),
    /// Ideal-gas RRHO thermochemistry from a geometry and vibrational wavenumbers (no engine).
    Thermo(thermo::Args),
    /// Run the evaluations of one Slurm job (used inside the jobs Cairn submits).
    #[command(hide = true)]
    SlurmWorker(slurm_worker::Args),
}

/// Parse arguments, run, and return the process exit status.
pub fn main() -> i32 {
    let cli = match Cli::try_parse() {
        Ok(c) => c,
        Err(e) => {
            let _ = e.print();
            return if e.use_stderr() { 2 } else { 0 };
        }
    };
    let status = match cli.command {
        Command::Engines(a) => engines::run(&a),
        Command::Evaluate(a) => evaluate::run(a),
        Command::Check(a) => check::run(&a),
        Command::Band(a) => band::run(a),
        Command::Scan(a) => scan::run(a),
        Command::Walk(a) => walk::run(a),
        Command::Irc(a) => irc::run(a),
        Command::Relax(a) => relax::run(a),
        Command::Saddle(a) => saddle::run(a),
        Command::Modes(a) => modes::run(a),
        Command::Run(a) => run::run(&a),
        Command::Status(a) => status::run(&a),
        Command::Report(a) => report::run(&a),
        Command::Thermo(a) => thermo::run(a),
        Command::SlurmWorker(a) => slurm_worker::run(&a),
    };
    // Scratch directories of finished runs are removed in the background; do not leave any.
    crate::engine::process::finish_scratch_removal();
    status
}
