//! A node that fails under a running job: the job ends NODE_FAIL (it was submitted with
//! `--no-requeue`, so Slurm does not requeue it itself), and Cairn submits it again; the
//! evaluation completes with the same answer as plain xtb.
//!
//! The failure is real: `scontrol update NodeName=… State=DOWN` on the local single-node Slurm
//! while the job runs, then `State=RESUME`. Measured on this Slurm 22.05 (by hand, this
//! session): a running `--no-requeue` job ends `NODE_FAIL`, Reason `NodeDown`; without
//! `--no-requeue` Slurm requeues it itself (PENDING, Restarts=1) and Cairn simply waits.
//! This test is alone in its binary because it takes the only node down for a moment, which
//! would disturb any other Slurm test running beside it. Needs root (CI runs as root).

mod slurm_support;

use cairn::slurm::SlurmOptions;
use slurm_support::*;
use std::process::Command;

fn node() -> String {
    let out = Command::new("sinfo")
        .args(["-h", "-N", "-o", "%N"])
        .output()
        .expect("sinfo runs");
    String::from_utf8_lossy(&out.stdout)
        .lines()
        .next()
        .unwrap_or("")
        .trim()
        .to_string()
}

fn set_node(node: &str, state: &str) -> String {
    let out = Command::new("scontrol")
        .args([
            "update",
            &format!("NodeName={node}"),
            &format!("State={state}"),
            "Reason=cairn-node-failure-test",
        ])
        .output()
        .expect("scontrol runs");
    format!(
        "{}{}",
        String::from_utf8_lossy(&out.stdout),
        String::from_utf8_lossy(&out.stderr)
    )
}

/// Brings the node back whatever happens in the test.
struct Resume(String);
impl Drop for Resume {
    fn drop(&mut self) {
        let _ = set_node(&self.0, "RESUME");
        let _ = wait_for_idle(&self.0);
    }
}

fn wait_for_idle(node: &str) -> bool {
    for _ in 0..100 {
        let out = Command::new("sinfo")
            .args(["-h", "-n", node, "-o", "%T"])
            .output()
            .expect("sinfo runs");
        let s = String::from_utf8_lossy(&out.stdout);
        if matches!(s.trim(), "idle" | "mixed" | "allocated") {
            return true;
        }
        std::thread::sleep(std::time::Duration::from_millis(200));
    }
    false
}

#[test]
fn a_job_whose_node_fails_is_submitted_again_and_completes() {
    if !slurm_ready("a_job_whose_node_fails_is_submitted_again_and_completes") {
        return;
    }
    if unsafe { libc::geteuid() } != 0 {
        use std::io::Write;
        let _ = writeln!(
            std::io::stderr(),
            "SKIPPED a_job_whose_node_fails_is_submitted_again_and_completes: taking a node down needs root (CI runs as root)"
        );
        return;
    }
    let node = node();
    assert!(!node.is_empty(), "no node in sinfo");
    let top = tempfile::tempdir().unwrap();
    let root = top.path().join("cluster");
    let r2 = root.clone();
    // The stand-in engine sleeps 8 s, so the job is surely running when the node goes down.
    let opts = SlurmOptions {
        directives: vec!["--no-requeue".into()],
        ..Default::default()
    };
    let h = std::thread::spawn(move || run_one(&r2, 0, 8, opts));
    let first = wait_for(60, "the job running", || {
        let ids = recorded_ids(&root);
        let st = squeue_states(&ids);
        st.iter().find(|(_, s)| s == "RUNNING").map(|(id, _)| *id)
    });
    let guard = Resume(node.clone());
    let said = set_node(&node, "DOWN");
    assert!(!said.contains("error"), "scontrol: {said}");
    let state = wait_for(30, "NODE_FAIL", || {
        squeue_states(&[first])
            .into_iter()
            .find(|(_, s)| s != "RUNNING" && s != "COMPLETING")
            .map(|(_, s)| s)
    });
    assert_eq!(state, "NODE_FAIL");
    drop(guard); // RESUME, wait until the node is usable again
    assert!(wait_for_idle(&node), "the node came back");

    // The evaluation completes although its retry budget is 0: a node failure is not the
    // engine's fault, so it is submitted again rather than counted as a failed attempt.
    let r = h.join().unwrap();
    let o = r.result.expect("completed after the resubmission");
    let local = cairn::engine::find_engine("slow-xtb", &settings(0))
        .unwrap()
        .evaluate(&water(), 0)
        .unwrap();
    assert!(
        (o.answer.energy - local.answer.energy).abs() < 1e-9,
        "{} vs {}",
        o.answer.energy,
        local.answer.energy
    );
    // Two submissions of one spec, two different job ids: the failed one and its successor.
    let subs = submissions(top.path());
    assert_eq!(subs.len(), 2, "{subs:?}");
    assert_ne!(subs[0].0, subs[1].0);
    assert_eq!(subs[0].1, subs[1].1, "the same spec was submitted again");
    assert_eq!(subs[0].0, first);
}
