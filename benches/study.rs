//! The study runner's own costs, as a table:
//!
//! 1. Resume of a finished study: a Müller–Brown study of many reactions (each a saddle guess
//!    → refine → modes → IRC → verify; ten distinct guesses, repeated) is run once, then run
//!    again on the same directory. The second run must reach "nothing to do"; target under 2 s
//!    for 1,000 reactions.
//! 2. Parallel efficiency on the demo study (GFN2-xTB, 5 reactions, 2 slots): the ideal wall
//!    time is the engine time ÷ slots; efficiency = ideal ÷ actual wall, target ≥ 0.9.
//!
//! `cargo bench --bench study` runs both at full size (`-- demo` runs part 2 alone, `-- repeat=N`
//! repeats it N times and prints medians). Part 2 also runs the demo with scratch forced onto
//! the disk, for the wall-time ratio of disk and RAM scratch within one run. Under `cargo test` (no `--bench` argument) part 1
//! runs with 50 reactions and part 2 is skipped, as a smoke test.

use cairn::study::progress::ProgressMode;
use cairn::study::run::{run, RunOptions};
use std::path::Path;
use std::time::Instant;

fn mb_study(dir: &Path, reactions: usize) -> std::path::PathBuf {
    let geo = dir.join("geometries");
    std::fs::create_dir_all(&geo).unwrap();
    let mut yaml = String::from(
        "study: resume-bench\nlevels:\n  surface: {engine: muller-brown}\npipeline:\n  - refine\n  - modes: {imaginary-threshold: 0}\n  - irc: {step: 0.02, max-steps: 200}\n  - verify\nreactions:\n",
    );
    for g in 0..10 {
        // Guesses scattered around saddle S1 (−0.822, 0.624).
        let x = -0.80 + 0.004 * g as f64;
        let y = 0.60 + 0.003 * g as f64;
        std::fs::write(
            geo.join(format!("g{g}.xyz")),
            format!("1\nguess {g} near S1 (surface units)\nX {x:.4} {y:.4} 0.0\n"),
        )
        .unwrap();
    }
    for k in 0..reactions {
        yaml.push_str(&format!(
            "  - name: r{k:04}\n    guess: geometries/g{}.xyz\n",
            k % 10
        ));
    }
    let path = dir.join("study.yaml");
    std::fs::write(&path, yaml).unwrap();
    path
}

fn main() {
    let args: Vec<String> = std::env::args().collect();
    let full = args.iter().any(|a| a == "--bench");
    let demo_only = args.iter().any(|a| a == "demo");
    let repeat: usize = args
        .iter()
        .find_map(|a| a.strip_prefix("repeat=").and_then(|n| n.parse().ok()))
        .unwrap_or(1)
        .max(1);
    let top = tempfile::tempdir().unwrap();
    println!(
        "study runner benchmark ({})",
        if full { "full" } else { "quick" }
    );
    println!();
    println!("| what | reactions | tasks | wall s | note |");
    println!("|---|---:|---:|---:|---|");
    if !demo_only {
        resume_part(top.path(), if full { 1000 } else { 50 });
    }
    if full {
        demo_part(top.path(), repeat);
    }
}

/// Part 1: a finished many-reaction study resumed.
fn resume_part(top: &Path, n: usize) {
    let study_path = mb_study(top, n);
    let out = top.join("run");
    let mut opts = RunOptions::new(&out, 2);
    opts.progress = ProgressMode::Quiet;

    let t = Instant::now();
    let study = cairn::study::load(&study_path).unwrap();
    let first = cairn::driver::block_on(run(&study, &opts)).unwrap();
    let first_s = t.elapsed().as_secs_f64();
    let verified = first
        .summaries
        .iter()
        .filter(|s| s.status == cairn::study::record::Verdict::Verified)
        .count();

    // The resume, as a user runs it: load the study file, run on the same directory.
    let t = Instant::now();
    let study = cairn::study::load(&study_path).unwrap();
    let again = cairn::driver::block_on(run(&study, &opts)).unwrap();
    let resume_s = t.elapsed().as_secs_f64();
    assert!(again.nothing_to_do(), "the second run had work to do");

    println!(
        "| first run (Müller–Brown) | {n} | {} | {first_s:.2} | {verified} verified |",
        first.tasks_run
    );
    println!(
        "| resume, finished study | {n} | {} | {resume_s:.3} | nothing to do; target < 2 s at 1,000 reactions: {} |",
        again.tasks_finished_earlier,
        if n >= 1000 {
            if resume_s < 2.0 { "met" } else { "NOT met" }
        } else {
            "n/a at this size"
        }
    );
}

/// Part 2: the demo on xtb, 2 slots, each time in a fresh directory; each repeat runs it with
/// the adapter's scratch place (RAM for xtb) and then with scratch forced onto the disk of the
/// system temporary directory, for the ratio of the two within this run.
fn demo_part(top: &Path, repeat: usize) {
    std::env::set_var("OMP_NUM_THREADS", "1");
    let demo = Path::new(env!("CARGO_MANIFEST_DIR")).join("workflows-demo/demo.yaml");
    let study = cairn::study::load(&demo).unwrap();
    let disk = tempfile::tempdir().unwrap();
    let mut effs = Vec::new();
    let mut ratios = Vec::new();
    for k in 0..repeat {
        let mut walls = [0.0; 2];
        for (v, on_disk) in [false, true].into_iter().enumerate() {
            if on_disk {
                std::env::set_var("CAIRN_SCRATCH", disk.path());
            } else {
                std::env::remove_var("CAIRN_SCRATCH");
            }
            let dir = top.join(format!("demo-{k}-{v}"));
            let mut opts = RunOptions::new(&dir, 2);
            opts.progress = ProgressMode::Quiet;
            let t = Instant::now();
            let rep = cairn::driver::block_on(run(&study, &opts)).unwrap();
            let wall = t.elapsed().as_secs_f64();
            walls[v] = wall;
            let ideal = rep.engine_seconds / 2.0;
            let eff = ideal / wall;
            if !on_disk {
                effs.push(eff);
            }
            println!(
                "| demo study, xtb, 2 slots, scratch {} (run {}) | {} | {} | {wall:.1} | engine {:.1} s, ideal {ideal:.1} s, efficiency {eff:.2}{} |",
                if on_disk { "on disk" } else { "as the adapter says" },
                k + 1,
                rep.summaries.len(),
                rep.tasks_run,
                rep.engine_seconds,
                if on_disk { "" } else { " (target ≥ 0.9)" },
            );
        }
        ratios.push(walls[1] / walls[0]);
    }
    std::env::remove_var("CAIRN_SCRATCH");
    let median = |v: &mut Vec<f64>| {
        v.sort_by(f64::total_cmp);
        v[v.len() / 2]
    };
    let eff = median(&mut effs);
    println!(
        "| demo study, median of {repeat} | | | | efficiency {eff:.2} (target ≥ 0.9: {}); wall with scratch on disk ÷ as the adapter says: {:.2} |",
        if eff >= 0.9 { "met" } else { "NOT met" },
        median(&mut ratios)
    );
}
