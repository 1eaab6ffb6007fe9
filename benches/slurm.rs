//! Slurm executor costs, against the real local Slurm (.ci/slurm/start-local-slurm).
//!
//! The same batch of short xtb evaluations (water gradients at displaced geometries, a few tens
//! of milliseconds each) runs through: the local pool (2 slots, the reference), Slurm with one
//! job per evaluation, Slurm with the batch grouped into about 4 jobs (⌈n/4⌉ evaluations each),
//! and Slurm with one job for the whole batch. The table shows wall time per evaluation, the
//! scheduler overhead per evaluation (Slurm wall minus local wall, per evaluation), how fast
//! sbatch accepts jobs (jobs ÷ seconds from the first sbatch call's start to the last one's end;
//! one job alone measures a single call), and the gain from grouping (wall of
//! one-job-per-evaluation ÷ wall of the grouped run): ratios within one run, so a busy machine
//! shifts all rows alike.
//!
//! `cargo bench --bench slurm` runs 20 evaluations per row; under `cargo test` (no `--bench`
//! argument) 6, as a smoke test. Without `sinfo` it prints why it skips.

use cairn::engine::{find_engine, Engine, Job, Settings};
use cairn::executor::{Executor, LocalExecutor};
use cairn::slurm::{Cluster, SlurmOptions};
use std::sync::Arc;
use std::time::Instant;

fn water(i: usize) -> Job {
    // Water (Å → bohr), the first H displaced by a different small amount per evaluation so
    // that every evaluation is distinct.
    let b = cairn::units::BOHR_PER_ANGSTROM;
    let d = 0.001 * i as f64;
    let x = [
        0.0,
        0.0,
        0.1173,
        0.0,
        0.7572 + d,
        -0.4692,
        0.0,
        -0.7572,
        -0.4692,
    ];
    Job {
        elements: ["O", "H", "H"]
            .iter()
            .map(|s| cairn::elements::Element::from_symbol(s).expect("element"))
            .collect(),
        coords: nalgebra::DVector::from_iterator(9, x.iter().map(|v| v * b)),
        charge: 0,
        multiplicity: 1,
        quantity: cairn::eval::Quantity::Gradient,
        threads: 1,
    }
}

struct Row {
    name: String,
    jobs: u64,
    wall: f64,
    sbatch: f64,
}

fn main() {
    let full = std::env::args().any(|a| a == "--bench");
    let n = if full { 20 } else { 6 };
    if cairn::slurm::which("sinfo").is_none() {
        println!("slurm bench SKIPPED: `sinfo` not found (Slurm is not installed; .ci/slurm/start-local-slurm starts a local one)");
        return;
    }
    std::env::set_var("OMP_NUM_THREADS", "1");
    let settings: Settings = [("method".to_string(), "gfn2".to_string())].into();
    let engine: Arc<dyn Engine> = find_engine("xtb", &settings).expect("xtb adapter");
    let rt = tokio::runtime::Builder::new_multi_thread()
        .worker_threads(1)
        .enable_all()
        .build()
        .expect("runtime");
    let jobs: Vec<Job> = (0..n).map(water).collect();
    let mut rows = Vec::new();

    let local: Arc<dyn Executor> = Arc::new(LocalExecutor::new(2));
    let t0 = Instant::now();
    let r = rt.block_on(local.run(engine.clone(), jobs.clone()));
    assert!(
        r.iter().all(|x| x.result.is_ok()),
        "local evaluations succeed"
    );
    rows.push(Row {
        name: "local pool, 2 slots".into(),
        jobs: 0,
        wall: t0.elapsed().as_secs_f64(),
        sbatch: 0.0,
    });

    let per_group = n.div_ceil(4);
    let groups = [
        (1, "one job per evaluation".to_string()),
        (per_group, format!("grouped, {per_group} per job")),
        (n, "one job for the batch".to_string()),
    ];
    for (group, label) in groups {
        let dir = tempfile::tempdir().expect("temporary directory");
        let cluster = Cluster::with_worker(dir.path(), env!("CARGO_BIN_EXE_cairn"))
            .expect("Slurm client present");
        let opts = SlurmOptions {
            group,
            time_limit_minutes: Some(5),
            ..Default::default()
        };
        let ex: Arc<dyn Executor> = Arc::new(
            cluster
                .executor("bench", "xtb", &settings, opts)
                .with_retries(0),
        );
        let t0 = Instant::now();
        let r = rt.block_on(ex.run(engine.clone(), jobs.clone()));
        let wall = t0.elapsed().as_secs_f64();
        for x in &r {
            if let Err(e) = &x.result {
                panic!("evaluation through Slurm failed: {e}");
            }
        }
        rows.push(Row {
            name: format!("slurm, {label}"),
            jobs: cluster.submitted(),
            wall,
            sbatch: cluster.submit_window_seconds(),
        });
    }

    let local_wall = rows[0].wall;
    println!(
        "\nSlurm executor, {n} xtb gradient evaluations of water per row ({} mode)\n",
        if full { "full" } else { "quick" }
    );
    println!(
        "{:<36} {:>5} {:>9} {:>12} {:>15} {:>12}",
        "row", "jobs", "wall s", "s per eval", "overhead s/eval", "sbatch jobs/s"
    );
    for r in &rows {
        let per = r.wall / n as f64;
        let over = (r.wall - local_wall) / n as f64;
        // Jobs accepted per second of submitting (first sbatch start to last sbatch end).
        let rate = if r.jobs > 0 && r.sbatch > 0.0 {
            format!("{:.0}", r.jobs as f64 / r.sbatch)
        } else {
            "-".into()
        };
        println!(
            "{:<36} {:>5} {:>9.2} {:>12.3} {:>15.3} {:>12}",
            r.name, r.jobs, r.wall, per, over, rate
        );
    }
    let one = rows[1].wall;
    println!(
        "\ngain from grouping: one job per evaluation ÷ grouped ({per_group} per job) = {:.2}×; ÷ one job for the batch = {:.2}×",
        one / rows[2].wall,
        one / rows[3].wall
    );
    println!(
        "Slurm ÷ local wall: {:.1}× (one job per evaluation), {:.1}× (grouped), {:.1}× (one job)",
        one / local_wall,
        rows[2].wall / local_wall,
        rows[3].wall / local_wall
    );
}
