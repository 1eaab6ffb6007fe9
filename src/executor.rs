//! Executors: where engine runs happen.
//!
//! An [`Executor`] takes an engine and a batch of jobs and returns one [`RunReport`] per job,
//! in order. The [`LocalExecutor`] runs jobs on this machine in a bounded pool (`slots` jobs at
//! once), retrying failed runs within a budget. One executor is meant to be shared (in an
//! `Arc`) by every driver of a study, so several reactions running side by side still use at
//! most `slots` engine processes in total.

use crate::engine::{Engine, EngineFailure, FailureKind, Job, Outcome};
use std::collections::BinaryHeap;
use std::future::Future;
use std::pin::Pin;
use std::sync::atomic::{AtomicUsize, Ordering};
use std::sync::Arc;
use std::sync::Mutex;
use tokio::sync::oneshot;

/// A boxed future (executors are used as `Arc<dyn Executor>`).
pub type BoxFuture<'a, T> = Pin<Box<dyn Future<Output = T> + Send + 'a>>;

/// The record of one job: the final result and every failed attempt before it.
#[derive(Debug, Clone)]
pub struct RunReport {
    /// The successful outcome, or the last failure once the retry budget is spent (or the
    /// failure is not worth retrying).
    pub result: Result<Outcome, EngineFailure>,
    /// Attempts made (1 = first try).
    pub attempts: usize,
    /// Failures of the attempts that did not succeed, in order (the last one is `result`'s
    /// error when the job failed).
    pub failures: Vec<EngineFailure>,
    /// Raw output of the last attempt whose answer was unusable (empty otherwise), so the
    /// caller can keep it for the user.
    pub unusable_output: String,
}

/// Runs batches of engine jobs.
pub trait Executor: Send + Sync {
    /// Short description for messages, e.g. "local, 4 slots".
    fn describe(&self) -> String;
    /// Run every job of the batch (in parallel as far as the executor allows); one report per
    /// job, in the order of `jobs`.
    fn run(&self, engine: Arc<dyn Engine>, jobs: Vec<Job>) -> BoxFuture<'_, Vec<RunReport>>;
}

tokio::task_local! {
    /// How urgent the evaluations asked for inside [`with_weight`] are (higher = sooner).
    static WEIGHT: u64;
}

/// Run `f` with every engine job it asks for weighted `weight` in the local pool: when slots
/// are scarce, jobs of a heavier task go first. The study runner passes a task's critical-path
/// length (its estimated engine calls plus the longest chain after it), so the reaction that
/// would otherwise finish last is served first and the others fill the gaps around it.
pub async fn with_weight<F: Future>(weight: u64, f: F) -> F::Output {
    WEIGHT.scope(weight, f).await
}

/// The weight of the current task (0 outside [`with_weight`]).
pub fn current_weight() -> u64 {
    WEIGHT.try_with(|w| *w).unwrap_or(0)
}

/// A waiting job's place in the pool: its task's weight first, then smaller batches first.
pub type Priority = (u64, usize);

/// Whether a failure is worth another attempt.
pub fn is_retryable(kind: &FailureKind) -> bool {
    !matches!(kind, FailureKind::MissingExecutable | FailureKind::BadInput)
}

/// Runs jobs on this machine, at most `slots` at once, each through `spawn_blocking`.
///
/// Attempt 0 is the plain run; on a retryable failure attempts 1, 2, … follow (the engine
/// applies its remedies for attempts ≥ 1) until one succeeds or `retries` extra attempts are
/// spent. Each attempt is staged (templates, scratch directory, input files) before it takes
/// a slot and read after it gives the slot back, so a slot is held only while an engine
/// process runs; a retry waits for a slot again, at the same priority. An answer that fails
/// [`crate::eval::Answer::validate`] counts as a [`FailureKind::BadOutput`] failure.
#[derive(Debug)]
pub struct LocalExecutor {
    slots: usize,
    retries: usize,
    sem: Arc<Slots>,
    running: Arc<AtomicUsize>,
    peak: Arc<AtomicUsize>,
}

impl LocalExecutor {
    /// A pool of `slots` concurrent jobs (at least 1) with the default retry budget of 2.
    pub fn new(slots: usize) -> Self {
        let slots = slots.max(1);
        LocalExecutor {
            slots,
            retries: 2,
            sem: Arc::new(Slots::new(slots)),
            running: Arc::new(AtomicUsize::new(0)),
            peak: Arc::new(AtomicUsize::new(0)),
        }
    }

