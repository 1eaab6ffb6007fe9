//! The driver, executor and store together: caching, replay, concurrency, the pool bound,
//! retries, counters. Uses a counting test engine (Müller–Brown inside, so answers are real).

use cairn::algo::{AlgoError, Algorithm, Step};
use cairn::driver::{block_on, drive, drive_observed, Evaluator, Source, System};
use cairn::elements::Element;
use cairn::engine::{model, Engine, EngineFailure, FailureKind, Job, MullerBrown, Outcome};
use cairn::eval::{Answer, Point, Quantity};
use cairn::executor::{Executor, LocalExecutor};
use cairn::store::Store;
use nalgebra::DVector;
use std::sync::atomic::{AtomicUsize, Ordering};
use std::sync::{Arc, Mutex};
use std::time::Duration;

/// Müller–Brown with counters, an optional delay per run and scripted failures.
#[derive(Default)]
struct Counting {
    calls: AtomicUsize,
    attempts_seen: Mutex<Vec<usize>>,
    running: AtomicUsize,
    peak: AtomicUsize,
    delay_ms: u64,
    /// Fail attempts below this number with `fail_kind`.
    fail_below: usize,
    fail_kind: Option<FailureKind>,
    /// Return a NaN energy (an unusable answer) on every attempt.
    nan: bool,
}

impl Engine for Counting {
    fn name(&self) -> &str {
        "counting"
    }
    fn identity(&self) -> String {
        "test:counting-muller-brown:v1".into()
    }
    fn is_model(&self) -> bool {
        true
    }
    fn evaluate(&self, job: &Job, attempt: usize) -> Result<Outcome, EngineFailure> {
        self.calls.fetch_add(1, Ordering::SeqCst);
        self.attempts_seen.lock().unwrap().push(attempt);
        let now = self.running.fetch_add(1, Ordering::SeqCst) + 1;
        self.peak.fetch_max(now, Ordering::SeqCst);
        if self.delay_ms > 0 {
            std::thread::sleep(Duration::from_millis(self.delay_ms));
        }
        self.running.fetch_sub(1, Ordering::SeqCst);
        if let Some(k) = &self.fail_kind {
            if attempt < self.fail_below {
                return Err(EngineFailure {
                    kind: k.clone(),
                    message: format!("scripted failure on attempt {attempt}"),
                    output: None,
                });
            }
        }
        let mut answer = model::muller_brown_answer(&job.coords, job.quantity);
        if self.nan {
            answer.energy = f64::NAN;
        }
        Ok(Outcome {
            answer,
            raw_output: format!("counting engine output, attempt {attempt}\n"),
            remedies: if attempt > 0 {
                vec![format!("remedy-{attempt}")]
            } else {
                vec![]
            },
            seconds: 0.001,
        })
    }
}

fn mb_system() -> System {
    System::new(vec![Element::X], 0, 1).unwrap()
}

fn pt(x: f64, y: f64, q: Quantity) -> Point {
    Point::new(DVector::from_vec(vec![x, y, 0.0]), q)
}

fn evaluator(engine: Arc<Counting>, dir: &std::path::Path, slots: usize) -> Evaluator {
    let store = Arc::new(Store::open(dir).unwrap());
    Evaluator::new(engine, store, Arc::new(LocalExecutor::new(slots)))
}

fn bits(a: &Answer) -> Vec<u64> {
    let mut v = vec![a.energy.to_bits()];
    if let Some(g) = &a.gradient {
        v.extend(g.iter().map(|x| x.to_bits()));
    }
    if let Some(h) = &a.hessian {
        v.extend(h.iter().map(|x| x.to_bits()));
    }
    v
}

