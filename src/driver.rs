//! The driver: connects any ask/tell algorithm to an engine through the store and an executor.
//!
//! An [`Evaluator`] answers batches of [`Point`]s for one [`System`] (elements, charge,
//! multiplicity): it looks every point up in the [`Store`] first, runs the misses in parallel
//! through the [`Executor`], files the results, and counts what it did ([`Stats`]).
//! [`drive`] loops an [`Algorithm`] through an evaluator until its verdict. Because every answer
//! is filed under its content address, running a deterministic algorithm again replays it from
//! the store without starting the engine.
//!
//! ```no_run
//! # use cairn::driver::*; use cairn::engine::*; use std::sync::Arc;
//! # fn demo(mut algo: impl cairn::algo::Algorithm, m: &cairn::molecule::Molecule) -> cairn::Result<()> {
//! let engine = find_engine("muller-brown", &Settings::new())?;
//! let ev = Evaluator::local(engine, ".cairn-store", 2)?;
//! let system = System::of(m)?;
//! let (verdict, stats) = block_on(drive(&mut algo, &ev, &system))?;
//! # Ok(()) }
//! ```

use crate::algo::{Algorithm, Step};
use crate::elements::Element;
use crate::engine::{Engine, FailureKind, Job};
use crate::error::{Error, Result};
use crate::eval::{Answer, Point, Quantity};
use crate::executor::{Executor, LocalExecutor, RunReport};
use crate::molecule::Molecule;
use crate::store::{EntryRequest, Key, Lookup, Provenance, Store};
use serde::Serialize;
use std::collections::HashMap;
use std::path::{Path, PathBuf};
use std::sync::{Arc, Mutex};

/// What is being evaluated, besides the coordinates: elements, charge, multiplicity.
/// Made only through [`System::new`] / [`System::of`], which check charge and multiplicity.
#[derive(Debug, Clone, PartialEq)]
pub struct System {
    elements: Vec<Element>,
    charge: i32,
    multiplicity: u32,
}

impl System {
    /// Check and make a system. Fails on an empty atom list or an impossible
    /// charge/multiplicity (model surfaces made of pseudo-atoms X skip the electron check).
    pub fn new(elements: Vec<Element>, charge: i32, multiplicity: u32) -> Result<System> {
        if elements.is_empty() {
            return Err(Error::invalid("a system needs at least one atom"));
        }
        let n = elements.len();
        let mut m = Molecule::new(elements, vec![[0.0; 3]; n]);
        m.charge = charge;
        m.multiplicity = multiplicity;
        m.check_charge_multiplicity()?;
        Ok(System {
            elements: m.elements,
            charge,
            multiplicity,
        })
    }

    /// The system of a molecule (its elements, charge and multiplicity), checked.
    pub fn of(m: &Molecule) -> Result<System> {
        System::new(m.elements.clone(), m.charge, m.multiplicity)
    }

    pub fn elements(&self) -> &[Element] {
        &self.elements
    }
    pub fn charge(&self) -> i32 {
        self.charge
    }
    pub fn multiplicity(&self) -> u32 {
        self.multiplicity
    }
    /// 3N.
    pub fn n_coords(&self) -> usize {
        3 * self.elements.len()
    }
}

/// Counters of an [`Evaluator`] (or the difference of two snapshots).
#[derive(Debug, Clone, Copy, Default, PartialEq, Serialize)]
pub struct Stats {
    /// Batches answered (calls of [`Evaluator::evaluate`]).
    pub batches: u64,
    /// Points answered, from the store or the engine.
    pub points: u64,
    /// Answers delivered per quantity (from the store or the engine).
    pub energy_evaluations: u64,
    pub gradient_evaluations: u64,
    pub hessian_evaluations: u64,
    /// Points answered from the store without running the engine (including repeats of a
    /// point within one batch and points another driver evaluated meanwhile).
    pub store_hits: u64,
    /// Store entries met that could not be used (damaged or of a newer format); each was
    /// reported and evaluated anew.
    pub store_unusable: u64,
    /// Jobs handed to the engine (each counted once, whatever its number of attempts).
    pub engine_runs: u64,
    /// Extra attempts after failures (attempts − 1, summed over jobs).
    pub retries: u64,
    /// Successful jobs that needed an engine remedy.
    pub remedied_runs: u64,
    /// Jobs that still failed after their retries.
    pub failed_runs: u64,
    /// Engine wall seconds of the successful runs.
    pub engine_seconds: f64,
}