    /// Another view of the same pool (same slots, shared with this one) with its own retry
    /// budget: a study's stages may each set `retries`, yet all share one bounded pool.
    pub fn sharing(&self, retries: usize) -> Self {
        LocalExecutor {
            slots: self.slots,
            retries,
            sem: self.sem.clone(),
            running: self.running.clone(),
            peak: self.peak.clone(),
        }
    }

    /// Set the retry budget: extra attempts after a retryable failure (0 = no retries).
    pub fn with_retries(mut self, retries: usize) -> Self {
        self.retries = retries;
        self
    }

    pub fn slots(&self) -> usize {
        self.slots
    }
    pub fn retries(&self) -> usize {
        self.retries
    }
    /// Most jobs that were ever running at once in this pool.
    pub fn peak_concurrency(&self) -> usize {
        self.peak.load(Ordering::SeqCst)
    }
}

impl Executor for LocalExecutor {
    fn describe(&self) -> String {
        format!(
            "local, {} slot{}, {} retr{}",
            self.slots,
            if self.slots == 1 { "" } else { "s" },
            self.retries,
            if self.retries == 1 { "y" } else { "ies" }
        )
    }

    fn run(&self, engine: Arc<dyn Engine>, jobs: Vec<Job>) -> BoxFuture<'_, Vec<RunReport>> {
        Box::pin(async move {
            let n = jobs.len();
            let weight = current_weight();
            let mut set = tokio::task::JoinSet::new();
            for (i, job) in jobs.into_iter().enumerate() {
                let engine = engine.clone();
                let sem = self.sem.clone();
                let running = self.running.clone();
                let peak = self.peak.clone();
                let retries = self.retries;
                // The task's weight first (see `with_weight`); then smaller batches first: a
                // lone request is usually one step of a sequential chain (a scan point, an IRC
                // step, a P-RFO step) that holds up everything after it, while a big batch
                // (band images, finite differences) can fill whatever slots are left.
                let priority = (weight, usize::MAX - n);
                set.spawn(async move {
                    let report =
                        run_in_pool(engine, job, retries, &sem, priority, &running, &peak).await;
                    (i, report)
                });
            }
            let mut out: Vec<Option<RunReport>> = vec![None; n];
            while let Some(joined) = set.join_next().await {
                if let Ok((i, r)) = joined {
                    if let Some(slot) = out.get_mut(i) {
                        *slot = Some(r);
                    }
                }
            }
            out.into_iter()
                .map(|r| {
                    r.unwrap_or_else(|| {
                        single_failure(FailureKind::Crash, "the job was lost".into())
                    })
                })
                .collect()
        })
    }
}

/// A counting pool of slots whose waiters are served by priority (highest first; first come
/// first served among equals), unlike a FIFO semaphore.
#[derive(Debug)]
pub struct Slots {
    state: Mutex<SlotState>,
}

#[derive(Debug)]
struct SlotState {
    free: usize,
    seq: u64,
    waiters: BinaryHeap<Waiter>,
}

#[derive(Debug)]
struct Waiter {
    priority: Priority,
    /// Arrival order (smaller = earlier).
    seq: u64,
    tx: oneshot::Sender<()>,
}

impl PartialEq for Waiter {
    fn eq(&self, o: &Self) -> bool {
        self.priority == o.priority && self.seq == o.seq
    }
}
impl Eq for Waiter {}
impl PartialOrd for Waiter {
    fn partial_cmp(&self, o: &Self) -> Option<std::cmp::Ordering> {
        Some(self.cmp(o))
    }
}
impl Ord for Waiter {
    fn cmp(&self, o: &Self) -> std::cmp::Ordering {
        self.priority
            .cmp(&o.priority)
            .then_with(|| o.seq.cmp(&self.seq))
    }
}

/// One slot, held until dropped.
#[derive(Debug)]
pub struct SlotPermit {
    slots: Arc<Slots>,
}

impl Drop for SlotPermit {
    fn drop(&mut self) {
        self.slots.release();
    }
}

