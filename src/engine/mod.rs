//! Engines: what turns a geometry into an energy, gradient or Hessian.
//!
//! Two kinds implement [`Engine`]: external programs described by adapter files
//! (`adapters/*.yaml`, see [`adapter`]) and built-in model surfaces ([`model`]).
//! An engine evaluation is synchronous and blocking; executors run many of them side by side.

pub mod adapter;
pub mod extract;
pub mod model;
pub mod process;
pub mod spawn;

use crate::elements::Element;
use crate::eval::{Answer, Quantity};
use nalgebra::DVector;
use std::path::PathBuf;

/// One evaluation to run.
#[derive(Debug, Clone)]
pub struct Job {
    pub elements: Vec<Element>,
    /// Flat coordinates, 3N, bohr (surface units for model surfaces).
    pub coords: DVector<f64>,
    pub charge: i32,
    pub multiplicity: u32,
    pub quantity: Quantity,
    /// Threads the engine may use.
    pub threads: usize,
}

/// Why an engine run failed. `kind` drives retries; `output` points at the kept engine output.
#[derive(Debug, Clone, thiserror::Error)]
#[error("{kind}: {message}")]
pub struct EngineFailure {
    pub kind: FailureKind,
    pub message: String,
    /// Where the engine's raw output was kept, if anywhere.
    pub output: Option<PathBuf>,
}

/// Classes of engine failure.
#[derive(Debug, Clone, PartialEq, Eq, serde::Serialize, serde::Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum FailureKind {
    /// The executable is not installed / not on PATH: not worth retrying.
    MissingExecutable,
    /// Killed after its time limit.
    Timeout,
    /// Exited by a signal or with a non-zero status and no usable output.
    Crash,
    /// A failure signature of the adapter matched (its name).
    Signature(String),
    /// Output missing, truncated or not finite.
    BadOutput,
    /// The request itself is impossible (e.g. charge/multiplicity), not worth retrying.
    BadInput,
}

impl std::fmt::Display for FailureKind {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            FailureKind::MissingExecutable => f.write_str("executable not found"),
            FailureKind::Timeout => f.write_str("timed out"),
            FailureKind::Crash => f.write_str("crashed"),
            FailureKind::Signature(s) => write!(f, "failure signature '{s}'"),
            FailureKind::BadOutput => f.write_str("bad output"),
            FailureKind::BadInput => f.write_str("bad input"),
        }
    }
}

/// A successful evaluation, with the record of how it was obtained.
#[derive(Debug, Clone)]
pub struct Outcome {
    pub answer: Answer,
    /// Raw engine output (stdout/stderr and files read), kept with the result for the record.
    pub raw_output: String,
    /// Remedies applied before success (empty on a first-try success).
    pub remedies: Vec<String>,
    /// Wall seconds the engine ran.
    pub seconds: f64,
}

/// One engine run split in phases, so a pool holds an engine slot only while the engine
/// itself runs: [`Engine::stage`] prepares everything before the slot is taken (templates,
/// scratch directory, input files), [`StagedRun::execute`] runs the engine with the slot held,
/// and [`StagedRun::finish`] reads the answer after the slot is given back.
pub trait StagedRun: Send {
    /// Run the engine. The only phase that needs an engine slot; called once.
    fn execute(&mut self);
    /// The answer (or the failure), read after [`StagedRun::execute`].
    fn finish(self: Box<Self>) -> Result<Outcome, EngineFailure>;
}

/// The phases of an engine that does all its work in one call: everything happens in
/// `execute` (the default of [`Engine::stage`]).
struct WholeRun<E: Engine + ?Sized> {
    engine: std::sync::Arc<E>,
    job: Job,
    attempt: usize,
    result: Option<Result<Outcome, EngineFailure>>,
}

impl<E: Engine + ?Sized> StagedRun for WholeRun<E> {
    fn execute(&mut self) {
        self.result = Some(self.engine.evaluate(&self.job, self.attempt));
    }
    fn finish(self: Box<Self>) -> Result<Outcome, EngineFailure> {
        match self.result {
            Some(r) => r,
            None => self.engine.evaluate(&self.job, self.attempt),
        }
    }
}