impl Stats {
    fn add(&mut self, o: &Stats) {
        self.batches += o.batches;
        self.points += o.points;
        self.energy_evaluations += o.energy_evaluations;
        self.gradient_evaluations += o.gradient_evaluations;
        self.hessian_evaluations += o.hessian_evaluations;
        self.store_hits += o.store_hits;
        self.store_unusable += o.store_unusable;
        self.engine_runs += o.engine_runs;
        self.retries += o.retries;
        self.remedied_runs += o.remedied_runs;
        self.failed_runs += o.failed_runs;
        self.engine_seconds += o.engine_seconds;
    }

    /// `self − earlier`, counter by counter (for the work done between two snapshots).
    pub fn since(&self, earlier: &Stats) -> Stats {
        Stats {
            batches: self.batches.saturating_sub(earlier.batches),
            points: self.points.saturating_sub(earlier.points),
            energy_evaluations: self
                .energy_evaluations
                .saturating_sub(earlier.energy_evaluations),
            gradient_evaluations: self
                .gradient_evaluations
                .saturating_sub(earlier.gradient_evaluations),
            hessian_evaluations: self
                .hessian_evaluations
                .saturating_sub(earlier.hessian_evaluations),
            store_hits: self.store_hits.saturating_sub(earlier.store_hits),
            store_unusable: self.store_unusable.saturating_sub(earlier.store_unusable),
            engine_runs: self.engine_runs.saturating_sub(earlier.engine_runs),
            retries: self.retries.saturating_sub(earlier.retries),
            remedied_runs: self.remedied_runs.saturating_sub(earlier.remedied_runs),
            failed_runs: self.failed_runs.saturating_sub(earlier.failed_runs),
            engine_seconds: (self.engine_seconds - earlier.engine_seconds).max(0.0),
        }
    }
}

/// Where an answer came from.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Source {
    /// Served from the store: no engine ran for it in this call.
    Store,
    /// Computed by the engine in this call.
    Engine,
}

/// One answered point with its record.
#[derive(Debug, Clone)]
pub struct Evaluated {
    pub answer: Answer,
    pub source: Source,
    pub key: Key,
    /// Path of the store entry.
    pub entry: PathBuf,
    /// Remedies the engine applied (as recorded in the store entry).
    pub remedies: Vec<String>,
    /// Engine wall seconds of the run that produced the answer (possibly an earlier run).
    pub engine_seconds: f64,
}

/// Engine + store + executor + counters. Cheap to share by reference; [`Evaluator::scoped`]
/// gives a view with its own counters (for per-reaction numbers) on the same store and pool.
pub struct Evaluator {
    engine: Arc<dyn Engine>,
    identity: String,
    store: Arc<Store>,
    executor: Arc<dyn Executor>,
    threads: usize,
    /// Own counters first, then those of the evaluators this one was scoped from.
    counters: Vec<Arc<Mutex<Stats>>>,
}

impl Evaluator {
    /// An evaluator for `engine`, filing results in `store`, running jobs on `executor`.
    /// Each job may use 1 thread (see [`Evaluator::with_threads`]).
    pub fn new(engine: Arc<dyn Engine>, store: Arc<Store>, executor: Arc<dyn Executor>) -> Self {
        let identity = engine.identity();
        Evaluator {
            engine,
            identity,
            store,
            executor,
            threads: 1,
            counters: vec![Arc::new(Mutex::new(Stats::default()))],
        }
    }

    /// An evaluator with a store in `store_dir` and a local pool of `jobs` slots.
    pub fn local(
        engine: Arc<dyn Engine>,
        store_dir: impl AsRef<Path>,
        jobs: usize,
    ) -> Result<Self> {
        let store = Arc::new(Store::open(store_dir)?);
        Ok(Evaluator::new(
            engine,
            store,
            Arc::new(LocalExecutor::new(jobs)),
        ))
    }

    /// Threads each engine job may use (passed in [`Job::threads`]).
    pub fn with_threads(mut self, threads: usize) -> Self {
        self.threads = threads.max(1);
        self
    }

    /// Same engine, store and executor, with its own counters starting at zero. Work done
    /// through the scoped evaluator also counts in this one's counters.
    pub fn scoped(&self) -> Evaluator {
        let mut counters = vec![Arc::new(Mutex::new(Stats::default()))];
        counters.extend(self.counters.iter().cloned());
        Evaluator {
            engine: self.engine.clone(),
            identity: self.identity.clone(),
            store: self.store.clone(),
            executor: self.executor.clone(),
            threads: self.threads,
            counters,
        }
    }

