//! Executors: where engine runs happen.
//!
//! An [`Executor`] takes an engine and a batch of jobs and returns one [`RunReport`] per job,
//! in order. The [`LocalExecutor`] runs jobs on this machine in a bounded pool (`slots` jobs at
//! once), retrying failed runs within a budget. One executor is meant to be shared (in an
//! `Arc`) by every driver of a study, so several reactions running side by side still use at
//! most `slots` engine processes in total.

use crate::engine::{Engine, EngineFailure, FailureKind, Job, Outcome};
use std::future::Future;
use std::pin::Pin;
use std::sync::atomic::{AtomicUsize, Ordering};
use std::sync::Arc;
use tokio::sync::Semaphore;

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

/// Whether a failure is worth another attempt.
pub fn is_retryable(kind: &FailureKind) -> bool {
    !matches!(kind, FailureKind::MissingExecutable | FailureKind::BadInput)
}

/// Runs jobs on this machine, at most `slots` at once, each through `spawn_blocking`.
///
/// Attempt 0 is the plain run; on a retryable failure attempts 1, 2, … follow (the engine
/// applies its remedies for attempts ≥ 1) until one succeeds or `retries` extra attempts are
/// spent. A job holds its slot across its attempts. An answer that fails
/// [`crate::eval::Answer::validate`] counts as a [`FailureKind::BadOutput`] failure.
#[derive(Debug)]
pub struct LocalExecutor {
    slots: usize,
    retries: usize,
    sem: Arc<Semaphore>,
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
            sem: Arc::new(Semaphore::new(slots)),
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
            let mut set = tokio::task::JoinSet::new();
            for (i, job) in jobs.into_iter().enumerate() {
                let engine = engine.clone();
                let sem = self.sem.clone();
                let running = self.running.clone();
                let peak = self.peak.clone();
                let retries = self.retries;
                set.spawn(async move {
                    let report = match sem.acquire_owned().await {
                        Ok(permit) => {
                            let engine_name = engine.name().to_string();
                            let joined = tokio::task::spawn_blocking(move || {
                                let now = running.fetch_add(1, Ordering::SeqCst) + 1;
                                peak.fetch_max(now, Ordering::SeqCst);
                                let r = run_with_retries(engine.as_ref(), &job, retries);
                                running.fetch_sub(1, Ordering::SeqCst);
                                drop(permit);
                                r
                            })
                            .await;
                            joined.unwrap_or_else(|e| {
                                single_failure(
                                    FailureKind::Crash,
                                    format!("the '{engine_name}' engine run panicked ({e}); this is a bug in Cairn, please report it"),
                                )
                            })
                        }
                        Err(_) => single_failure(
                            FailureKind::Crash,
                            "the local executor was shut down".into(),
                        ),
                    };
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
    let mut failures = Vec::new();
    let mut unusable_output = String::new();
    let mut attempt = 0;
    loop {
        let result = engine.evaluate(job, attempt).and_then(|o| {
            match o.answer.validate(job.quantity, job.coords.len()) {
                Ok(()) => Ok(o),
                Err(why) => {
                    unusable_output = o.raw_output;
                    Err(EngineFailure {
                        kind: FailureKind::BadOutput,
                        message: format!("the answer is unusable: {why}"),
                        output: None,
                    })
                }
            }
        });
        match result {
            Ok(o) => {
                return RunReport {
                    result: Ok(o),
                    attempts: attempt + 1,
                    failures,
                    unusable_output: String::new(),
                }
            }
            Err(f) => {
                failures.push(f.clone());
                if attempt >= retries || !is_retryable(&f.kind) {
                    return RunReport {
                        result: Err(f),
                        attempts: attempt + 1,
                        failures,
                        unusable_output,
                    };
                }
                attempt += 1;
            }
        }
    }
}
