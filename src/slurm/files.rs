//! The files a Slurm run shares between the runner and its jobs, under `DIR/cluster/`.
//!
//! ```text
//! DIR/cluster/submissions.log            one line per accepted sbatch: "<job id> <spec hash>"
//! DIR/cluster/adoptions.log             one line per recorded job a runner adopted or collected instead of submitting
//! DIR/cluster/jobs/<hash>/spec.json      what the job computes (engine, settings, jobs, attempts)
//! DIR/cluster/jobs/<hash>/job.sh         the generated batch script
//! DIR/cluster/jobs/<hash>/record.json    Slurm job id and state of the submission (atomic)
//! DIR/cluster/jobs/<hash>/started-<k>    evaluation k has started (empty file)
//! DIR/cluster/jobs/<hash>/result-<k>.json  evaluation k's report (atomic)
//! DIR/cluster/jobs/<hash>/end.json       the worker's end marker (atomic, written last)
//! DIR/cluster/jobs/<hash>/slurm-<id>.out the job's stdout and stderr
//! ```
//!
//! `<hash>` is the SHA-256 of the spec's JSON text, so a runner that asks for the same batch
//! again (after a restart, replaying from the store) finds the same directory and adopts the job
//! recorded there instead of submitting it twice.

use crate::elements::Element;
use crate::engine::{EngineFailure, FailureKind, Job, Outcome};
use crate::error::{Error, Result};
use crate::eval::{Answer, Quantity};
use crate::executor::RunReport;
use nalgebra::DVector;
use serde::{Deserialize, Serialize};
use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

/// Format number of every file here.
pub const FORMAT: u32 = 1;

/// One evaluation in a spec.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct SpecJob {
    /// Atomic numbers (0 = pseudo-atom X).
    pub elements: Vec<u8>,
    /// Flat 3N, bohr (surface units on model surfaces); written in serde_json's shortest
    /// round-trip form, read back exactly.
    pub coords: Vec<f64>,
    pub charge: i32,
    pub multiplicity: u32,
    pub quantity: Quantity,
    pub threads: usize,
    /// The attempt to start with (remedies 1..first applied at once).
    pub first_attempt: usize,
}

impl SpecJob {
    pub fn of(job: &Job, first_attempt: usize) -> SpecJob {
        SpecJob {
            elements: job.elements.iter().map(|e| e.0).collect(),
            coords: job.coords.iter().copied().collect(),
            charge: job.charge,
            multiplicity: job.multiplicity,
            quantity: job.quantity,
            threads: job.threads,
            first_attempt,
        }
    }

    pub fn job(&self) -> Job {
        Job {
            elements: self.elements.iter().map(|&z| Element(z)).collect(),
            coords: DVector::from_vec(self.coords.clone()),
            charge: self.charge,
            multiplicity: self.multiplicity,
            quantity: self.quantity,
            threads: self.threads,
        }
    }
}

/// What one Slurm job computes.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct Spec {
    pub format: u32,
    /// The study level the evaluations belong to (for messages).
    pub level: String,
    /// Engine name and settings, as `find_engine` takes them.
    pub engine: String,
    pub settings: BTreeMap<String, String>,
    /// `Engine::identity()` on the submitting side; the worker refuses to run if its engine
    /// has another identity (e.g. a different adapter file is found on the node).
    pub identity: String,
    /// Last attempt allowed (the study's retry budget).
    pub last_attempt: usize,
    /// The engine's own time limit per run, seconds (the study's `timeout`).
    pub timeout_seconds: Option<f64>,
    /// Evaluations run side by side inside the job (its CPUs per task).
    pub parallel: usize,
    pub jobs: Vec<SpecJob>,
}

impl Spec {
    /// The spec's text and its hash (hex SHA-256 of the text).
    pub fn text_and_hash(&self) -> (String, String) {
        use sha2::{Digest, Sha256};
        let text = serde_json::to_string(self).unwrap_or_default();
        let hash = hex::encode(Sha256::digest(text.as_bytes()));
        (text, hash)
    }
}

/// Where a submission stands, as the runner recorded it.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum RecordState {
    /// Written just before sbatch: if no id follows, look the job up by its name.
    Submitting,
    /// sbatch accepted it; `job_id` is set.
    Submitted,
    /// Cairn cancelled it (Ctrl-C); a later run submits it again.
    CancelledByCairn,
}

/// `record.json`.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct Record {
    pub format: u32,
    pub state: RecordState,
    pub job_id: Option<u64>,
    /// The Slurm job name (`cairn-` + the first 16 hex digits of the hash).
    pub name: String,
    pub hash: String,
    pub level: String,
    pub evaluations: usize,
    /// UTC, RFC 3339.
    pub time: String,
}