    /// Snapshot of this evaluator's counters.
    pub fn stats(&self) -> Stats {
        self.counters
            .first()
            .map(|c| *c.lock().unwrap_or_else(|e| e.into_inner()))
            .unwrap_or_default()
    }

    pub fn engine(&self) -> &Arc<dyn Engine> {
        &self.engine
    }
    pub fn store(&self) -> &Arc<Store> {
        &self.store
    }
    pub fn executor(&self) -> &Arc<dyn Executor> {
        &self.executor
    }

    fn count(&self, delta: &Stats) {
        for c in &self.counters {
            c.lock().unwrap_or_else(|e| e.into_inner()).add(delta);
        }
    }

    /// Answer every point (same order). See [`Evaluator::evaluate_detailed`].
    pub async fn evaluate(&self, system: &System, points: &[Point]) -> Result<Vec<Answer>> {
        Ok(self
            .evaluate_detailed(system, points)
            .await?
            .into_iter()
            .map(|e| e.answer)
            .collect())
    }

    /// Answer every point, with where each answer came from.
    ///
    /// Points are looked up in the store first; the misses run in parallel through the
    /// executor and are filed (queued for the store's background writer: visible to lookups at
    /// once, on disk after [`Evaluator::flush`]; [`drive`] flushes at its verdict). Every answer is validated for its quantity. When some job fails,
    /// the successful ones are still filed (so running again resumes) and the error names the
    /// engine, the point and what to do.
    pub async fn evaluate_detailed(
        &self,
        system: &System,
        points: &[Point],
    ) -> Result<Vec<Evaluated>> {
        let n = system.n_coords();
        let name = self.engine.name().to_string();
        for (i, p) in points.iter().enumerate() {
            if p.coords.len() != n {
                return Err(Error::Algorithm(format!(
                    "point {} of {} asked of engine '{name}' has {} coordinates, but the system has {} atoms ({n} coordinates); this is a bug in the algorithm",
                    i + 1,
                    points.len(),
                    p.coords.len(),
                    system.elements.len()
                )));
            }
            if p.coords.iter().any(|c| !c.is_finite()) {
                return Err(Error::Algorithm(format!(
                    "point {} of {} asked of engine '{name}' has a non-finite coordinate; the algorithm has diverged (try a smaller step or a better start geometry)",
                    i + 1,
                    points.len()
                )));
            }
        }
        let keys: Vec<Key> = points
            .iter()
            .map(|p| {
                Key::new(
                    &self.identity,
                    system.charge,
                    system.multiplicity,
                    &system.elements,
                    &p.coords,
                    p.quantity,
                )
            })
            .collect();
        let mut delta = Stats {
            batches: 1,
            ..Stats::default()
        };
        let mut done: HashMap<Key, Evaluated> = HashMap::new();
        let mut first_of: Vec<usize> = Vec::new();
        {
            let mut seen = HashMap::new();
            for (i, k) in keys.iter().enumerate() {
                seen.entry(*k).or_insert_with(|| {
                    first_of.push(i);
                    i
                });
            }
        }
        let mut misses: Vec<usize> = Vec::new();
        for &i in &first_of {
            match self.lookup(&keys[i], &mut delta) {
                Some(e) => {
                    done.insert(keys[i], e);
                }
                None => misses.push(i),
            }
        }
        let mut failure: Option<Error> = None;
        if !misses.is_empty() {
            let miss_keys: Vec<Key> = misses.iter().map(|&i| keys[i]).collect();
            let _locks = self.store.lock_keys(&miss_keys).await;
            // Another driver may have filed some of them while we waited.
            let mut to_run = Vec::new();
            for &i in &misses {
                match self.lookup_quiet(&keys[i]) {
                    Some(e) => {
                        delta.store_hits += 1;
                        done.insert(keys[i], e);
                    }
                    None => to_run.push(i),
                }
            }
            if !to_run.is_empty() {
                let jobs: Vec<Job> = to_run
                    .iter()
                    .map(|&i| Job {
                        elements: system.elements.clone(),
                        coords: points[i].coords.clone(),
                        charge: system.charge,
                        multiplicity: system.multiplicity,
                        quantity: points[i].quantity,
                        threads: self.threads,
                    })
                    .collect();
                let reports = self.executor.run(self.engine.clone(), jobs).await;
                let filed = self
                    .file_results(system, points, &keys, &to_run, reports, &mut delta)
                    .await;
                match filed {
                    Ok(evs) => done.extend(evs),
                    Err(e) => failure = Some(e),
                }
            }
        }
        let mut out = Vec::with_capacity(points.len());
        if failure.is_none() {
            let mut used: HashMap<Key, bool> = HashMap::new();
            for (i, k) in keys.iter().enumerate() {
                let Some(e) = done.get(k) else {
                    failure = Some(Error::Engine {
                        engine: name.clone(),
                        msg: format!("point {} got no answer; this is a bug in Cairn", i + 1),
                        output: None,
                    });
                    break;
                };
                let mut e = e.clone();
                if used.insert(*k, true).is_some() {
                    // A repeat of a point already answered in this batch.
                    e.source = Source::Store;
                    delta.store_hits += 1;
                }
                delta.points += 1;
                match points[i].quantity {
                    Quantity::Energy => delta.energy_evaluations += 1,
                    Quantity::Gradient => delta.gradient_evaluations += 1,
                    Quantity::Hessian => delta.hessian_evaluations += 1,
                }
                out.push(e);
            }
        }
        self.count(&delta);
        match failure {
            Some(e) => Err(e),
            None => Ok(out),
        }
    }

