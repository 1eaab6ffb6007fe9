//! The study runner end to end on real xtb (GFN2-xTB): the demo study verifies every
//! reaction; a runner killed with SIGKILL (during engine runs, and in the middle of a store
//! write) and started again ends with the same summaries and the same set of evaluations,
//! none computed twice; a fault-injecting engine gives the same verdicts with its retries on
//! record; a reaction whose engine keeps failing is marked failed while the others go on;
//! changing one level's settings reruns only the tasks that depend on it.
//!
//! The check values are the runs themselves: an uninterrupted run is the reference for the
//! interrupted one, plain xtb for the fault-injecting stand-in (which runs the same xtb).
//! "Verified" means what the runner checks: exactly one imaginary mode above the threshold and
//! IRC ends with the bond graphs of the reaction's ends (common practice for saddle points).

use cairn::study::record::{StateRecord, Summary, Verdict};
use std::collections::{BTreeSet, HashMap};
use std::os::unix::process::ExitStatusExt;
use std::path::{Path, PathBuf};
use std::process::{Command, Stdio};
use std::time::{Duration, Instant};

fn root() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
}

fn demo() -> PathBuf {
    root().join("workflows-demo/demo.yaml")
}

const REACTIONS: [&str; 5] = [
    "hcn-to-hnc",
    "hoc-plus-to-hco-plus",
    "chloride-exchange",
    "methoxy-h-shift",
    "hnc-uphill",
];

fn cairn() -> Command {
    let mut c = Command::new(env!("CARGO_BIN_EXE_cairn"));
    c.env("OMP_NUM_THREADS", "1")
        .env("OPENBLAS_NUM_THREADS", "1")
        .env_remove("CAIRN_FAULT_KILL_IN_WRITE");
    c
}

fn run_args(c: &mut Command, study: &Path, dir: &Path) {
    c.arg("run")
        .arg(study)
        .arg("--dir")
        .arg(dir)
        .args(["--jobs", "2", "--progress", "lines"]);
}

/// `cairn run` to the end; (exit code, stdout, stderr).
fn run_to_end(study: &Path, dir: &Path, env: &[(&str, String)]) -> (Option<i32>, String, String) {
    let mut c = cairn();
    run_args(&mut c, study, dir);
    for (k, v) in env {
        c.env(k, v);
    }
    let out = c.output().expect("cairn runs");
    (
        out.status.code(),
        String::from_utf8_lossy(&out.stdout).into_owned(),
        String::from_utf8_lossy(&out.stderr).into_owned(),
    )
}

fn summaries(dir: &Path, names: &[&str]) -> HashMap<String, Summary> {
    names
        .iter()
        .map(|n| {
            let p = dir.join(n).join("summary.json");
            let text =
                std::fs::read_to_string(&p).unwrap_or_else(|e| panic!("{}: {e}", p.display()));
            (n.to_string(), serde_json::from_str(&text).unwrap())
        })
        .collect()
}

/// The store journal's complete lines (64 hex digits each).
fn journal(dir: &Path) -> Vec<String> {
    std::fs::read_to_string(dir.join("store").join(cairn::store::JOURNAL))
        .unwrap_or_default()
        .lines()
        .filter(|l| l.len() == 64 && l.bytes().all(|b| b.is_ascii_hexdigit()))
        .map(str::to_string)
        .collect()
}

/// The chemistry of two summaries agrees (the bookkeeping fields may differ).
fn assert_same_result(a: &Summary, b: &Summary, tol_kcal: f64) {
    assert_eq!(
        a.status, b.status,
        "{}: {} vs {}",
        a.name, a.reason, b.reason
    );
    assert_eq!(a.n_imaginary, b.n_imaginary, "{}", a.name);
    assert_eq!(a.irc_connects, b.irc_connects, "{}", a.name);
    for (x, y, what) in [
        (
            a.barrier_forward_kcal_mol,
            b.barrier_forward_kcal_mol,
            "forward barrier",
        ),
        (
            a.barrier_reverse_kcal_mol,
            b.barrier_reverse_kcal_mol,
            "reverse barrier",
        ),
        (
            a.reaction_energy_kcal_mol,
            b.reaction_energy_kcal_mol,
            "reaction energy",
        ),
    ] {
        let (x, y) = (x.unwrap(), y.unwrap());
        assert!((x - y).abs() <= tol_kcal, "{} {what}: {x} vs {y}", a.name);
    }
    let (fa, fb) = (
        a.imaginary_frequency_cm1.unwrap(),
        b.imaginary_frequency_cm1.unwrap(),
    );
    assert!(
        (fa - fb).abs() <= 1.0 + 50.0 * tol_kcal,
        "{}: {fa} vs {fb}",
        a.name
    );
}

