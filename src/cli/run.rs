//! `cairn run STUDY.yaml --dir DIR`: run every reaction of a study; results, state record and
//! per-reaction summaries go to DIR (and nowhere else). Running again resumes from DIR's store.

use crate::study::{self, record::Verdict, ExecutorKind};
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
    /// Where engine evaluations run; overrides the study's `defaults.executor`.
    #[arg(long, value_enum)]
    pub executor: Option<ExecutorKind>,
}

/// Exit status when every reaction is verified.
pub const EXIT_VERIFIED: i32 = 0;
/// Exit status when the study could not run (bad study file, directory locked, I/O error).
pub const EXIT_ERROR: i32 = 1;
/// Exit status when the study ran to the end but some reaction is unverified or failed.
pub const EXIT_NOT_ALL_VERIFIED: i32 = 2;

/// Exit status of a run stopped by Ctrl-C (128 + SIGINT, as shells report it); the study's
/// Slurm jobs are cancelled first.
pub const EXIT_INTERRUPTED: i32 = 130;

/// Exit status: 0 when every reaction is verified, 2 when the study ran but some reaction is
/// unverified or failed (summary.json says why), 1 when it could not run at all, 130 when
/// interrupted by Ctrl-C.
pub fn run(args: &Args) -> i32 {
    let mut s = match study::load(&args.study) {
        Ok(s) => s,
        Err(e) => {
            eprintln!("error: {e}");
            return EXIT_ERROR;
        }
    };
    if let Some(x) = args.executor {
        s.defaults.executor = x;
    }
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
    let rt = match tokio::runtime::Builder::new_multi_thread()
        .worker_threads(1)
        .enable_all()
        .build()
    {
        Ok(rt) => rt,
        Err(e) => {
            eprintln!("error: cannot start the async runtime: {e}");
            return EXIT_ERROR;
        }
    };
    let outcome = rt.block_on(async {
        tokio::select! {
            r = study::run::run(&s, &opts) => Some(r),
            _ = tokio::signal::ctrl_c() => None,
        }
    });
    let report = match outcome {
        Some(Ok(r)) => r,
        Some(Err(e)) => {
            eprintln!("error: {e}");
            return EXIT_ERROR;
        }
        None => {
            // Do not wait for engine runs in progress (local ones get SIGTERM when we exit).
            rt.shutdown_background();
            return interrupted(&args.dir);
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

/// Ctrl-C: cancel the study's own Slurm jobs (by their recorded ids) and say so.
fn interrupted(dir: &std::path::Path) -> i32 {
    match crate::slurm::cancel_recorded(&dir.join("cluster")) {
        Ok(ids) if ids.is_empty() => eprintln!("interrupted"),
        Ok(ids) => {
            let list: Vec<String> = ids.iter().map(u64::to_string).collect();
            eprintln!(
                "interrupted: cancelled {} Slurm job{} of this study ({}); run again to resume",
                ids.len(),
                if ids.len() == 1 { "" } else { "s" },
                list.join(", ")
            );
        }
        Err(e) => eprintln!("interrupted; cancelling the study's Slurm jobs failed: {e}"),
    }
    EXIT_INTERRUPTED
}
