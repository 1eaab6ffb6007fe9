//! Helpers shared by the Slurm integration tests (tests/slurm_*.rs). They need a running Slurm
//! (CI starts one with .ci/slurm/start-local-slurm); without `sinfo` they print why they skip.
#![allow(dead_code)]

use cairn::engine::{find_engine, Job, Settings};
use cairn::executor::{Executor, RunReport};
use cairn::slurm::{Cluster, SlurmOptions};
use std::path::{Path, PathBuf};
use std::process::Command;
use std::sync::Arc;
use std::time::{Duration, Instant};

/// True when Slurm is there to test against. Without `sinfo` on PATH: prints a clear SKIPPED
/// line and returns false (so `cargo test` stays green on machines without Slurm). With `sinfo`
/// but no working cluster: fails, because then a test run that means to check Slurm would pass
/// without checking anything.
pub fn slurm_ready(test: &str) -> bool {
    if cairn::slurm::which("sinfo").is_none() {
        // Straight to stderr, not eprintln!: the test harness hides eprintln! output of passing
        // tests, and a skip must be seen.
        use std::io::Write;
        let _ = writeln!(
            std::io::stderr(),
            "SKIPPED {test}: `sinfo` not found, Slurm is not installed on this machine \
             (CI installs slurm-wlm and munge and starts a local cluster with .ci/slurm/start-local-slurm)"
        );
        return false;
    }
    let out = Command::new("sinfo")
        .args(["-h", "-o", "%T"])
        .output()
        .expect("sinfo runs");
    let states = String::from_utf8_lossy(&out.stdout);
    assert!(
        out.status.success()
            && states
                .lines()
                .any(|s| matches!(s.trim(), "idle" | "mixed" | "allocated" | "completing")),
        "Slurm is installed but no node is usable (sinfo: {} {}); start it with .ci/slurm/start-local-slurm (as root)",
        states.trim(),
        String::from_utf8_lossy(&out.stderr).trim()
    );
    true
}

pub fn cairn_exe() -> PathBuf {
    PathBuf::from(env!("CARGO_BIN_EXE_cairn"))
}

/// Directory of the test adapters (slow-xtb).
pub fn fixture_adapters() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("tests/fixtures/slurm")
}

/// `cairn run STUDY --dir DIR [extra]`, with the fixture adapters visible and one thread per
/// engine run.
pub fn cairn_run(study: &Path, dir: &Path, extra: &[&str]) -> Command {
    let mut c = Command::new(cairn_exe());
    c.arg("run")
        .arg(study)
        .arg("--dir")
        .arg(dir)
        .args(extra)
        .env("CAIRN_ADAPTERS", fixture_adapters())
        .env("OMP_NUM_THREADS", "1")
        .env("CAIRN_SLURM_POLL_MS", "300");
    c
}

/// `(job id, spec hash)` per line of DIR/cluster/submissions.log.
pub fn submissions(dir: &Path) -> Vec<(u64, String)> {
    std::fs::read_to_string(dir.join("cluster/submissions.log"))
        .unwrap_or_default()
        .lines()
        .filter_map(|l| {
            let mut w = l.split_whitespace();
            Some((w.next()?.parse().ok()?, w.next()?.to_string()))
        })
        .collect()
}

/// Slurm's state of each id (squeue), e.g. "PENDING", "RUNNING".
pub fn squeue_states(ids: &[u64]) -> Vec<(u64, String)> {
    if ids.is_empty() {
        return vec![];
    }
    let list: Vec<String> = ids.iter().map(u64::to_string).collect();
    let out = Command::new("squeue")
        .args(["-h", "-t", "all", "-j", &list.join(","), "-o", "%i|%T"])
        .output()
        .expect("squeue runs");
    String::from_utf8_lossy(&out.stdout)
        .lines()
        .filter_map(|l| {
            let (a, b) = l.split_once('|')?;
            Some((a.trim().parse().ok()?, b.trim().to_string()))
        })
        .collect()
}

/// Poll `f` every 200 ms until it returns Some, at most `secs` seconds.
pub fn wait_for<T>(secs: u64, what: &str, mut f: impl FnMut() -> Option<T>) -> T {
    let t0 = Instant::now();
    loop {
        if let Some(x) = f() {
            return x;
        }
        assert!(
            t0.elapsed() < Duration::from_secs(secs),
            "timed out after {secs} s waiting for {what}"
        );
        std::thread::sleep(Duration::from_millis(200));
    }
}

/// Copy a geometry from workflows-demo/geometries (GFN2-xTB minima) into `dir`.
pub fn demo_geometry(dir: &Path, name: &str) {
    let src = PathBuf::from(env!("CARGO_MANIFEST_DIR"))
        .join("workflows-demo/geometries")
        .join(name);
    std::fs::copy(&src, dir.join(name)).expect("copy geometry");
}

pub fn water() -> Job {
    let m = cairn::xyz::read(
        &PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("tests/data/studies/geometries/water.xyz"),
    )
    .unwrap();
    Job {
        elements: m.elements.clone(),
        coords: m.flat(),
        charge: 0,
        multiplicity: 1,
        quantity: cairn::eval::Quantity::Gradient,
        threads: 1,
    }
}

pub fn settings(delay: u32) -> Settings {
    [
        ("method".to_string(), "gfn2".to_string()),
        ("delay".to_string(), delay.to_string()),
    ]
    .into()
}

/// Run one water gradient through a Slurm executor of level "t" with `opts`.
pub fn run_one(root: &Path, retries: usize, delay: u32, opts: SlurmOptions) -> RunReport {
    // The worker (in the job) must find the fixture adapter: sbatch exports our environment.
    std::env::set_var("CAIRN_ADAPTERS", fixture_adapters());
    std::env::set_var("OMP_NUM_THREADS", "1");
    let cluster = Cluster::with_worker(root, cairn_exe()).unwrap();
    let s = settings(delay);
    let engine = find_engine("slow-xtb", &s).unwrap();
    let ex: Arc<dyn Executor> = Arc::new(
        cluster
            .executor("t", "slow-xtb", &s, opts)
            .with_retries(retries),
    );
    let mut r =
        cairn::driver::block_on(async move { Ok(ex.run(engine, vec![water()]).await) }).unwrap();
    r.remove(0)
}

/// Job ids recorded under a cluster directory (record.json files).
pub fn recorded_ids(root: &Path) -> Vec<u64> {
    let mut ids = Vec::new();
    if let Ok(rd) = std::fs::read_dir(root.join("jobs")) {
        for e in rd.flatten() {
            if let Ok(t) = std::fs::read_to_string(e.path().join("record.json")) {
                let v: serde_json::Value = serde_json::from_str(&t).unwrap();
                if let Some(id) = v["job_id"].as_u64() {
                    ids.push(id);
                }
            }
        }
    }
    ids
}