    /// Look a key up, counting hits and reporting unusable entries.
    fn lookup(&self, key: &Key, delta: &mut Stats) -> Option<Evaluated> {
        match self.store.get(key) {
            Lookup::Hit(entry) => {
                let answer = entry.answer().ok()?;
                delta.store_hits += 1;
                Some(Evaluated {
                    answer,
                    source: Source::Store,
                    key: *key,
                    entry: self.store.entry_path(key),
                    remedies: entry.remedies.clone(),
                    engine_seconds: entry.engine_seconds,
                })
            }
            Lookup::Miss => None,
            Lookup::Unusable(why) => {
                tracing::warn!("{why}");
                delta.store_unusable += 1;
                None
            }
        }
    }

    /// Second lookup under the key lock (an unusable entry was already reported).
    fn lookup_quiet(&self, key: &Key) -> Option<Evaluated> {
        let mut scratch = Stats::default();
        self.lookup(key, &mut scratch)
    }

    /// File successful reports in the store; build the error for failed ones.
    async fn file_results(
        &self,
        system: &System,
        points: &[Point],
        keys: &[Key],
        to_run: &[usize],
        reports: Vec<RunReport>,
        delta: &mut Stats,
    ) -> Result<Vec<(Key, Evaluated)>> {
        let name = self.engine.name().to_string();
        let mut first_error: Option<Error> = None;
        let mut ok: Vec<(usize, crate::engine::Outcome, Vec<String>)> = Vec::new();
        let mut failed_outputs: Vec<(Key, String)> = Vec::new();
        for (&i, report) in to_run.iter().zip(reports) {
            delta.engine_runs += 1;
            delta.retries += report.attempts.saturating_sub(1) as u64;
            match report.result {
                Ok(o) => {
                    if !o.remedies.is_empty() {
                        delta.remedied_runs += 1;
                    }
                    delta.engine_seconds += o.seconds;
                    let failures = report.failures.iter().map(|f| f.to_string()).collect();
                    ok.push((i, o, failures));
                }
                Err(f) => {
                    delta.failed_runs += 1;
                    if first_error.is_none() {
                        let mut output = f.output.clone();
                        if output.is_none() && !report.unusable_output.is_empty() {
                            failed_outputs.push((keys[i], report.unusable_output.clone()));
                            output = Some(self.store.failed_output_path(&keys[i]));
                        }
                        first_error = Some(Error::Engine {
                            engine: name.clone(),
                            msg: format!(
                                "{} evaluation at point {} of {} failed after {} attempt{}: {f}; {}",
                                points[i].quantity.as_str(),
                                i + 1,
                                points.len(),
                                report.attempts,
                                if report.attempts == 1 { "" } else { "s" },
                                advice(&f.kind)
                            ),
                            output,
                        });
                    }
                }
            }
        }
        if !failed_outputs.is_empty() {
            let store = self.store.clone();
            let kept = tokio::task::spawn_blocking(move || {
                for (k, raw) in &failed_outputs {
                    if let Err(e) = store.keep_failed_output(k, raw) {
                        tracing::warn!("{e}");
                    }
                }
            })
            .await;
            if let Err(e) = kept {
                tracing::warn!("keeping failed engine output: {e}");
            }
        }
        // Queue for the store's background writer (lookups see them at once; `flush` or the
        // end of `drive` waits until they are on disk).
        let mut filed = Vec::with_capacity(ok.len());
        for (i, o, failures) in ok {
            let k = keys[i];
            let req = EntryRequest {
                identity: &self.identity,
                charge: system.charge,
                multiplicity: system.multiplicity,
                elements: &system.elements,
                coords: &points[i].coords,
                quantity: points[i].quantity,
            };
            let prov = Provenance {
                engine_name: name.clone(),
                remedies: o.remedies.clone(),
                failures,
                engine_seconds: o.seconds,
            };
            self.store
                .put_later(&k, &req, &o.answer, &prov, o.raw_output)?;
            filed.push((
                k,
                Evaluated {
                    answer: o.answer,
                    source: Source::Engine,
                    key: k,
                    entry: self.store.entry_path(&k),
                    remedies: o.remedies,
                    engine_seconds: o.seconds,
                },
            ));
        }
        match first_error {
            Some(e) => Err(e),
            None => Ok(filed),
        }
    }

