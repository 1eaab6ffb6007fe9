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
    /// Progress display: `auto` (bars on a terminal, lines otherwise), `lines`, or `none`.
    #[arg(long, default_value = "auto", value_parser = ["auto", "lines", "none"])]
    pub progress: String,
}

/// Exit status when every reaction is verified.
pub const EXIT_VERIFIED: i32 = 0;
/// Exit status when the study could not run (bad study file, directory locked, I/O error).
pub const EXIT_ERROR: i32 = 1;
/// Exit status when the study ran to the end but some reaction is unverified or failed.
pub const EXIT_NOT_ALL_VERIFIED: i32 = 2;

/// Exit status: 0 when every reaction is verified, 2 when the study ran but some reaction is
/// unverified or failed (summary.json says why), 1 when it could not run at all.
pub fn run(args: &Args) -> i32 {
    let s = match study::load(&args.study) {
        Ok(s) => s,
        Err(e) => {
            eprintln!("error: {e}");
            return EXIT_ERROR;
        }
    };
    let progress = match args.progress.as_str() {
        "lines" => study::progress::ProgressMode::Lines,
        "none" => study::progress::ProgressMode::Quiet,
        _ => study::progress::ProgressMode::Auto,
    };
    let opts = study::run::RunOptions {
        dir: args.dir.clone(),
        jobs: args.jobs,
        progress,
    };
    let report = match crate::driver::block_on(study::run::run(&s, &opts)) {
        Ok(r) => r,
        Err(e) => {
            eprintln!("error: {e}");
            return EXIT_ERROR;
        }
    };
    if report.nothing_to_do() {
        println!(
            "nothing to do: all {} tasks were finished by an earlier run in {}",
            report.tasks_finished_earlier,
            args.dir.display()
        );
    } else {
        print!("{}", report.state.table());
    }
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
        let retries = match sm.engine_retries {
            0 => String::new(),
            1 => ", 1 engine retry".to_string(),
            n => format!(", {n} engine retries"),
        };
        println!(
            "{}: {status}{barrier}{nu}{retries} ({})",
            sm.name, sm.reason
        );
    }
    if all {
        EXIT_VERIFIED
    } else {
        EXIT_NOT_ALL_VERIFIED
    }
}