/// Start `cairn run` and SIGKILL it after `after` (or let the fault hook kill it); returns
/// whether it died by SIGKILL (false: it finished first).
fn run_and_kill(study: &Path, dir: &Path, after: Option<Duration>, env: &[(&str, String)]) -> bool {
    let mut c = cairn();
    run_args(&mut c, study, dir);
    for (k, v) in env {
        c.env(k, v);
    }
    let mut child = c
        .stdout(Stdio::null())
        .stderr(Stdio::null())
        .spawn()
        .expect("cairn starts");
    let t0 = Instant::now();
    loop {
        if let Some(st) = child.try_wait().unwrap() {
            return st.signal() == Some(libc::SIGKILL);
        }
        if let Some(a) = after {
            if t0.elapsed() >= a {
                // SIGKILL: no chance to clean up, like a node crash.
                child.kill().unwrap();
                let st = child.wait().unwrap();
                return st.signal() == Some(libc::SIGKILL);
            }
        }
        std::thread::sleep(Duration::from_millis(20));
    }
}

#[test]
fn demo_is_verified_and_a_killed_run_resumes_to_the_same_result() {
    let top = tempfile::tempdir().unwrap();

    // A: uninterrupted.
    let a = top.path().join("a");
    let (code, out, err) = run_to_end(&demo(), &a, &[]);
    assert_eq!(code, Some(0), "stdout:\n{out}\nstderr:\n{err}");
    let sa = summaries(&a, &REACTIONS);
    for n in REACTIONS {
        let s = &sa[n];
        assert_eq!(s.status, Verdict::Verified, "{n}: {}", s.reason);
        assert_eq!(s.n_imaginary, Some(1), "{n}");
        assert_eq!(s.irc_connects, Some(true), "{n}");
        assert!(s.barrier_forward_kcal_mol.unwrap() > 0.0, "{n}");
        assert!(s.imaginary_frequency_cm1.unwrap() > 50.0, "{n}");
        assert!(s.engine_runs > 0 && s.gradient_evaluations > 0, "{n}");
        let saddle = s.saddle_xyz.as_ref().expect("saddle path");
        assert!(a.join(saddle).exists(), "{n}: {saddle}");
        let irc = s.irc_xyz.as_ref().expect("IRC path");
        assert!(a.join(irc).exists(), "{n}: {irc}");
    }
    // DIR/summary.json holds the same summaries, in the study's order.
    let all: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(a.join("summary.json")).unwrap()).unwrap();
    let listed: Vec<Summary> = serde_json::from_value(all["reactions"].clone()).unwrap();
    assert_eq!(
        listed.iter().map(|s| s.name.as_str()).collect::<Vec<_>>(),
        REACTIONS
    );
    for s in &listed {
        assert_eq!(s, &sa[&s.name]);
    }
    // hcn-to-hnc and hnc-uphill are one saddle seen from its two sides: the reverse barrier
    // of one is the forward barrier of the other (same relaxed HNC, same level).
    let rev = sa["hcn-to-hnc"].barrier_reverse_kcal_mol.unwrap();
    let up = sa["hnc-uphill"].barrier_forward_kcal_mol.unwrap();
    assert!((rev - up).abs() < 0.05, "{rev} vs {up}");
    // Progress lines went to stderr (not a terminal here).
    assert!(err.contains("hcn-to-hnc: band started"), "{err}");

    // Shared species are relaxed once: eight end geometries, seven distinct species (HNC is the
    // product of hcn-to-hnc and the reactant of hnc-uphill).
    let state = StateRecord::from_json(
        &std::fs::read_to_string(a.join("state.json")).unwrap(),
        "state.json",
    )
    .unwrap();
    let relax: Vec<_> = state
        .tasks
        .iter()
        .filter(|t| t.stage == "relax-ends")
        .collect();
    assert_eq!(relax.len(), 7, "{relax:#?}");
    assert_eq!(
        relax
            .iter()
            .filter(|t| t.species.as_deref().unwrap_or("").contains("hnc.xyz"))
            .count(),
        1
    );
    let ja = journal(&a);
    let set_a: BTreeSet<_> = ja.iter().cloned().collect();
    assert_eq!(set_a.len(), ja.len(), "an evaluation was filed twice");

    // Running A again: nothing to do, nothing evaluated, same answer.
    let (code, out, _) = run_to_end(&demo(), &a, &[]);
    assert_eq!(code, Some(0));
    assert!(out.contains("nothing to do"), "{out}");
    assert_eq!(journal(&a).len(), ja.len());

    // B: killed with SIGKILL twice during engine runs, once in the middle of a store write
    // (the fault hook kills the process after its batch's temporary files are synced, before
    // any rename), then run to the end.
    let b = top.path().join("b");
    let mut kills = 0;
    let mut seen = Vec::new();
    for after in [Duration::from_secs(3), Duration::from_secs(6)] {
        if run_and_kill(&demo(), &b, Some(after), &[]) {
            kills += 1;
        }
        seen.push(journal(&b).len());
    }
    if run_and_kill(
        &demo(),
        &b,
        None,
        &[("CAIRN_FAULT_KILL_IN_WRITE", "3".to_string())],
    ) {
        kills += 1;
    }
    seen.push(journal(&b).len());
    assert_eq!(
        kills, 3,
        "every interrupted run died by SIGKILL (journal sizes {seen:?})"
    );
    assert!(
        seen.windows(2).all(|w| w[0] <= w[1]) && seen[0] > 0,
        "each run carried on from the last: {seen:?}"
    );
    let (code, out, err) = run_to_end(&demo(), &b, &[]);
    assert_eq!(code, Some(0), "stdout:\n{out}\nstderr:\n{err}");
    let sb = summaries(&b, &REACTIONS);
    for n in REACTIONS {
        assert_same_result(&sa[n], &sb[n], 1e-6);
    }
    // Every evaluation of the uninterrupted run, each filed exactly once, and nothing else.
    let jb = journal(&b);
    let set_b: BTreeSet<_> = jb.iter().cloned().collect();
    assert_eq!(
        set_b.len(),
        jb.len(),
        "a finished evaluation was computed again"
    );
    assert_eq!(set_a, set_b, "the resumed run evaluated other points");
    // The last run computed only what the killed ones had not filed.
    let last_runs: u64 = sb.values().map(|s| s.engine_runs).sum();
    assert!(
        last_runs as usize <= ja.len() - seen[2],
        "{last_runs} engine runs after {} of {} were filed",
        seen[2],
        ja.len()
    );
    // Every entry on disk is whole and usable, one per journal line; leftover temporary files
    // of the killed writers are ignored by lookups.
    let report = cairn::store::Store::open(b.join("store"))
        .unwrap()
        .check()
        .unwrap();
    assert!(report.unusable.is_empty(), "{:?}", report.unusable);
    assert_eq!(report.usable, jb.len());
}

