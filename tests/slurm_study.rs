//! Studies on real xtb through a real Slurm (the local single-node cluster CI starts with
//! .ci/slurm/start-local-slurm): the summary equals the local pool's; a runner killed with
//! SIGKILL while its jobs are queued and running adopts them when started again (no job
//! submitted twice, counted by job id and spec hash) and the results are complete.
//!
//! Skipped, with a printed reason, when `sinfo` is absent.

mod slurm_support;

use cairn::study::record::{RunState, StateRecord, Summary};
use slurm_support::*;
use std::collections::HashSet;
use std::path::Path;

/// HCN ⇌ HNC from a hand-built saddle guess (H bridging the CN bond): refine, modes, a short
/// IRC, verify. About 35 engine batches.
fn hcn_study(dir: &Path) -> std::path::PathBuf {
    std::fs::copy(
        fixture_adapters().join("hcn-ts-guess.xyz"),
        dir.join("hcn-ts-guess.xyz"),
    )
    .unwrap();
    let text = "\
levels:
  gfn2:
    engine: xtb
    settings: {method: gfn2}
    slurm: {time-limit: 5m, cpus-per-task: 1, memory: 1G, group: 4, setup: ['export OMP_NUM_THREADS=1']}
pipeline:
  - refine
  - modes
  - irc: {step: 0.2, max-steps: 40}
  - verify
reactions:
  - name: hcn-hnc
    guess: hcn-ts-guess.xyz
";
    let p = dir.join("hcn.yaml");
    std::fs::write(&p, text).unwrap();
    p
}

fn summary(dir: &Path, reaction: &str) -> Summary {
    serde_json::from_str(&std::fs::read_to_string(dir.join(reaction).join("summary.json")).unwrap())
        .unwrap()
}

fn state(dir: &Path) -> StateRecord {
    serde_json::from_str(&std::fs::read_to_string(dir.join("state.json")).unwrap()).unwrap()
}

/// No spec hash submitted twice, no job id twice.
fn assert_no_double_submission(dir: &Path) -> usize {
    let subs = submissions(dir);
    let ids: HashSet<u64> = subs.iter().map(|s| s.0).collect();
    let hashes: HashSet<&String> = subs.iter().map(|s| &s.1).collect();
    assert_eq!(ids.len(), subs.len(), "a job id recorded twice: {subs:?}");
    assert_eq!(hashes.len(), subs.len(), "a spec submitted twice: {subs:?}");
    subs.len()
}

#[test]
fn xtb_study_through_slurm_equals_the_local_run() {
    if !slurm_ready("xtb_study_through_slurm_equals_the_local_run") {
        return;
    }
    let top = tempfile::tempdir().unwrap();
    let study = hcn_study(top.path());
    let local = top.path().join("local");
    let slurm = top.path().join("slurm");
    let st = cairn_run(&study, &local, &[]).status().unwrap();
    assert_eq!(st.code(), Some(0), "local run verifies");
    let out = cairn_run(&study, &slurm, &["--executor", "slurm"])
        .output()
        .unwrap();
    assert_eq!(
        out.status.code(),
        Some(0),
        "slurm run verifies: {}{}",
        String::from_utf8_lossy(&out.stdout),
        String::from_utf8_lossy(&out.stderr)
    );
    let (a, b) = (summary(&local, "hcn-hnc"), summary(&slurm, "hcn-hnc"));
    assert_eq!(a.status, b.status);
    assert_eq!(a.reason, b.reason);
    assert_eq!(a.n_imaginary, Some(1));
    assert_eq!(a.n_imaginary, b.n_imaginary);
    assert_eq!(a.irc_connects, b.irc_connects);
    // Same engine, same inputs, same deterministic algorithms: the same numbers. 1e-6 kcal/mol
    // leaves room only for a change of evaluation order, not of any result.
    for (x, y) in [
        (a.barrier_forward_kcal_mol, b.barrier_forward_kcal_mol),
        (a.barrier_reverse_kcal_mol, b.barrier_reverse_kcal_mol),
        (a.reaction_energy_kcal_mol, b.reaction_energy_kcal_mol),
        (a.imaginary_frequency_cm1, b.imaginary_frequency_cm1),
    ] {
        let (x, y) = (x.unwrap(), y.unwrap());
        assert!((x - y).abs() < 1e-6, "{x} vs {y}");
    }
    assert_eq!(a.gradient_evaluations, b.gradient_evaluations);
    assert_eq!(a.hessian_evaluations, b.hessian_evaluations);
    let n = assert_no_double_submission(&slurm);
    // Grouping: 4 evaluations per job at most, so fewer jobs than engine runs is possible
    // (the IRC asks for both directions at once) and never more.
    assert!(
        n as u64 <= b.engine_runs,
        "{n} jobs for {} runs",
        b.engine_runs
    );

    // Running again replays from the store: nothing is submitted.
    let again = cairn_run(&study, &slurm, &["--executor", "slurm"])
        .status()
        .unwrap();
    assert_eq!(again.code(), Some(0));
    assert_eq!(submissions(&slurm).len(), n, "a replay submitted jobs");
}