#[test]
fn repeated_request_starts_no_engine() {
    let dir = tempfile::tempdir().unwrap();
    let engine = Arc::new(Counting::default());
    let ev = evaluator(engine.clone(), dir.path(), 2);
    let sys = mb_system();
    let points = vec![
        pt(-0.5, 1.5, Quantity::Gradient),
        pt(0.6, 0.0, Quantity::Hessian),
        pt(-0.8, 0.6, Quantity::Energy),
    ];
    let first = block_on(ev.evaluate_detailed(&sys, &points)).unwrap();
    assert_eq!(engine.calls.load(Ordering::SeqCst), 3);
    assert!(first.iter().all(|e| e.source == Source::Engine));
    let s1 = ev.stats();
    assert_eq!((s1.engine_runs, s1.store_hits, s1.points), (3, 0, 3));
    assert_eq!(
        (
            s1.energy_evaluations,
            s1.gradient_evaluations,
            s1.hessian_evaluations
        ),
        (1, 1, 1)
    );

    // Same request through a fresh evaluator on the same directory (once the first has
    // written its entries): no engine run.
    block_on(ev.flush()).unwrap();
    let ev2 = evaluator(engine.clone(), dir.path(), 2);
    let second = block_on(ev2.evaluate_detailed(&sys, &points)).unwrap();
    assert_eq!(engine.calls.load(Ordering::SeqCst), 3, "engine ran again");
    assert!(second.iter().all(|e| e.source == Source::Store));
    for (a, b) in first.iter().zip(&second) {
        assert_eq!(bits(&a.answer), bits(&b.answer));
    }
    let s2 = ev2.stats();
    assert_eq!((s2.engine_runs, s2.store_hits, s2.points), (0, 3, 3));
    // The values are Müller–Brown's (same function the test engine wraps).
    let (e, _, _) = model::muller_brown(-0.8, 0.6);
    assert_eq!(second[2].answer.energy.to_bits(), e.to_bits());
}

#[test]
fn identical_points_in_one_batch_run_once() {
    let dir = tempfile::tempdir().unwrap();
    let engine = Arc::new(Counting::default());
    let ev = evaluator(engine.clone(), dir.path(), 2);
    let p = pt(0.1, 0.2, Quantity::Gradient);
    let out = block_on(ev.evaluate(&mb_system(), &[p.clone(), p.clone(), p])).unwrap();
    assert_eq!(engine.calls.load(Ordering::SeqCst), 1);
    assert_eq!(out.len(), 3);
    assert_eq!(bits(&out[0]), bits(&out[2]));
    let s = ev.stats();
    assert_eq!((s.engine_runs, s.store_hits, s.points), (1, 2, 3));
}

#[test]
fn many_parallel_identical_requests_make_one_consistent_entry() {
    let dir = tempfile::tempdir().unwrap();
    let engine = Arc::new(Counting {
        delay_ms: 30,
        ..Default::default()
    });
    let ev = Arc::new(evaluator(engine.clone(), dir.path(), 4));
    let sys = mb_system();
    let p = pt(-0.25, 0.65, Quantity::Hessian);
    let rt = tokio::runtime::Builder::new_multi_thread()
        .worker_threads(2)
        .enable_all()
        .build()
        .unwrap();
    let answers: Vec<Answer> = rt.block_on(async {
        let mut handles = Vec::new();
        for _ in 0..16 {
            let ev = ev.scoped();
            let sys = sys.clone();
            let p = p.clone();
            handles.push(tokio::spawn(async move {
                ev.evaluate(&sys, &[p]).await.unwrap().remove(0)
            }));
        }
        let mut v = Vec::new();
        for h in handles {
            v.push(h.await.unwrap());
        }
        v
    });
    // Shared store: the in-flight key lock lets exactly one of them run the engine.
    assert_eq!(engine.calls.load(Ordering::SeqCst), 1);
    for a in &answers {
        assert_eq!(bits(a), bits(&answers[0]));
    }
    let s = ev.stats();
    assert_eq!((s.engine_runs, s.store_hits, s.points), (1, 15, 16));

    // Separate Store instances on one directory (as separate processes would be): each may run
    // the engine, but the directory still holds one whole, consistent entry.
    let dir2 = tempfile::tempdir().unwrap();
    let engine2 = Arc::new(Counting {
        delay_ms: 10,
        ..Default::default()
    });
    let answers2: Vec<Answer> = rt.block_on(async {
        let mut handles = Vec::new();
        for _ in 0..8 {
            let ev = evaluator(engine2.clone(), dir2.path(), 1);
            let sys = sys.clone();
            let p = p.clone();
            handles.push(tokio::spawn(async move {
                ev.evaluate(&sys, &[p]).await.unwrap().remove(0)
            }));
        }
        let mut v = Vec::new();
        for h in handles {
            v.push(h.await.unwrap());
        }
        v
    });
    let report = Store::open(dir2.path()).unwrap().check().unwrap();
    assert_eq!(report.usable, 1, "{report:?}");
    assert!(report.unusable.is_empty(), "{report:?}");
    assert_eq!(report.temporary, 0, "{report:?}");
    for a in &answers2 {
        assert_eq!(bits(a), bits(&answers[0]));
    }
}