struct WaitGuard {
    rx: Option<oneshot::Receiver<()>>,
    slots: Arc<Slots>,
}

impl Drop for WaitGuard {
    fn drop(&mut self) {
        if let Some(mut rx) = self.rx.take() {
            rx.close();
            if rx.try_recv().is_ok() {
                self.slots.release();
            }
        }
    }
}

impl Slots {
    pub fn new(n: usize) -> Slots {
        Slots {
            state: Mutex::new(SlotState {
                free: n,
                seq: 0,
                waiters: BinaryHeap::new(),
            }),
        }
    }

    fn lock(&self) -> std::sync::MutexGuard<'_, SlotState> {
        self.state.lock().unwrap_or_else(|e| e.into_inner())
    }

    /// Wait for a slot. Err only if the pool went away while waiting.
    pub async fn acquire(self: &Arc<Self>, priority: Priority) -> Result<SlotPermit, ()> {
        let rx = {
            let mut st = self.lock();
            if st.free > 0 && st.waiters.is_empty() {
                st.free -= 1;
                return Ok(SlotPermit {
                    slots: self.clone(),
                });
            }
            let (tx, rx) = oneshot::channel();
            st.seq += 1;
            let seq = st.seq;
            st.waiters.push(Waiter { priority, seq, tx });
            rx
        };
        // The releaser hands its slot over by sending; the permit is then ours. If this
        // future is dropped after a hand-over but before it saw it, the guard gives the slot
        // back.
        let mut guard = WaitGuard {
            rx: Some(rx),
            slots: self.clone(),
        };
        let got = match guard.rx.as_mut() {
            Some(rx) => rx.await,
            None => return Err(()),
        };
        guard.rx = None;
        got.map_err(|_| ())?;
        Ok(SlotPermit {
            slots: self.clone(),
        })
    }

    /// Give a slot back: to the best waiter still waiting, else to the pool.
    fn release(&self) {
        let mut st = self.lock();
        while let Some(w) = st.waiters.pop() {
            if w.tx.send(()).is_ok() {
                return;
            }
        }
        st.free += 1;
    }
}

fn single_failure(kind: FailureKind, message: String) -> RunReport {
    let f = EngineFailure {
        kind,
        message,
        output: None,
    };
    RunReport {
        result: Err(f.clone()),
        attempts: 1,
        failures: vec![f],
        unusable_output: String::new(),
    }
}

/// Run one job, retrying within the budget. Blocking.
pub fn run_with_retries(engine: &dyn Engine, job: &Job, retries: usize) -> RunReport {
    run_attempts(engine, job, 0, retries)
}

/// Run one job starting at attempt `first` (so the engine applies remedies 1..first at once)
/// and going on up to attempt `last` at most. `attempts` in the report counts the attempts made
/// here. Blocking. Used by executors that resume a job elsewhere (a Slurm job killed at its
/// time limit is retried from its next attempt).
pub fn run_attempts(engine: &dyn Engine, job: &Job, first: usize, last: usize) -> RunReport {
    let mut record = Attempts::new(first, last);
    let mut attempt = first;
    loop {
        let result = engine.evaluate(job, attempt);
        if let Some(report) = record.add(job, attempt, result) {
            return report;
        }
        attempt += 1;
    }
}

/// One job in the local pool, attempt after attempt: each attempt is staged (inputs written)
/// before it waits for a slot, holds the slot only while the engine runs, and is read after
/// the slot is given back.
async fn run_in_pool(
    engine: Arc<dyn Engine>,
    job: Job,
    retries: usize,
    slots: &Arc<Slots>,
    priority: Priority,
    running: &Arc<AtomicUsize>,
    peak: &Arc<AtomicUsize>,
) -> RunReport {
    let mut record = Attempts::new(0, retries);
    let mut attempt = 0;
    let panicked = |e: tokio::task::JoinError| EngineFailure {
        kind: FailureKind::Crash,
        message: format!(
            "the '{}' engine run panicked ({e}); this is a bug in Cairn, please report it",
            engine.name()
        ),
        output: None,
    };
    loop {
        let (e, j) = (engine.clone(), job.clone());
        let staged = tokio::task::spawn_blocking(move || e.stage(j, attempt))
            .await
            .unwrap_or_else(|e| Err(panicked(e)));
        let result = match staged {
            Err(f) => Err(f),
            Ok(mut run) => {
                let Ok(permit) = slots.acquire(priority).await else {
                    return single_failure(
                        FailureKind::Crash,
                        "the local executor was shut down".into(),
                    );
                };
                let (running, peak) = (running.clone(), peak.clone());
                tokio::task::spawn_blocking(move || {
                    let now = running.fetch_add(1, Ordering::SeqCst) + 1;
                    peak.fetch_max(now, Ordering::SeqCst);
                    run.execute();
                    running.fetch_sub(1, Ordering::SeqCst);
                    drop(permit);
                    run.finish()
                })
                .await
                .unwrap_or_else(|e| Err(panicked(e)))
            }
        };
        if let Some(report) = record.add(&job, attempt, result) {
            return report;
        }
        attempt += 1;
    }
}

