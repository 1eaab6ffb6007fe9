//! The study runner on the Müller–Brown surface: every stage kind runs, verdicts match the
//! surface's known connectivity, a second run replays from the store, the lock holds.
//!
//! Check values: reference-values.md §1.1 (stationary points and barriers, computed there by
//! Newton to |∇V| < 1e-12 [C]) and §1.2 (connectivity MA —S1— MC —S2— MB).

use cairn::study::record::{RunState, Verdict};
use cairn::study::{self, run};
use cairn::units::KCALMOL_PER_HARTREE;
use std::path::{Path, PathBuf};

fn data(f: &str) -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
        .join("tests/data/studies")
        .join(f)
}

fn run_mb(dir: &Path) -> run::RunReport {
    let s = study::load(&data("mb.yaml")).unwrap();
    let mut opts = run::RunOptions::new(dir, 2);
    opts.progress = cairn::study::progress::ProgressMode::Quiet;
    cairn::driver::block_on(run::run(&s, &opts)).unwrap()
}

/// Surface energies are reported through the Eh → kcal/mol conversion; undo it.
fn surface(kcal: Option<f64>) -> f64 {
    kcal.unwrap() / KCALMOL_PER_HARTREE
}

#[test]
fn muller_brown_study_runs_verifies_and_resumes() {
    let top = tempfile::tempdir().unwrap();
    let dir = top.path().join("run");
    let rep = run_mb(&dir);
    let by = |n: &str| rep.summaries.iter().find(|s| s.name == n).unwrap().clone();

    // MA → MC: the band's climbing image is S1; the IRC joins MA and MC.
    let ac = by("a-to-c");
    assert_eq!(ac.status, Verdict::Verified, "{}", ac.reason);
    assert_eq!(ac.n_imaginary, Some(1));
    assert_eq!(ac.irc_connects, Some(true));
    assert!((surface(ac.barrier_forward_kcal_mol) - 106.034674).abs() < 1e-3); // S1 − MA
    assert!((surface(ac.barrier_reverse_kcal_mol) - 40.102975).abs() < 1e-3); // S1 − MC
    assert!((surface(ac.reaction_energy_kcal_mol) - 65.931699).abs() < 1e-3); // MC − MA
    assert_eq!(ac.saddle_xyz.as_deref(), Some("a-to-c/saddle.xyz"));
    assert_eq!(ac.band_xyz.as_deref(), Some("a-to-c/band.xyz"));
    assert_eq!(ac.irc_xyz.as_deref(), Some("a-to-c/irc.xyz"));
    let saddle = cairn::xyz::read(&dir.join("a-to-c/saddle.xyz")).unwrap();
    assert!((saddle.coords[0][0] + 0.822001559).abs() < 1e-4, "S1 x");
    assert!((saddle.coords[0][1] - 0.624312803).abs() < 1e-4, "S1 y");

    // MA → MB is not one elementary step (it passes MC): the highest saddle on the way is
    // S1, whose IRC reaches MA and MC, not MB. Unverified, with the reason.
    let ab = by("a-to-b");
    assert_eq!(ab.status, Verdict::Unverified);
    assert_eq!(ab.irc_connects, Some(false));
    assert!(
        ab.reason
            .contains("not the reaction's reactant and product"),
        "{}",
        ab.reason
    );
    // ... it says which end is wrong, and keeps that minimum: MC (reference-values.md §1.1:
    // MC = (−0.050011, 0.466694)).
    assert!(
        ab.reason.contains(
            "it joins the reactant to an unexpected minimum (saved as a-to-b/unexpected-minimum-1.xyz)"
        ),
        "{}",
        ab.reason
    );
    let mc = cairn::xyz::read(&dir.join("a-to-b/unexpected-minimum-1.xyz")).unwrap();
    assert!((mc.coords[0][0] + 0.050011).abs() < 1e-3, "{:?}", mc.coords);
    assert!((mc.coords[0][1] - 0.466694).abs() < 1e-3, "{:?}", mc.coords);
    assert!(dir.join("a-to-c/irc-ends.xyz").exists());

    // Uphill from MC along its softest mode: S2 (S2 − MC = 8.518878).
    let up = by("c-uphill");
    assert_eq!(up.status, Verdict::Verified, "{}", up.reason);
    assert!((surface(up.barrier_forward_kcal_mol) - 8.518878).abs() < 1e-3);

    // From a guess near S1: the two barriers are S1 − MA and S1 − MC, in either order.
    let g = by("s1-guess");
    assert_eq!(g.status, Verdict::Verified, "{}", g.reason);
    let mut b = [
        surface(g.barrier_forward_kcal_mol),
        surface(g.barrier_reverse_kcal_mol),
    ];
    b.sort_by(f64::total_cmp);
    assert!(
        (b[0] - 40.102975).abs() < 1e-3 && (b[1] - 106.034674).abs() < 1e-3,
        "{b:?}"
    );

    // Records on disk; nothing outside DIR.
    assert!(rep.state.tasks.iter().all(|t| t.state == RunState::Done));
    for r in ["a-to-b", "a-to-c", "c-uphill", "s1-guess"] {
        let text = std::fs::read_to_string(dir.join(r).join("summary.json")).unwrap();
        let back: cairn::study::record::Summary = serde_json::from_str(&text).unwrap();
        assert_eq!(back.name, r);
    }
    // Results are readable by colleagues (rw-r--r--, common practice for output files), not
    // left with the owner-only mode of the temporary files they were written through.
    {
        use std::os::unix::fs::PermissionsExt;
        for f in ["state.json", "a-to-c/summary.json", "a-to-c/saddle.xyz"] {
            let mode = std::fs::metadata(dir.join(f)).unwrap().permissions().mode() & 0o777;
            assert_eq!(mode, 0o644, "{f}: {mode:o}");
        }
    }
    let state = std::fs::read_to_string(dir.join("state.json")).unwrap();
    let state = cairn::study::record::StateRecord::from_json(&state, "state.json").unwrap();
    assert_eq!(state.tasks.len(), 22);
    let outside: Vec<_> = std::fs::read_dir(top.path()).unwrap().collect();
    assert_eq!(outside.len(), 1, "only DIR was created");
    assert!(
        !dir.join(".lock").exists(),
        "the lock is released at the end"
    );
    let first_runs: u64 = rep.summaries.iter().map(|s| s.engine_runs).sum();
    assert!(first_runs > 0);

    // Again: every task has its marker, so nothing runs at all; same verdicts and numbers.
    let again = run_mb(&dir);
    assert!(again.nothing_to_do());
    assert_eq!(again.tasks_finished_earlier, 22);
    let runs: u64 = again.state.tasks.iter().map(|t| t.engine_runs).sum();
    assert_eq!(runs, 0, "a second run evaluates nothing anew");
    for (a, b) in rep.summaries.iter().zip(&again.summaries) {
        assert_eq!(a.status, b.status);
        assert_eq!(a.barrier_forward_kcal_mol, b.barrier_forward_kcal_mol);
        assert_eq!(a.gradient_evaluations, b.gradient_evaluations);
        assert_eq!(b.engine_runs, 0);
    }

    // Without the markers (deleted), every algorithm replays from the store: still no engine
    // run, the same numbers, and now the answers come as store hits.
    std::fs::remove_dir_all(dir.join("tasks")).unwrap();
    let replay = run_mb(&dir);
    assert_eq!(replay.tasks_run, 22);
    let runs: u64 = replay.state.tasks.iter().map(|t| t.engine_runs).sum();
    assert_eq!(runs, 0, "a replay evaluates nothing anew");
    for (a, b) in rep.summaries.iter().zip(&replay.summaries) {
        assert_eq!(a.status, b.status);
        assert_eq!(a.barrier_forward_kcal_mol, b.barrier_forward_kcal_mol);
        assert_eq!(a.imaginary_frequency_cm1, b.imaginary_frequency_cm1);
        assert!(b.store_hits > 0);
    }

    // `cairn status DIR` shows the table.
    let out = std::process::Command::new(env!("CARGO_BIN_EXE_cairn"))
        .arg("status")
        .arg(&dir)
        .output()
        .unwrap();
    let text = String::from_utf8_lossy(&out.stdout);
    assert_eq!(out.status.code(), Some(0));
    assert!(text.starts_with("reaction  stage"), "{text}");
    assert!(text.contains("s1-guess  verify"), "{text}");
}

#[test]
fn a_held_lock_stops_a_second_runner() {
    let top = tempfile::tempdir().unwrap();
    let dir = top.path().join("run");
    std::fs::create_dir(&dir).unwrap();
    let _held = cairn::study::DirLock::acquire(&dir).unwrap();
    let s = study::load(&data("mb.yaml")).unwrap();
    let opts = run::RunOptions::new(&dir, 1);
    let err = cairn::driver::block_on(run::run(&s, &opts))
        .unwrap_err()
        .to_string();
    assert!(
        err.contains(&format!("pid {}", std::process::id())),
        "{err}"
    );
    assert!(
        !dir.join("state.json").exists(),
        "nothing written while locked out"
    );
}