#[test]
fn executor_bound_is_respected_across_drivers() {
    let dir = tempfile::tempdir().unwrap();
    let engine = Arc::new(Counting {
        delay_ms: 60,
        ..Default::default()
    });
    let pool = Arc::new(LocalExecutor::new(3));
    let store = Arc::new(Store::open(dir.path()).unwrap());
    let ev = Evaluator::new(engine.clone(), store, pool.clone());
    let rt = tokio::runtime::Builder::new_multi_thread()
        .worker_threads(2)
        .enable_all()
        .build()
        .unwrap();
    rt.block_on(async {
        // Two drivers (two "reactions"), each asking for a batch of 6 distinct points.
        let a = ev.scoped();
        let b = ev.scoped();
        let sys = mb_system();
        let pa: Vec<Point> = (0..6)
            .map(|i| pt(0.1 * i as f64, 0.3, Quantity::Gradient))
            .collect();
        let pb: Vec<Point> = (0..6)
            .map(|i| pt(0.1 * i as f64, 0.9, Quantity::Gradient))
            .collect();
        let (ra, rb) = tokio::join!(a.evaluate(&sys, &pa), b.evaluate(&sys, &pb));
        ra.unwrap();
        rb.unwrap();
        assert_eq!(a.stats().engine_runs, 6);
        assert_eq!(b.stats().engine_runs, 6);
    });
    assert_eq!(engine.calls.load(Ordering::SeqCst), 12);
    assert_eq!(
        engine.peak.load(Ordering::SeqCst),
        3,
        "pool of 3 not filled or exceeded"
    );
    assert_eq!(pool.peak_concurrency(), 3);
    // The parent evaluator sums its scoped views.
    assert_eq!(ev.stats().engine_runs, 12);
    assert_eq!(ev.stats().gradient_evaluations, 12);
}

#[test]
fn retries_follow_the_budget() {
    let sys = mb_system();
    let p = pt(0.3, 0.3, Quantity::Gradient);

    // Fails on attempts 0 and 1, succeeds on attempt 2: within a budget of 2 retries.
    let dir = tempfile::tempdir().unwrap();
    let engine = Arc::new(Counting {
        fail_below: 2,
        fail_kind: Some(FailureKind::Crash),
        ..Default::default()
    });
    let store = Arc::new(Store::open(dir.path()).unwrap());
    let ev = Evaluator::new(
        engine.clone(),
        store.clone(),
        Arc::new(LocalExecutor::new(1).with_retries(2)),
    );
    let out = block_on(ev.evaluate_detailed(&sys, std::slice::from_ref(&p))).unwrap();
    assert_eq!(*engine.attempts_seen.lock().unwrap(), vec![0, 1, 2]);
    assert_eq!(out[0].remedies, vec!["remedy-2".to_string()]);
    let s = ev.stats();
    assert_eq!(
        (s.engine_runs, s.retries, s.remedied_runs, s.failed_runs),
        (1, 2, 1, 0)
    );
    // The entry records the remedy and both failures; the raw output sits beside it.
    let cairn::store::Lookup::Hit(entry) = store.get(&out[0].key) else {
        panic!("entry missing")
    };
    assert_eq!(entry.remedies, vec!["remedy-2".to_string()]);
    assert_eq!(entry.failures.len(), 2);
    assert!(entry.failures[0].contains("scripted failure on attempt 0"));
    store.flush().unwrap();
    let raw = std::fs::read_to_string(store.output_path(&out[0].key)).unwrap();
    assert_eq!(raw, "counting engine output, attempt 2\n");

    // Same, but a budget of 1: attempts 0 and 1, then an error naming the engine.
    let dir = tempfile::tempdir().unwrap();
    let engine = Arc::new(Counting {
        fail_below: 2,
        fail_kind: Some(FailureKind::Crash),
        ..Default::default()
    });
    let ev = Evaluator::new(
        engine.clone(),
        Arc::new(Store::open(dir.path()).unwrap()),
        Arc::new(LocalExecutor::new(1).with_retries(1)),
    );
    let err = block_on(ev.evaluate(&sys, std::slice::from_ref(&p)))
        .unwrap_err()
        .to_string();
    assert_eq!(*engine.attempts_seen.lock().unwrap(), vec![0, 1]);
    assert!(err.contains("engine 'counting'"), "{err}");
    assert!(err.contains("after 2 attempts"), "{err}");
    assert!(err.contains("look at the kept engine output"), "{err}");
    assert_eq!(ev.stats().failed_runs, 1);

    // Not worth retrying: a missing executable and a bad input are tried once.
    for kind in [FailureKind::MissingExecutable, FailureKind::BadInput] {
        let dir = tempfile::tempdir().unwrap();
        let engine = Arc::new(Counting {
            fail_below: 10,
            fail_kind: Some(kind.clone()),
            ..Default::default()
        });
        let ev = Evaluator::new(
            engine.clone(),
            Arc::new(Store::open(dir.path()).unwrap()),
            Arc::new(LocalExecutor::new(1).with_retries(5)),
        );
        let err = block_on(ev.evaluate(&sys, std::slice::from_ref(&p)))
            .unwrap_err()
            .to_string();
        assert_eq!(engine.calls.load(Ordering::SeqCst), 1, "{kind:?} retried");
        assert!(err.contains("after 1 attempt:"), "{err}");
    }
}

