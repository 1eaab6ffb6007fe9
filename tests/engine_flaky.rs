//! Evaluations through a fault-injecting stand-in engine (tests/fixtures/flaky-engine wrapped
//! around real xtb, adapter tests/fixtures/flaky/flaky-xtb.yaml): crashes, hangs, garbage,
//! NaN, truncated files and SCF failures, drawn from a fixed seed. With a retry budget the
//! answers are exactly plain xtb's, the faults are retried with the adapter's remedies in
//! order, and the retries are on record (counters and store entries). Without a budget, a
//! forced fault fails with an error that names the failure kind and the kept engine output.

use cairn::algo::hessian::{HessianCalc, HessianSource};
use cairn::algo::minimize::{MinOptions, Minimizer};
use cairn::driver::{block_on, drive, Evaluator, System};
use cairn::elements::Element;
use cairn::engine::adapter::{Adapter, AdapterEngine};
use cairn::engine::{find_engine, Engine, Settings};
use cairn::error::Error;
use cairn::eval::{Point, Quantity};
use cairn::executor::LocalExecutor;
use cairn::geom::Frame;
use cairn::store::Store;
use cairn::units::BOHR_PER_ANGSTROM;
use nalgebra::DVector;
use std::collections::BTreeSet;
use std::path::Path;
use std::sync::Arc;

const FLAKY_ADAPTER: &str = concat!(
    env!("CARGO_MANIFEST_DIR"),
    "/tests/fixtures/flaky/flaky-xtb.yaml"
);

fn settings(pairs: &[(&str, String)]) -> Settings {
    pairs
        .iter()
        .map(|(k, v)| (k.to_string(), v.clone()))
        .collect()
}

/// The flaky adapter with its state in `state`, fault rate `rate`, seed `seed`.
fn flaky(state: &Path, rate: f64, seed: u64) -> Arc<dyn Engine> {
    std::env::set_var("OMP_NUM_THREADS", "1");
    let a = Adapter::load(Path::new(FLAKY_ADAPTER)).unwrap_or_else(|e| panic!("{e}"));
    let s = settings(&[
        ("flaky_state", state.display().to_string()),
        ("flaky_rate", rate.to_string()),
        ("flaky_seed", seed.to_string()),
    ]);
    // Scratch directories (kept on failure) go beside the state, inside the test's tempdir.
    std::fs::create_dir_all(state.join("scratch")).unwrap();
    let e = AdapterEngine::new(Arc::new(a), &s).unwrap_or_else(|e| panic!("{e}"));
    Arc::new(e.with_scratch_root(state.join("scratch")))
}

fn plain_xtb() -> Arc<dyn Engine> {
    find_engine("xtb", &Settings::new()).expect("xtb adapter loads")
}

fn evaluator(engine: Arc<dyn Engine>, store: &Path, retries: usize) -> Evaluator {
    let store = Arc::new(Store::open(store).unwrap());
    Evaluator::new(
        engine,
        store,
        Arc::new(LocalExecutor::new(2).with_retries(retries)),
    )
}

/// Water, slightly off its minimum (Å, from memory; any nearby geometry does).
fn water() -> (System, DVector<f64>) {
    let atoms = [
        (Element::from_symbol("O").unwrap(), [0.0, 0.0, 0.1173]),
        (Element::from_symbol("H").unwrap(), [0.0, 0.80, -0.4692]),
        (Element::from_symbol("H").unwrap(), [0.0, -0.74, -0.50]),
    ];
    let system = System::new(atoms.iter().map(|a| a.0).collect(), 0, 1).unwrap();
    let x = DVector::from_iterator(
        9,
        atoms
            .iter()
            .flat_map(|a| a.1.iter().map(|v| v * BOHR_PER_ANGSTROM)),
    );
    (system, x)
}

/// The faults the stand-in logged, by kind.
fn logged_faults(state: &Path) -> Vec<String> {
    let text = std::fs::read_to_string(state.join("faults.log")).unwrap_or_default();
    text.lines()
        .map(|l| {
            let v: serde_json::Value = serde_json::from_str(l).unwrap();
            v["fault"].as_str().unwrap().to_string()
        })
        .collect()
}

fn max_abs_diff(a: &DVector<f64>, b: &DVector<f64>) -> f64 {
    (a - b).amax()
}