/// Four species (GFN2-xTB minima from workflows-demo/geometries), each relaxed by its own job
/// of 2 CPUs through the slow stand-in (sleeps 4 s, then xtb), so on a node of ≤ 4 CPUs some
/// jobs run while others wait.
fn four_species_study(dir: &Path, delay: u32) -> std::path::PathBuf {
    for g in ["hcn.xyz", "hnc.xyz", "hco-plus.xyz", "hoc-plus.xyz"] {
        demo_geometry(dir, g);
    }
    let text = format!(
        "\
levels:
  slow:
    engine: slow-xtb
    settings: {{method: gfn2, delay: {delay}}}
    slurm: {{cpus-per-task: 2, time-limit: 5m}}
pipeline: [relax-ends]
reactions:
  - {{name: a, reactant: hcn.xyz}}
  - {{name: b, reactant: hnc.xyz}}
  - {{name: c, reactant: hco-plus.xyz, charge: 1}}
  - {{name: d, reactant: hoc-plus.xyz, charge: 1}}
"
    );
    let p = dir.join(format!("four-{delay}.yaml"));
    std::fs::write(&p, text).unwrap();
    p
}

/// Relaxed energies from the species files' comments (`E = <x> Eh`), sorted.
fn species_energies(dir: &Path) -> Vec<f64> {
    let mut out = Vec::new();
    for e in std::fs::read_dir(dir.join("species")).unwrap() {
        let text = std::fs::read_to_string(e.unwrap().path()).unwrap();
        let comment = text.lines().nth(1).unwrap().to_string();
        let e: f64 = comment
            .split("E = ")
            .nth(1)
            .unwrap()
            .split_whitespace()
            .next()
            .unwrap()
            .parse()
            .unwrap();
        out.push(e);
    }
    out.sort_by(f64::total_cmp);
    out
}

#[test]
fn a_killed_runner_adopts_its_jobs_instead_of_submitting_them_again() {
    if !slurm_ready("a_killed_runner_adopts_its_jobs_instead_of_submitting_them_again") {
        return;
    }
    let top = tempfile::tempdir().unwrap();
    let study = four_species_study(top.path(), 4);
    let dir = top.path().join("run");
    let mut child = cairn_run(&study, &dir, &["--executor", "slurm"])
        .stdout(std::process::Stdio::null())
        .stderr(std::process::Stdio::null())
        .spawn()
        .unwrap();
    // Wait until all four first jobs are submitted and some run while others wait.
    let first: Vec<u64> = wait_for(60, "four submissions, running and pending", || {
        let subs = submissions(&dir);
        if subs.len() < 4 {
            return None;
        }
        let ids: Vec<u64> = subs.iter().map(|s| s.0).collect();
        let states = squeue_states(&ids);
        let running = states.iter().any(|s| s.1 == "RUNNING");
        let pending = states.iter().any(|s| s.1 == "PENDING");
        (running && pending).then_some(ids)
    });
    // SIGKILL: no chance to clean up or cancel anything.
    child.kill().unwrap();
    child.wait().unwrap();
    let live: Vec<(u64, String)> = squeue_states(&first);
    assert!(
        live.iter().any(|s| s.1 == "PENDING" || s.1 == "RUNNING"),
        "jobs still queued or running after the kill: {live:?}"
    );
    // Let some of them finish while no runner is there.
    wait_for(60, "a job finishing while the runner is dead", || {
        squeue_states(&first)
            .iter()
            .any(|s| s.1 == "COMPLETED")
            .then_some(())
    });

    let out = cairn_run(&study, &dir, &["--executor", "slurm"])
        .output()
        .unwrap();
    let text = String::from_utf8_lossy(&out.stdout).to_string();
    assert!(out.status.code().is_some(), "second run ended: {text}");
    let n = assert_no_double_submission(&dir);
    assert!(n >= 4);
    // The first four were adopted, not submitted again.
    let adopted = std::fs::read_to_string(dir.join("cluster/adoptions.log")).unwrap();
    for id in &first {
        assert!(
            adopted
                .lines()
                .any(|l| l.split_whitespace().next() == Some(&id.to_string())),
            "job {id} not adopted: {adopted}"
        );
    }
    // Results complete: every relaxation done, energies equal a plain local run's.
    let st = state(&dir);
    assert!(
        st.tasks.iter().all(|t| t.state == RunState::Done),
        "{text}\n{:?}",
        st.tasks
    );
    let local = top.path().join("local");
    let study0 = four_species_study(top.path(), 0);
    let _ = cairn_run(&study0, &local, &[]).status().unwrap();
    let (a, b) = (species_energies(&dir), species_energies(&local));
    assert_eq!(a.len(), 4);
    assert_eq!(b.len(), 4);
    for (x, y) in a.iter().zip(&b) {
        assert!((x - y).abs() < 1e-9, "{x} vs {y} Eh");
    }
}