#[test]
fn unusable_answer_is_retried_then_reported_with_kept_output() {
    let dir = tempfile::tempdir().unwrap();
    let engine = Arc::new(Counting {
        nan: true,
        ..Default::default()
    });
    let store = Arc::new(Store::open(dir.path()).unwrap());
    let ev = Evaluator::new(
        engine.clone(),
        store.clone(),
        Arc::new(LocalExecutor::new(1).with_retries(1)),
    );
    let err = block_on(ev.evaluate(&mb_system(), &[pt(0.0, 0.0, Quantity::Energy)])).unwrap_err();
    assert_eq!(engine.calls.load(Ordering::SeqCst), 2);
    let msg = err.to_string();
    assert!(msg.contains("energy is not a finite number"), "{msg}");
    let cairn::Error::Engine {
        output: Some(path), ..
    } = err
    else {
        panic!("expected an engine error with a kept output: {msg}")
    };
    assert!(msg.contains(&path.display().to_string()), "{msg}");
    assert_eq!(
        std::fs::read_to_string(&path).unwrap(),
        "counting engine output, attempt 1\n"
    );
    // Nothing unusable was filed as an answer.
    assert_eq!(store.check().unwrap().usable, 0);
}

#[test]
fn bad_requests_are_errors_not_panics() {
    let dir = tempfile::tempdir().unwrap();
    let ev = evaluator(Arc::new(Counting::default()), dir.path(), 1);
    let sys = mb_system();
    let short = Point::new(DVector::from_vec(vec![0.0, 0.0]), Quantity::Energy);
    let err = block_on(ev.evaluate(&sys, &[short]))
        .unwrap_err()
        .to_string();
    assert!(err.contains("2 coordinates"), "{err}");
    let nan = pt(f64::NAN, 0.0, Quantity::Energy);
    let err = block_on(ev.evaluate(&sys, &[nan])).unwrap_err().to_string();
    assert!(err.contains("non-finite"), "{err}");
    // Water as a doublet is impossible (10 electrons need an odd multiplicity; common practice).
    let err = System::new(vec![Element(8), Element(1), Element(1)], 0, 2)
        .unwrap_err()
        .to_string();
    assert!(err.contains("10 electrons"), "{err}");
    assert!(System::new(vec![], 0, 1).is_err());
}

/// Steepest descent with a fixed step on a model surface: a tiny ask/tell algorithm.
struct Descent {
    x: DVector<f64>,
    step: f64,
    tol: f64,
    max_iter: usize,
    iter: usize,
    energies: Vec<f64>,
}

impl Algorithm for Descent {
    type Verdict = (DVector<f64>, f64, usize);
    fn step(&mut self, answers: Vec<Answer>) -> Result<Step<Self::Verdict>, AlgoError> {
        if let Some(a) = answers.first() {
            let g = a
                .gradient
                .as_ref()
                .ok_or_else(|| AlgoError("no gradient".into()))?;
            self.energies.push(a.energy);
            if g.norm() < self.tol {
                return Ok(Step::Done((self.x.clone(), a.energy, self.iter)));
            }
            if self.iter >= self.max_iter {
                return Err(AlgoError(format!("no convergence in {} steps", self.iter)));
            }
            self.x -= g * self.step;
            self.iter += 1;
        }
        Ok(Step::Evaluate(vec![Point::new(
            self.x.clone(),
            Quantity::Gradient,
        )]))
    }
}

