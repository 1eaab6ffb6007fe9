//! `cairn run STUDY.yaml --dir DIR`: run every reaction of a study; results, state record and
//! per-reaction summaries go to DIR (and nowhere else). Running again resumes from DIR's store.

use crate::study::{self, record::Verdict};
use std::path::PathBuf;

#[derive(clap::Args, Debug)]
pub struct Args {
    /// The study file (YAML).
    pub study: PathBuf,
    /// Output directory (created if missing; locked while the run lasts).
    #[arg(long)]
    pub dir: PathBuf,
    /// Engine jobs at once.
    #[arg(long, default_value_t = 2)]
    pub jobs: usize,
}

/// Exit status: 0 when every reaction is verified, 1 otherwise (or on an error).
pub fn run(args: &Args) -> i32 {
    let s = match study::load(&args.study) {
        Ok(s) => s,
        Err(e) => {
            eprintln!("error: {e}");
            return 1;
        }
    };
    let opts = study::run::RunOptions {
        dir: args.dir.clone(),
        jobs: args.jobs,
    };
    let report = match crate::driver::block_on(study::run::run(&s, &opts)) {
        Ok(r) => r,
        Err(e) => {
            eprintln!("error: {e}");
            return 1;
        }
    };
    print!("{}", report.state.table());
    println!();
    let mut all = true;
    for sm in &report.summaries {
        let status = match sm.status {
            Verdict::Verified => "verified",
            Verdict::Unverified => "unverified",
            Verdict::Failed => "failed",
        };
        all &= sm.status == Verdict::Verified;
        let barrier = sm
            .barrier_forward_kcal_mol
            .map(|b| format!(", barrier {b:.1} kcal/mol"))
            .unwrap_or_default();
        let nu = sm
            .imaginary_frequency_cm1
            .map(|f| format!(", imaginary {f:.0}i cm⁻¹"))
            .unwrap_or_default();
        println!("{}: {status}{barrier}{nu} ({})", sm.name, sm.reason);
    }
    if all {
        0
    } else {
        1
    }
}