#[test]
fn finite_difference_hessian_through_faults_equals_plain_xtb() {
    let tmp = tempfile::tempdir().unwrap();
    let state = tmp.path().join("flaky-state");
    let (system, x) = water();
    let ev = evaluator(flaky(&state, 0.5, 7), &tmp.path().join("store-flaky"), 4);
    let fd = HessianSource::FiniteDifference { step: 0.005 };
    let mut calc = HessianCalc::new(x.clone(), Frame::Molecule, fd.clone());
    let (verdict, stats) = block_on(drive(&mut calc, &ev, &system))
        .unwrap_or_else(|e| panic!("FD Hessian through the flaky engine failed: {e}"));

    // The same points through plain xtb, one by one against the flaky answers (now store hits).
    let mut points = vec![Point::new(x.clone(), Quantity::Gradient)];
    points.extend(fd_points(&fd, &x));
    let plain = evaluator(plain_xtb(), &tmp.path().join("store-plain"), 0);
    let want = block_on(plain.evaluate(&system, &points)).unwrap();
    let got = block_on(ev.evaluate_detailed(&system, &points)).unwrap();
    assert_eq!(got.len(), points.len());
    for (i, (g, w)) in got.iter().zip(&want).enumerate() {
        // Plain xtb is the reference; identical input must give identical numbers (the
        // remedies' settings do not change a closed-shell answer, engines.md / common practice).
        assert!(
            (g.answer.energy - w.energy).abs() <= 1e-8,
            "point {i}: energy {} vs plain xtb {} Eh",
            g.answer.energy,
            w.energy
        );
        let (gg, wg) = (
            g.answer.gradient.as_ref().unwrap(),
            w.gradient.as_ref().unwrap(),
        );
        assert!(
            max_abs_diff(gg, wg) <= 1e-7,
            "point {i}: gradient differs from plain xtb by {} Eh/bohr",
            max_abs_diff(gg, wg)
        );
    }
    let mut plain_calc = HessianCalc::new(x.clone(), Frame::Molecule, fd);
    let (plain_verdict, _) = block_on(drive(&mut plain_calc, &plain, &system)).unwrap();
    assert!((verdict.energy - plain_verdict.energy).abs() <= 1e-8);
    assert!((&verdict.hessian - &plain_verdict.hessian).amax() <= 1e-5);

    // Faults happened, of several kinds, and every one was retried.
    let faults = logged_faults(&state);
    let kinds: BTreeSet<&str> = faults.iter().map(String::as_str).collect();
    eprintln!("injected faults: {faults:?}; counters: {stats:?}");
    assert!(
        kinds.len() >= 3,
        "expected several kinds of injected faults, got {faults:?}"
    );
    assert_eq!(
        stats.retries as usize,
        faults.len(),
        "every injected fault costs one retry ({faults:?}, {stats:?})"
    );
    assert_eq!(stats.failed_runs, 0);
    assert!(stats.remedied_runs > 0, "{stats:?}");

    // Per evaluation, the store entry records what failed and the remedies used, in order.
    let remedy_order = ["more SCC iterations", "electronic temperature 1000 K"];
    let mut recorded_failures = 0;
    for g in &got {
        let entry: serde_json::Value =
            serde_json::from_str(&std::fs::read_to_string(&g.entry).unwrap()).unwrap();
        let failures = entry["failures"].as_array().unwrap();
        let remedies: Vec<&str> = entry["remedies"]
            .as_array()
            .unwrap()
            .iter()
            .map(|r| r.as_str().unwrap())
            .collect();
        assert_eq!(remedies.len(), failures.len(), "{entry}");
        assert_eq!(remedies, remedy_order[..remedies.len()].to_vec(), "{entry}");
        for f in failures {
            let f = f.as_str().unwrap();
            assert!(
                [
                    "crashed",
                    "timed out",
                    "bad output",
                    "failure signature 'scc_not_converged'"
                ]
                .iter()
                .any(|k| f.contains(k)),
                "unnamed failure kind: {f}"
            );
        }
        recorded_failures += failures.len();
    }
    assert_eq!(recorded_failures, faults.len());
}

fn fd_points(fd: &HessianSource, x: &DVector<f64>) -> Vec<Point> {
    fd.points(x, Frame::Molecule)
}

#[test]
fn relaxation_through_faults_has_plain_xtb_verdict() {
    let tmp = tempfile::tempdir().unwrap();
    let state = tmp.path().join("flaky-state");
    let (system, x) = water();
    let ev = evaluator(flaky(&state, 0.3, 11), &tmp.path().join("store-flaky"), 3);
    let mut m = Minimizer::new(x.clone(), Frame::Molecule, MinOptions::default());
    let (v, stats) = block_on(drive(&mut m, &ev, &system)).unwrap_or_else(|e| panic!("{e}"));
    let plain = evaluator(plain_xtb(), &tmp.path().join("store-plain"), 0);
    let mut pm = Minimizer::new(x, Frame::Molecule, MinOptions::default());
    let (pv, _) = block_on(drive(&mut pm, &plain, &system)).unwrap();
    assert!(v.converged && pv.converged, "{} / {}", v.reason, pv.reason);
    assert_eq!(v.iterations, pv.iterations);
    assert!((v.energy - pv.energy).abs() <= 1e-8);
    assert!(max_abs_diff(&v.x, &pv.x) <= 1e-7);
    let faults = logged_faults(&state);
    assert!(!faults.is_empty(), "no fault was injected");
    assert_eq!(stats.retries as usize, faults.len(), "{faults:?} {stats:?}");
}

#[test]
fn forced_fault_without_retries_names_the_kind_and_kept_output() {
    let tmp = tempfile::tempdir().unwrap();
    for seed in [1u64, 2, 3] {
        let state = tmp.path().join(format!("flaky-state-{seed}"));
        let (system, x) = water();
        let ev = evaluator(
            flaky(&state, 1.0, seed),
            &tmp.path().join(format!("store-{seed}")),
            0,
        );
        let err = block_on(ev.evaluate(&system, &[Point::new(x, Quantity::Gradient)]))
            .expect_err("a forced fault with no retry budget must fail");
        let faults = logged_faults(&state);
        assert_eq!(faults.len(), 1, "{faults:?}");
        eprintln!("seed {seed}: {err}");
        let kind = match faults[0].as_str() {
            "crash" => "crashed",
            "hang" => "timed out",
            "garbage" | "nan" | "truncate" => "bad output",
            "scf" => "failure signature 'scc_not_converged'",
            other => panic!("unknown fault {other}"),
        };
        let text = err.to_string();
        assert!(text.contains(kind), "fault {}: {text}", faults[0]);
        assert!(text.contains("after 1 attempt"), "{text}");
        match &err {
            Error::Engine {
                engine,
                output: Some(out),
                ..
            } => {
                assert_eq!(engine, "flaky-xtb");
                assert!(out.exists(), "kept output {} is missing", out.display());
                assert!(text.contains(&out.display().to_string()), "{text}");
            }
            other => panic!("expected an engine error with kept output, got {other:?}"),
        }
    }
}