/// The demo's pipeline and levels with other reactions and levels, as a study file in `dir`
/// (geometry paths made absolute).
fn variant(dir: &Path, levels: &str, reactions: &[&str], retries: u32, timeout: &str) -> PathBuf {
    let text = std::fs::read_to_string(demo()).unwrap();
    let mut v: serde_yaml::Value = serde_yaml::from_str(&text).unwrap();
    v["levels"] = serde_yaml::from_str(levels).unwrap();
    v["defaults"]["retries"] = retries.into();
    v["defaults"]["timeout"] = timeout.into();
    let geo = root().join("workflows-demo");
    let mut keep = Vec::new();
    for r in v["reactions"].as_sequence().unwrap().clone() {
        let name = r["name"].as_str().unwrap().to_string();
        if !reactions.contains(&name.as_str()) {
            continue;
        }
        let mut r = r.clone();
        for k in ["reactant", "product", "guess"] {
            if let Some(p) = r.get(k).and_then(|p| p.as_str()) {
                r[k] = geo.join(p).display().to_string().into();
            }
        }
        keep.push(r);
    }
    v["reactions"] = serde_yaml::Value::Sequence(keep);
    let path = dir.join("study.yaml");
    std::fs::write(&path, serde_yaml::to_string(&v).unwrap()).unwrap();
    path
}