/// A failure as written by the worker.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct FailureFile {
    pub kind: FailureKind,
    pub message: String,
    pub output: Option<PathBuf>,
}

impl From<&EngineFailure> for FailureFile {
    fn from(f: &EngineFailure) -> Self {
        FailureFile {
            kind: f.kind.clone(),
            message: f.message.clone(),
            output: f.output.clone(),
        }
    }
}

impl From<FailureFile> for EngineFailure {
    fn from(f: FailureFile) -> Self {
        EngineFailure {
            kind: f.kind,
            message: f.message,
            output: f.output,
        }
    }
}

/// A successful outcome as written by the worker.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct OutcomeFile {
    pub answer: Answer,
    pub raw_output: String,
    pub remedies: Vec<String>,
    pub seconds: f64,
}

/// `result-<k>.json`: one evaluation's report.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct ResultFile {
    pub format: u32,
    pub ok: Option<OutcomeFile>,
    pub error: Option<FailureFile>,
    /// Attempts made inside this job.
    pub attempts: usize,
    pub failures: Vec<FailureFile>,
    pub unusable_output: String,
}

impl ResultFile {
    pub fn of(r: &RunReport) -> ResultFile {
        let (ok, error) = match &r.result {
            Ok(o) => (
                Some(OutcomeFile {
                    answer: o.answer.clone(),
                    raw_output: o.raw_output.clone(),
                    remedies: o.remedies.clone(),
                    seconds: o.seconds,
                }),
                None,
            ),
            Err(f) => (None, Some(FailureFile::from(f))),
        };
        ResultFile {
            format: FORMAT,
            ok,
            error,
            attempts: r.attempts,
            failures: r.failures.iter().map(FailureFile::from).collect(),
            unusable_output: r.unusable_output.clone(),
        }
    }

    /// The report, with the failures of earlier jobs (`before`) put in front.
    pub fn into_report(self, before: Vec<EngineFailure>, attempts_before: usize) -> RunReport {
        let result = match (self.ok, self.error) {
            (Some(o), _) => Ok(Outcome {
                answer: o.answer,
                raw_output: o.raw_output,
                remedies: o.remedies,
                seconds: o.seconds,
            }),
            (None, Some(f)) => Err(f.into()),
            (None, None) => Err(EngineFailure {
                kind: FailureKind::BadOutput,
                message: "the Slurm worker wrote a result with neither an answer nor an error"
                    .into(),
                output: None,
            }),
        };
        let mut failures = before;
        failures.extend(self.failures.into_iter().map(EngineFailure::from));
        RunReport {
            result,
            attempts: attempts_before + self.attempts,
            failures,
            unusable_output: self.unusable_output,
        }
    }
}

/// `end.json`: written by the worker as its last act.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct EndMarker {
    pub format: u32,
    /// False when the worker could not run the spec at all (`error` says why).
    pub ok: bool,
    pub error: Option<String>,
    pub evaluations: usize,
    pub host: String,
    pub time: String,
}

/// The directory of one spec.
pub fn spec_dir(root: &Path, hash: &str) -> PathBuf {
    root.join("jobs").join(hash)
}
pub fn result_path(dir: &Path, k: usize) -> PathBuf {
    dir.join(format!("result-{k}.json"))
}
pub fn started_path(dir: &Path, k: usize) -> PathBuf {
    dir.join(format!("started-{k}"))
}
pub fn end_path(dir: &Path) -> PathBuf {
    dir.join("end.json")
}
pub fn record_path(dir: &Path) -> PathBuf {
    dir.join("record.json")
}

/// Read a JSON file; `Ok(None)` when it does not exist.
pub fn read_json<T: for<'de> Deserialize<'de>>(path: &Path) -> Result<Option<T>> {
    match std::fs::read_to_string(path) {
        Ok(t) => serde_json::from_str(&t).map(Some).map_err(|e| {
            Error::invalid(format!(
                "{}: damaged file ({e}); delete it to let Cairn write it again",
                path.display()
            ))
        }),
        Err(e) if e.kind() == std::io::ErrorKind::NotFound => Ok(None),
        Err(e) => Err(Error::io(format!("cannot read {}", path.display()), e)),
    }
}

/// Write a value as JSON atomically (temp file, fsync, rename).
pub fn write_json<T: Serialize>(path: &Path, v: &T) -> Result<()> {
    let text = serde_json::to_string_pretty(v).unwrap_or_default();
    crate::xyz::write_atomic(path, &(text + "\n"))
}

/// Current UTC time, RFC 3339.
pub fn now_utc() -> String {
    crate::store::now_rfc3339()
}

/// The host name (for the end marker).
pub fn host_name() -> String {
    std::fs::read_to_string("/proc/sys/kernel/hostname")
        .map(|s| s.trim().to_string())
        .unwrap_or_else(|_| "unknown".into())
}