fn descent() -> Descent {
    Descent {
        x: DVector::from_vec(vec![-0.4, 1.3, 0.0]),
        step: 2e-4,
        tol: 1e-6,
        max_iter: 5000,
        iter: 0,
        energies: vec![],
    }
}

#[test]
fn driver_runs_an_algorithm_and_replays_it_from_the_store() {
    let dir = tempfile::tempdir().unwrap();
    let engine = Arc::new(Counting::default());
    let ev = evaluator(engine.clone(), dir.path(), 2);
    let sys = mb_system();
    let mut algo = descent();
    let mut rounds = Vec::new();
    let ((x, e, iters), stats) = block_on(drive_observed(&mut algo, &ev, &sys, |s| {
        rounds.push((s.round, s.points.len(), s.answers.len(), s.stats.points))
    }))
    .unwrap();
    // Müller–Brown minimum A: (−0.558224, 1.441726), E = −146.699517 (Müller & Brown 1979,
    // Table 1 as commonly quoted; from memory).
    assert!((x[0] - -0.558224).abs() < 1e-5, "{x}");
    assert!((x[1] - 1.441726).abs() < 1e-5, "{x}");
    assert!((e - -146.699517).abs() < 1e-5, "{e}");
    let runs = engine.calls.load(Ordering::SeqCst);
    assert_eq!(runs, iters + 1);
    assert_eq!(stats.engine_runs as usize, runs);
    assert_eq!(stats.gradient_evaluations as usize, runs);
    assert_eq!(rounds.len(), runs);
    for (k, r) in rounds.iter().enumerate() {
        assert_eq!(*r, (k + 1, 1, 1, k as u64 + 1));
    }
    // The energy goes down monotonically with this small step (up to rounding near the minimum).
    let ups: Vec<_> = algo
        .energies
        .windows(2)
        .enumerate()
        .filter(|(_, w)| w[1] > w[0] + 1e-12)
        .collect();
    assert!(ups.is_empty(), "{ups:?}");

    // Running again (a fresh algorithm, a fresh evaluator on the same store) replays it all.
    let ev2 = evaluator(engine.clone(), dir.path(), 2);
    let mut again = descent();
    let ((x2, e2, iters2), stats2) = block_on(drive(&mut again, &ev2, &sys)).unwrap();
    assert_eq!(
        engine.calls.load(Ordering::SeqCst),
        runs,
        "engine ran on replay"
    );
    assert_eq!(stats2.engine_runs, 0);
    assert_eq!(stats2.store_hits as usize, runs);
    assert_eq!(iters2, iters);
    assert_eq!(e2.to_bits(), e.to_bits());
    assert_eq!(x2, x);
}

#[test]
fn algorithm_errors_name_the_engine_and_round() {
    let dir = tempfile::tempdir().unwrap();
    let ev = evaluator(Arc::new(Counting::default()), dir.path(), 1);
    let mut algo = descent();
    algo.max_iter = 3;
    let err = block_on(drive(&mut algo, &ev, &mb_system()))
        .unwrap_err()
        .to_string();
    assert!(err.contains("no convergence in 3 steps"), "{err}");
    assert!(err.contains("engine 'counting'"), "{err}");
    assert!(err.contains("after 4 batches"), "{err}");
}

#[test]
fn local_executor_returns_one_report_per_job_in_order() {
    let pool = LocalExecutor::new(2).with_retries(0);
    assert_eq!(pool.describe(), "local, 2 slots, 0 retries");
    let jobs: Vec<Job> = (0..5)
        .map(|i| Job {
            elements: vec![Element::X],
            coords: DVector::from_vec(vec![0.1 * i as f64, 0.5, 0.0]),
            charge: 0,
            multiplicity: 1,
            quantity: Quantity::Energy,
            threads: 1,
        })
        .collect();
    let reports =
        block_on(async { Ok(pool.run(Arc::new(MullerBrown), jobs.clone()).await) }).unwrap();
    assert_eq!(reports.len(), 5);
    for (r, j) in reports.iter().zip(&jobs) {
        let o = r.result.as_ref().unwrap();
        let (e, _, _) = model::muller_brown(j.coords[0], j.coords[1]);
        assert_eq!(o.answer.energy.to_bits(), e.to_bits());
        assert_eq!(r.attempts, 1);
    }
}