fn flaky_levels(state: &Path, rate: f64) -> String {
    let s = state.display();
    format!(
        "gfn2: {{engine: flaky-xtb, settings: {{method: gfn2, flaky_state: '{s}', flaky_rate: {rate}, flaky_seed: 11}}}}\n\
         gfn2-tight: {{engine: flaky-xtb, settings: {{method: gfn2, accuracy: 0.1, flaky_state: '{s}', flaky_rate: {rate}, flaky_seed: 11}}}}\n"
    )
}

const PLAIN_LEVELS: &str = "gfn2: {engine: xtb, settings: {method: gfn2}}\n\
                            gfn2-tight: {engine: xtb, settings: {method: gfn2, accuracy: 0.1}}\n";

fn flaky_env(top: &Path) -> Vec<(&'static str, String)> {
    let scratch = top.join("scratch");
    std::fs::create_dir_all(&scratch).unwrap();
    vec![
        (
            "CAIRN_ADAPTERS",
            root().join("tests/fixtures/flaky").display().to_string(),
        ),
        ("CAIRN_SCRATCH", scratch.display().to_string()),
    ]
}

#[test]
fn a_fault_injecting_engine_gives_the_same_verdicts_with_its_retries_reported() {
    let top = tempfile::tempdir().unwrap();
    let names = ["hcn-to-hnc", "methoxy-h-shift"];
    let plain_dir = top.path().join("plain");
    std::fs::create_dir_all(&plain_dir).unwrap();
    let plain = variant(&plain_dir, PLAIN_LEVELS, &names, 2, "5m");
    let (code, out, err) = run_to_end(&plain, &plain_dir.join("run"), &[]);
    assert_eq!(code, Some(0), "{out}\n{err}");

    // Faults at a rate of 15 % per attempt (crash, hang, garbage, NaN, truncated files, SCF
    // failure), at most two per point, so three retries always suffice; a 3 s limit per run
    // ends the hangs (an xtb run of these molecules takes well under 0.5 s).
    let flaky_dir = top.path().join("flaky");
    let state = top.path().join("flaky-state");
    std::fs::create_dir_all(&flaky_dir).unwrap();
    std::fs::create_dir_all(&state).unwrap();
    let study = variant(&flaky_dir, &flaky_levels(&state, 0.15), &names, 3, "3s");
    let (code, out, err) = run_to_end(&study, &flaky_dir.join("run"), &flaky_env(top.path()));
    assert_eq!(code, Some(0), "{out}\n{err}");

    let sp = summaries(&plain_dir.join("run"), &names);
    let sf = summaries(&flaky_dir.join("run"), &names);
    let mut retries = 0;
    for n in names {
        // Remedies may change a setting (e.g. the electronic temperature), so allow a little.
        assert_same_result(&sp[n], &sf[n], 0.05);
        retries += sf[n].engine_retries;
        assert_eq!(sp[n].engine_retries, 0, "plain xtb needed no retries");
    }
    assert!(retries > 10, "only {retries} retries reported");
    assert!(out.contains("engine retries"), "{out}");
    // The stand-in's own log: faults of several kinds were injected.
    let log = std::fs::read_to_string(state.join("faults.log")).unwrap();
    let kinds: BTreeSet<&str> = ["crash", "hang", "garbage", "nan", "truncate", "scf"]
        .into_iter()
        .filter(|k| log.contains(k))
        .collect();
    assert!(kinds.len() >= 4, "fault kinds injected: {kinds:?}");
}

