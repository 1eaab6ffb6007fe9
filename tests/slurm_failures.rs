//! Slurm ends that are not a success, each reported with Slurm's own State and Reason: a job
//! exiting non-zero (a failing setup line; retried within the budget, then failed), a job
//! cancelled outside Cairn, a job killed at its time limit (the one slow test here: Slurm time
//! limits are whole minutes and checked every ~30 s, so it costs about 90 s), and Ctrl-C on
//! `cairn run`, which cancels the study's own jobs by id and exits 130.
//!
//! Runs against the local single-node Slurm that CI starts; skipped with a printed reason when
//! `sinfo` is absent. Values checked are Slurm's own words (slurm.md §3, measured on this
//! Slurm 22.05): FAILED/NonZeroExitCode/3:0, CANCELLED, TIMEOUT/TimeLimit.

mod slurm_support;

use cairn::engine::FailureKind;
use cairn::slurm::SlurmOptions;
use slurm_support::*;

#[test]
fn a_job_exiting_non_zero_is_retried_then_failed_with_slurms_reason() {
    if !slurm_ready("a_job_exiting_non_zero_is_retried_then_failed_with_slurms_reason") {
        return;
    }
    let top = tempfile::tempdir().unwrap();
    let root = top.path().join("cluster");
    let opts = SlurmOptions {
        setup: vec!["exit 3".into()],
        ..Default::default()
    };
    let r = run_one(&root, 1, 0, opts);
    let err = r.result.expect_err("the job cannot succeed");
    eprintln!("reported: {err}");
    assert_eq!(err.kind, FailureKind::Crash);
    for word in [
        "State=FAILED",
        "Reason=NonZeroExitCode",
        "ExitCode=3:0",
        "level \"t\"",
    ] {
        assert!(
            err.message.contains(word),
            "missing {word}: {}",
            err.message
        );
    }
    // Retry budget 1: two jobs (attempts 0 and 1), two failures, each with its own job id.
    assert_eq!(r.attempts, 2);
    assert_eq!(r.failures.len(), 2);
    assert_eq!(submissions(top.path()).len(), 2);
}

#[test]
fn a_job_cancelled_outside_cairn_is_reported_as_cancelled() {
    if !slurm_ready("a_job_cancelled_outside_cairn_is_reported_as_cancelled") {
        return;
    }
    let top = tempfile::tempdir().unwrap();
    let root = top.path().join("cluster");
    let r2 = root.clone();
    let h = std::thread::spawn(move || run_one(&r2, 2, 120, SlurmOptions::default()));
    let id = wait_for(60, "the job running", || {
        let ids = recorded_ids(&root);
        squeue_states(&ids)
            .into_iter()
            .find(|s| s.1 == "RUNNING")
            .map(|s| s.0)
    });
    let st = std::process::Command::new("scancel")
        .arg(id.to_string())
        .status()
        .unwrap();
    assert!(st.success());
    let r = h.join().unwrap();
    let err = r.result.expect_err("cancelled");
    eprintln!("reported: {err}");
    for word in [
        &format!("Slurm job {id} ended"),
        "State=CANCELLED",
        "cancelled outside Cairn",
    ] {
        assert!(
            err.message.contains(word),
            "missing {word}: {}",
            err.message
        );
    }
    // Not retried, although the budget allows 2: a cancellation is a person's decision.
    assert_eq!(submissions(top.path()).len(), 1);
}

#[test]
fn a_job_over_its_time_limit_fails_as_a_timeout_with_slurms_reason() {
    if !slurm_ready("a_job_over_its_time_limit_fails_as_a_timeout_with_slurms_reason") {
        return;
    }
    let top = tempfile::tempdir().unwrap();
    let root = top.path().join("cluster");
    let opts = SlurmOptions {
        time_limit_minutes: Some(1),
        ..Default::default()
    };
    // The stand-in sleeps 300 s; Slurm ends the job after its 1 minute (73-85 s measured).
    let r = run_one(&root, 0, 300, opts);
    let err = r.result.expect_err("killed at the limit");
    eprintln!("reported: {err}");
    assert_eq!(err.kind, FailureKind::Timeout);
    for word in ["State=TIMEOUT", "Reason=TimeLimit"] {
        assert!(
            err.message.contains(word),
            "missing {word}: {}",
            err.message
        );
    }
    assert_eq!(
        err.output.as_deref().map(|p| p.exists()),
        Some(true),
        "job log named"
    );
}

#[test]
fn ctrl_c_cancels_the_studys_jobs_by_id_and_exits_130() {
    if !slurm_ready("ctrl_c_cancels_the_studys_jobs_by_id_and_exits_130") {
        return;
    }
    let top = tempfile::tempdir().unwrap();
    for g in ["hcn.xyz", "hnc.xyz"] {
        demo_geometry(top.path(), g);
    }
    let study = top.path().join("s.yaml");
    std::fs::write(
        &study,
        "levels:\n  slow: {engine: slow-xtb, settings: {delay: 120}}\npipeline: [relax-ends]\nreactions:\n  - {name: a, reactant: hcn.xyz}\n  - {name: b, reactant: hnc.xyz}\n",
    )
    .unwrap();
    let dir = top.path().join("run");
    let child = cairn_run(&study, &dir, &["--executor", "slurm"])
        .stderr(std::process::Stdio::piped())
        .stdout(std::process::Stdio::null())
        .spawn()
        .unwrap();
    let ids: Vec<u64> = wait_for(60, "two jobs submitted", || {
        let s = submissions(&dir);
        (s.len() == 2).then(|| s.iter().map(|x| x.0).collect())
    });
    // SAFETY: plain kill(2) on our own child's pid.
    let rc = unsafe { libc::kill(child.id() as i32, libc::SIGINT) };
    assert_eq!(rc, 0);
    let out = child.wait_with_output().unwrap();
    assert_eq!(out.status.code(), Some(130));
    let stderr = String::from_utf8_lossy(&out.stderr);
    for id in &ids {
        assert!(stderr.contains(&id.to_string()), "{id} not named: {stderr}");
    }
    let states = wait_for(20, "both jobs cancelled", || {
        let s = squeue_states(&ids);
        (s.len() == 2 && s.iter().all(|x| x.1 == "CANCELLED")).then_some(s)
    });
    assert_eq!(states.len(), 2);
    // The records say so, so that the next run submits them again instead of adopting them.
    let records = std::fs::read_dir(dir.join("cluster/jobs")).unwrap();
    for e in records.flatten() {
        let t = std::fs::read_to_string(e.path().join("record.json")).unwrap();
        assert!(t.contains("\"cancelled_by_cairn\""), "{t}");
    }
}