    /// Wait until every result filed so far is on disk (the store writes in the background).
    /// Reports a failed store write.
    pub async fn flush(&self) -> Result<()> {
        let store = self.store.clone();
        tokio::task::spawn_blocking(move || store.flush())
            .await
            .map_err(|e| Error::invalid(format!("flushing the evaluation store failed: {e}")))?
    }
}

/// What the user can do about a failure of this kind.
fn advice(kind: &FailureKind) -> &'static str {
    match kind {
        FailureKind::MissingExecutable => {
            "install the engine or put its executable on PATH (see adapters/*.yaml for its name)"
        }
        FailureKind::BadInput => {
            "check the geometry, charge and multiplicity given for this system"
        }
        FailureKind::Timeout => "raise the engine's time limit or ask for fewer threads per job",
        FailureKind::Crash | FailureKind::Signature(_) | FailureKind::BadOutput => {
            "look at the kept engine output; the geometry may be unreasonable (atoms too close) or the engine settings unsuitable"
        }
    }
}

/// What an observer of [`drive_observed`] sees after each evaluated batch.
#[derive(Debug)]
pub struct StepInfo<'a> {
    /// 1 for the first batch.
    pub round: usize,
    pub points: &'a [Point],
    pub answers: &'a [Answer],
    /// Counters of this drive so far.
    pub stats: Stats,
}

/// Run an algorithm to its verdict, evaluating what it asks through `ev`. Returns the verdict
/// and the counters of this drive.
pub async fn drive<A: Algorithm>(
    algo: &mut A,
    ev: &Evaluator,
    system: &System,
) -> Result<(A::Verdict, Stats)> {
    drive_observed(algo, ev, system, |_: &StepInfo<'_>| {}).await
}

/// [`drive`] with an observer called after every evaluated batch (progress, trajectories).
pub async fn drive_observed<A, F>(
    algo: &mut A,
    ev: &Evaluator,
    system: &System,
    mut observer: F,
) -> Result<(A::Verdict, Stats)>
where
    A: Algorithm,
    F: FnMut(&StepInfo<'_>),
{
    // Counters of this drive alone, also rolled up into `ev`.
    let mine = ev.scoped();
    let mut answers = Vec::new();
    let mut round = 0;
    loop {
        let step = algo.step(std::mem::take(&mut answers)).map_err(|e| {
            Error::Algorithm(format!(
                "stopped after {round} batch{} on engine '{}': {e}",
                if round == 1 { "" } else { "es" },
                ev.engine.name()
            ))
        })?;
        match step {
            Step::Done(v) => {
                mine.flush().await?;
                return Ok((v, mine.stats()));
            }
            Step::Evaluate(points) => {
                round += 1;
                answers = mine.evaluate(system, &points).await?;
                observer(&StepInfo {
                    round,
                    points: &points,
                    answers: &answers,
                    stats: mine.stats(),
                });
            }
        }
    }
}

/// Run a future to completion on a fresh tokio runtime (for commands that are not async).
pub fn block_on<T>(fut: impl std::future::Future<Output = Result<T>>) -> Result<T> {
    let rt = tokio::runtime::Builder::new_multi_thread()
        .worker_threads(1)
        .enable_all()
        .build()
        .map_err(|e| Error::io("cannot start the async runtime", e))?;
    rt.block_on(fut)
}