#[test]
fn a_reaction_whose_engine_keeps_failing_is_failed_and_the_others_go_on() {
    let top = tempfile::tempdir().unwrap();
    let dir = top.path().join("s");
    let state = top.path().join("flaky-state");
    std::fs::create_dir_all(&dir).unwrap();
    std::fs::create_dir_all(&state).unwrap();
    // hcn-to-hnc on plain xtb; hnc-uphill on a stand-in that fails every first attempt, with
    // no retries allowed for it.
    let levels = format!(
        "{PLAIN_LEVELS}broken: {{engine: flaky-xtb, settings: {{method: gfn2, flaky_state: '{}', flaky_rate: 1.0, flaky_seed: 3}}}}\n",
        state.display()
    );
    let study = variant(&dir, &levels, &["hcn-to-hnc", "hnc-uphill"], 2, "3s");
    let mut v: serde_yaml::Value =
        serde_yaml::from_str(&std::fs::read_to_string(&study).unwrap()).unwrap();
    for r in v["reactions"].as_sequence_mut().unwrap() {
        if r["name"] == "hnc-uphill" {
            r["level"] = "broken".into();
            r["options"] =
                serde_yaml::from_str("{relax-ends: {retries: 0}, walk: {retries: 0}}").unwrap();
        }
    }
    std::fs::write(&study, serde_yaml::to_string(&v).unwrap()).unwrap();
    let (code, out, err) = run_to_end(&study, &dir.join("run"), &flaky_env(top.path()));
    assert_eq!(
        code,
        Some(2),
        "exit status 2: ran, not all verified\n{out}\n{err}"
    );
    let s = summaries(&dir.join("run"), &["hcn-to-hnc", "hnc-uphill"]);
    assert_eq!(
        s["hcn-to-hnc"].status,
        Verdict::Verified,
        "{}",
        s["hcn-to-hnc"].reason
    );
    let f = &s["hnc-uphill"];
    assert_eq!(f.status, Verdict::Failed);
    assert!(
        f.reason.contains("relax-ends"),
        "names the step: {}",
        f.reason
    );
    assert!(
        f.reason.contains("flaky-xtb"),
        "names the engine: {}",
        f.reason
    );
    // The reason points at the kept engine output, and that file exists.
    let kept = f
        .reason
        .split("engine output kept in ")
        .nth(1)
        .map(|t| t.split([')', ';']).next().unwrap_or("").trim().to_string());
    match kept {
        Some(p) => assert!(Path::new(&p).exists(), "{p}"),
        None => panic!("no engine output path in: {}", f.reason),
    }
}

#[test]
fn changing_one_level_reruns_only_what_depends_on_it() {
    let top = tempfile::tempdir().unwrap();
    let dir = top.path().join("s");
    std::fs::create_dir_all(&dir).unwrap();
    let study = variant(&dir, PLAIN_LEVELS, &["hcn-to-hnc"], 2, "5m");
    let load = |p: &Path| cairn::study::load(p).unwrap();
    let mut opts = cairn::study::run::RunOptions::new(dir.join("run"), 2);
    opts.progress = cairn::study::progress::ProgressMode::Quiet;
    std::env::set_var("OMP_NUM_THREADS", "1");
    let first = cairn::driver::block_on(cairn::study::run::run(&load(&study), &opts)).unwrap();
    assert_eq!(first.summaries[0].status, Verdict::Verified);
    // relax ×2, band, refine, modes, irc, verify, rates
    assert_eq!(first.tasks_run, 8);

    // Tighter SCC only for the modes level: the modes stage (its Hessian), verify (which
    // uses the mode count) and rates (after verify; its own Hessians are at the default level,
    // so it replays them from the store) run again; relaxations, band, refine and IRC do not.
    let text = std::fs::read_to_string(&study)
        .unwrap()
        .replace("accuracy: 0.1", "accuracy: 0.05");
    std::fs::write(&study, text).unwrap();
    let second = cairn::driver::block_on(cairn::study::run::run(&load(&study), &opts)).unwrap();
    assert_eq!(second.tasks_run, 3, "{:#?}", second.state.tasks);
    let rerun: Vec<&str> = second
        .state
        .tasks
        .iter()
        .filter(|t| t.message.as_deref() != Some("finished in an earlier run"))
        .map(|t| t.stage.as_str())
        .collect();
    assert_eq!(rerun, ["modes", "verify", "rates"]);
    let rates = second
        .state
        .tasks
        .iter()
        .find(|t| t.stage == "rates")
        .unwrap();
    assert_eq!(
        rates.engine_runs, 0,
        "the rates stage's Hessians come from the store"
    );
    let modes = second
        .state
        .tasks
        .iter()
        .find(|t| t.stage == "modes")
        .unwrap();
    assert!(
        modes.engine_runs > 0,
        "the new level's Hessian was computed"
    );
    let s = &second.summaries[0];
    assert_eq!(s.status, Verdict::Verified, "{}", s.reason);
    assert_eq!(
        s.barrier_forward_kcal_mol, first.summaries[0].barrier_forward_kcal_mol,
        "the saddle and ends were not recomputed"
    );
}