/// The record of a job's attempts, from `first` to `last` at most.
struct Attempts {
    first: usize,
    last: usize,
    failures: Vec<EngineFailure>,
    unusable_output: String,
}

impl Attempts {
    fn new(first: usize, last: usize) -> Attempts {
        Attempts {
            first,
            last,
            failures: Vec::new(),
            unusable_output: String::new(),
        }
    }

    /// Take one attempt's result (an answer that fails [`crate::eval::Answer::validate`] is a
    /// [`FailureKind::BadOutput`] failure). The report, once the job is done: on success, on a
    /// failure not worth retrying, or when the budget is spent.
    fn add(
        &mut self,
        job: &Job,
        attempt: usize,
        result: Result<Outcome, EngineFailure>,
    ) -> Option<RunReport> {
        let result = result.and_then(
            |o| match o.answer.validate(job.quantity, job.coords.len()) {
                Ok(()) => Ok(o),
                Err(why) => {
                    self.unusable_output = o.raw_output;
                    Err(EngineFailure {
                        kind: FailureKind::BadOutput,
                        message: format!("the answer is unusable: {why}"),
                        output: None,
                    })
                }
            },
        );
        let attempts = attempt + 1 - self.first;
        match result {
            Ok(o) => Some(RunReport {
                result: Ok(o),
                attempts,
                failures: std::mem::take(&mut self.failures),
                unusable_output: String::new(),
            }),
            Err(f) => {
                self.failures.push(f.clone());
                if attempt >= self.last || !is_retryable(&f.kind) {
                    Some(RunReport {
                        result: Err(f),
                        attempts,
                        failures: std::mem::take(&mut self.failures),
                        unusable_output: std::mem::take(&mut self.unusable_output),
                    })
                } else {
                    None
                }
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn rt() -> tokio::runtime::Runtime {
        tokio::runtime::Builder::new_current_thread()
            .build()
            .unwrap()
    }

    #[test]
    fn slots_serve_waiters_by_priority_then_arrival() {
        rt().block_on(async {
            let slots = Arc::new(Slots::new(1));
            let held = slots.acquire((0, 0)).await.unwrap();
            let order = Arc::new(Mutex::new(Vec::new()));
            let mut set = tokio::task::JoinSet::new();
            for (name, prio) in [
                ("a", (0, 1)),
                ("b", (0, 5)),
                ("c", (0, 3)),
                ("d", (0, 5)),
                ("e", (1, 0)),
            ] {
                let s = slots.clone();
                let o = order.clone();
                set.spawn(async move {
                    let _p = s.acquire(prio).await.unwrap();
                    o.lock().unwrap().push(name);
                    tokio::task::yield_now().await;
                });
                // Let each waiter queue before the next arrives.
                tokio::task::yield_now().await;
            }
            drop(held);
            while set.join_next().await.is_some() {}
            // The heavier task first, then by batch rank, first come first served among equals.
            assert_eq!(*order.lock().unwrap(), ["e", "b", "d", "c", "a"]);
            // Every slot came back.
            assert_eq!(slots.lock().free, 1);
        });
    }

    #[test]
    fn a_task_weight_reaches_the_pool_through_nested_calls() {
        rt().block_on(async {
            assert_eq!(current_weight(), 0, "no weight outside with_weight");
            let seen = with_weight(7, async {
                // As the pool sees it: inside the boxed future the driver awaits.
                let inner: BoxFuture<'_, u64> = Box::pin(async { current_weight() });
                inner.await
            })
            .await;
            assert_eq!(seen, 7);
        });
    }

    #[test]
    fn a_waiter_dropped_after_the_hand_over_returns_the_slot() {
        rt().block_on(async {
            let slots = Arc::new(Slots::new(1));
            let held = slots.acquire((0, 0)).await.unwrap();
            let s = slots.clone();
            let waiter = tokio::spawn(async move { s.acquire((0, 1)).await.map(|_| ()) });
            tokio::task::yield_now().await;
            waiter.abort();
            drop(held);
            let _ = waiter.await;
            assert_eq!(slots.lock().free, 1, "the slot is not lost");
        });
    }

    /// An engine whose staging and running each take 60 ms and count how many of each are
    /// under way at once; its first attempt of every job fails (retryable).
    struct Phased {
        staging: AtomicUsize,
        running: AtomicUsize,
        most_staging: AtomicUsize,
        most_running: AtomicUsize,
    }

    struct PhasedRun {
        engine: Arc<Phased>,
        attempt: usize,
    }

    impl Engine for Phased {
        fn name(&self) -> &str {
            "phased"
        }
        fn identity(&self) -> String {
            "test:phased".into()
        }
        fn evaluate(&self, _: &Job, _: usize) -> Result<Outcome, EngineFailure> {
            unreachable!("the pool runs engines in phases")
        }
        fn stage(
            self: Arc<Self>,
            _job: Job,
            attempt: usize,
        ) -> Result<Box<dyn crate::engine::StagedRun>, EngineFailure> {
            let now = self.staging.fetch_add(1, Ordering::SeqCst) + 1;
            self.most_staging.fetch_max(now, Ordering::SeqCst);
            std::thread::sleep(std::time::Duration::from_millis(60));
            self.staging.fetch_sub(1, Ordering::SeqCst);
            Ok(Box::new(PhasedRun {
                engine: self,
                attempt,
            }))
        }
    }

    impl crate::engine::StagedRun for PhasedRun {
        fn execute(&mut self) {
            let e = &self.engine;
            let now = e.running.fetch_add(1, Ordering::SeqCst) + 1;
            e.most_running.fetch_max(now, Ordering::SeqCst);
            std::thread::sleep(std::time::Duration::from_millis(60));
            e.running.fetch_sub(1, Ordering::SeqCst);
        }
        fn finish(self: Box<Self>) -> Result<Outcome, EngineFailure> {
            if self.attempt == 0 {
                return Err(EngineFailure {
                    kind: FailureKind::Crash,
                    message: "first attempts crash".into(),
                    output: None,
                });
            }
            Ok(Outcome {
                answer: crate::eval::Answer {
                    energy: -1.0,
                    gradient: None,
                    hessian: None,
                },
                raw_output: String::new(),
                remedies: vec![],
                seconds: 0.06,
            })
        }
    }

    #[test]
    fn staging_runs_beside_the_engines_and_only_engines_hold_slots() {
        let rt = tokio::runtime::Builder::new_multi_thread()
            .worker_threads(2)
            .build()
            .unwrap();
        let engine = Arc::new(Phased {
            staging: AtomicUsize::new(0),
            running: AtomicUsize::new(0),
            most_staging: AtomicUsize::new(0),
            most_running: AtomicUsize::new(0),
        });
        let pool = LocalExecutor::new(1).with_retries(1);
        let job = Job {
            elements: vec![crate::elements::Element::from_symbol("H").unwrap(); 1],
            coords: nalgebra::DVector::zeros(3),
            charge: 0,
            multiplicity: 2,
            quantity: crate::eval::Quantity::Energy,
            threads: 1,
        };
        let reports = rt.block_on(pool.run(engine.clone(), vec![job; 4]));
        for r in &reports {
            assert!(r.result.is_ok(), "{:?}", r.result);
            assert_eq!(r.attempts, 2, "the retry went through the pool again");
            assert_eq!(r.failures.len(), 1);
        }
        assert_eq!(
            engine.most_running.load(Ordering::SeqCst),
            1,
            "one slot: never two engine runs at once"
        );
        assert!(
            engine.most_staging.load(Ordering::SeqCst) >= 2,
            "staging waited for the slot"
        );
        assert_eq!(pool.peak_concurrency(), 1);
    }
}