/// Anything that evaluates energies, gradients and Hessians.
pub trait Engine: Send + Sync + 'static {
    /// Short name, e.g. "xtb" or "muller-brown".
    fn name(&self) -> &str;
    /// Everything that changes results (adapter name and version, its settings), as a canonical
    /// string: goes into the content-addressed store key.
    fn identity(&self) -> String;
    /// True for model surfaces (coordinates are surface units, no rigid-body projection).
    fn is_model(&self) -> bool {
        false
    }
    /// Run one evaluation. `attempt` counts from 0; adapters apply their remedies in order for
    /// attempts ≥ 1.
    fn evaluate(&self, job: &Job, attempt: usize) -> Result<Outcome, EngineFailure>;
    /// The same evaluation in phases (see [`StagedRun`]); an error here is the attempt's
    /// failure, found before any slot was taken. The default does everything in `execute`.
    fn stage(
        self: std::sync::Arc<Self>,
        job: Job,
        attempt: usize,
    ) -> Result<Box<dyn StagedRun>, EngineFailure> {
        Ok(Box::new(WholeRun {
            engine: self,
            job,
            attempt,
            result: None,
        }))
    }
}

/// The built-in Müller–Brown surface as an engine.
#[derive(Debug, Default, Clone)]
pub struct MullerBrown;

impl Engine for MullerBrown {
    fn name(&self) -> &str {
        "muller-brown"
    }
    fn identity(&self) -> String {
        "model:muller-brown:v1".into()
    }
    fn is_model(&self) -> bool {
        true
    }
    fn evaluate(&self, job: &Job, _attempt: usize) -> Result<Outcome, EngineFailure> {
        if job.elements.len() != 1 || !job.elements[0].is_pseudo() {
            return Err(EngineFailure {
                kind: FailureKind::BadInput,
                message:
                    "the muller-brown surface takes one pseudo-atom X (x, y = surface coordinates)"
                        .into(),
                output: None,
            });
        }
        Ok(Outcome {
            answer: model::muller_brown_answer(&job.coords, job.quantity),
            raw_output: String::new(),
            remedies: vec![],
            seconds: 0.0,
        })
    }
}

/// Lennard-Jones argon (see [`model::lj_argon`]) as an engine: real atoms (Ar only), bohr,
/// with the usual rigid-body projection.
#[derive(Debug, Default, Clone)]
pub struct LjArgon;

impl Engine for LjArgon {
    fn name(&self) -> &str {
        "lj-argon"
    }
    fn identity(&self) -> String {
        "model:lj-argon:eps=119.8K:sigma=3.405A:v1".into()
    }
    fn evaluate(&self, job: &Job, _attempt: usize) -> Result<Outcome, EngineFailure> {
        if job.elements.len() < 2 || job.elements.iter().any(|e| e.z() != 18) {
            return Err(EngineFailure {
                kind: FailureKind::BadInput,
                message: "the lj-argon surface takes two or more Ar atoms and nothing else".into(),
                output: None,
            });
        }
        Ok(Outcome {
            answer: model::lj_argon::answer(&job.coords, job.quantity),
            raw_output: String::new(),
            remedies: vec![],
            seconds: 0.0,
        })
    }
}

/// Settings of a level of theory: key → value (e.g. `method: gfn2`), as given in the study file
/// or on the command line (`--set key=value`).
pub type Settings = std::collections::BTreeMap<String, String>;

/// Names of the built-in model surfaces [`find_engine`] knows.
pub const MODEL_SURFACES: &[&str] = &["muller-brown", "lj-argon"];

/// Find an engine by name: built-in model surfaces first, then adapter files.
///
/// Adapter files are looked up in, in order: the directories in `CAIRN_ADAPTERS` (colon
/// separated), `./adapters`, and the `adapters/` directory shipped next to the executable's
/// source tree (compiled in as a fallback).
pub fn find_engine(name: &str, settings: &Settings) -> crate::Result<std::sync::Arc<dyn Engine>> {
    find_engine_limited(name, settings, None)
}

/// [`find_engine`] with a time limit per run (adapters only; the model surfaces answer at once).
pub fn find_engine_limited(
    name: &str,
    settings: &Settings,
    timeout: Option<std::time::Duration>,
) -> crate::Result<std::sync::Arc<dyn Engine>> {
    match name {
        "muller-brown" => {
            if let Some(k) = settings.keys().next() {
                return Err(crate::Error::invalid(format!(
                    "engine 'muller-brown' has no settings, but '{k}' was given"
                )));
            }
            Ok(std::sync::Arc::new(MullerBrown))
        }
        "lj-argon" => {
            if let Some(k) = settings.keys().next() {
                return Err(crate::Error::invalid(format!(
                    "engine 'lj-argon' has no settings, but '{k}' was given"
                )));
            }
            Ok(std::sync::Arc::new(LjArgon))
        }
        _ => adapter::load_engine_limited(name, settings, timeout),
    }
}
