//! The Slurm executor: engine evaluations run as Slurm batch jobs.
//!
//! A batch from a driver is cut into groups of `group` evaluations; each group is one Slurm
//! job. For each group the executor writes a spec (engine name, settings, identity, the jobs and
//! their attempt numbers) into `DIR/cluster/jobs/<hash>/` (shared filesystem assumed), records
//! the submission atomically, and submits a generated script with `sbatch --parsable`. The
//! script runs the hidden `cairn slurm-worker SPEC` (this same binary), which evaluates the
//! group (retrying with the adapter's remedies inside the job), writes each result atomically,
//! and writes an end marker last. The executor waits for the marker, cross-checking the job's
//! state with squeue (and sacct once slurmctld forgot the job), and maps the end:
//!
//! | Slurm end | Cairn |
//! |---|---|
//! | end marker written | the results (whatever the state) |
//! | TIMEOUT, DEADLINE | `Timeout` failure with Slurm's state and reason; unfinished evaluations retried from their next attempt (remedies) within the retry budget |
//! | FAILED, OUT_OF_MEMORY, other | `Crash` failure naming Slurm's state, reason and exit code; retried likewise |
//! | CANCELLED (not by Cairn) | failure naming it; not retried |
//! | NODE_FAIL, PREEMPTED, BOOT_FAIL | submitted again with the same attempts (at most 3 times) |
//!
//! A restarted runner replays its algorithms from the store and asks for the same batches; the
//! same spec has the same hash, so it finds the recorded job id and adopts the job (waits for
//! it, or collects its results) instead of submitting again. See `files` for the layout.

pub mod client;
pub mod files;
pub mod worker;

use crate::engine::{Engine, EngineFailure, FailureKind, Job, Settings};
use crate::error::{Error, Result};
use crate::executor::{BoxFuture, Executor, RunReport};
use client::{EndClass, JobState, Listing};
use files::{EndMarker, Record, RecordState, ResultFile, Spec, SpecJob};
use serde::{Deserialize, Serialize};
use std::collections::{HashMap, HashSet};
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicU64, Ordering};
use std::sync::{Arc, Mutex};
use std::time::{Duration, Instant};

/// Per-level Slurm settings (the `slurm:` block of a level in the study file).
#[derive(Debug, Clone, PartialEq, Eq, Default, Serialize, Deserialize)]
pub struct SlurmOptions {
    /// `--partition`.
    pub partition: Option<String>,
    /// `--account`.
    pub account: Option<String>,
    /// `--time`, whole minutes (Slurm's granularity).
    pub time_limit_minutes: Option<u64>,
    /// `--mem`, as Slurm takes it (`2000`, `2G`).
    pub memory: Option<String>,
    /// `--cpus-per-task`; a job runs cpus-per-task ÷ threads-per-run evaluations side by side.
    pub cpus_per_task: Option<u32>,
    /// Extra `#SBATCH` lines (each an option, e.g. `--qos=short`).
    pub directives: Vec<String>,
    /// Shell lines run before the worker (e.g. `module load xtb`); the job stops at the first
    /// that fails.
    pub setup: Vec<String>,
    /// Evaluations per job (1 = one job per evaluation).
    pub group: usize,
}

impl SlurmOptions {
    pub fn group(&self) -> usize {
        self.group.max(1)
    }
    pub fn parallel(&self) -> usize {
        self.cpus_per_task.unwrap_or(1).max(1) as usize
    }
}

/// One line for people: `partition debug, time 10 min, memory 1G, 1 CPU per task, 4 evaluations per job, 1 setup line`.
pub fn describe_options(o: &SlurmOptions) -> String {
    let mut parts = vec![format!(
        "partition {}",
        o.partition.as_deref().unwrap_or("(cluster default)")
    )];
    if let Some(a) = &o.account {
        parts.push(format!("account {a}"));
    }
    if let Some(t) = o.time_limit_minutes {
        parts.push(format!("time limit {t} min"));
    }
    if let Some(m) = &o.memory {
        parts.push(format!("memory {m}"));
    }
    parts.push(format!(
        "{} CPU{} per task",
        o.parallel(),
        if o.parallel() == 1 { "" } else { "s" }
    ));
    parts.push(format!(
        "{} evaluation{} per job",
        o.group(),
        if o.group() == 1 { "" } else { "s" }
    ));
    if !o.directives.is_empty() {
        parts.push(format!("#SBATCH {}", o.directives.join(" ")));
    }
    if !o.setup.is_empty() {
        parts.push(format!(
            "{} setup line{}",
            o.setup.len(),
            if o.setup.len() == 1 { "" } else { "s" }
        ));
    }
    parts.join(", ")
}

/// Resubmissions of one group after node failure or preemption.
const MAX_REQUEUES: usize = 3;

/// Everything the executors of one study share: the cluster directory, the worker program,
/// the retry budget, and one squeue poller.
pub struct Cluster {
    root: PathBuf,
    worker: PathBuf,
    poll: Duration,
    /// Ids being waited on; the poller asks squeue about all of them at once.
    watched: Mutex<HashSet<u64>>,
    cache: tokio::sync::Mutex<Cache>,
    submitted: AtomicU64,
    adopted: AtomicU64,
    sbatch_nanos: AtomicU64,
    /// Start of the first and end of the last sbatch call.
    submit_window: Mutex<Option<(Instant, Instant)>>,
}

struct Cache {
    at: Option<Instant>,
    /// Ids the last query asked about.
    queried: HashSet<u64>,
    jobs: HashMap<u64, JobState>,
    error: Option<String>,
}

/// What happened to one submission.
struct JobEnd {
    job_id: Option<u64>,
    marker: Option<EndMarker>,
    state: Option<JobState>,
    log: PathBuf,
}

impl Cluster {
    /// The cluster state of a run lives in `root` (normally `DIR/cluster`). Fails when sbatch
    /// is not on PATH.
    pub fn new(root: impl AsRef<Path>) -> Result<Arc<Cluster>> {
        Self::with_worker(root, default_worker()?)
    }

    /// Same, with the program the jobs run (`cairn`, which has the `slurm-worker` command).
    pub fn with_worker(root: impl AsRef<Path>, worker: impl Into<PathBuf>) -> Result<Arc<Cluster>> {
        if which("sbatch").is_none() {
            return Err(Error::invalid(
                "the Slurm executor needs `sbatch` on PATH (this machine has no Slurm client); run with `--executor local`, or on a cluster login node",
            ));
        }
        let root = root.as_ref();
        std::fs::create_dir_all(root.join("jobs"))
            .map_err(|e| Error::io(format!("cannot create {}", root.display()), e))?;
        let root = root
            .canonicalize()
            .map_err(|e| Error::io(format!("cannot resolve {}", root.display()), e))?;
        Ok(Arc::new(Cluster {
            root,
            worker: worker.into(),
            poll: Duration::from_millis(
                std::env::var("CAIRN_SLURM_POLL_MS")
                    .ok()
                    .and_then(|v| v.parse().ok())
                    .unwrap_or(500),
            ),
            watched: Mutex::new(HashSet::new()),
            cache: tokio::sync::Mutex::new(Cache {
                at: None,
                queried: HashSet::new(),
                jobs: HashMap::new(),
                error: None,
            }),
            submitted: AtomicU64::new(0),
            adopted: AtomicU64::new(0),
            sbatch_nanos: AtomicU64::new(0),
            submit_window: Mutex::new(None),
        }))
    }

    pub fn root(&self) -> &Path {
        &self.root
    }
    /// Jobs this process submitted with sbatch.
    pub fn submitted(&self) -> u64 {
        self.submitted.load(Ordering::SeqCst)
    }
    /// Recorded jobs this process adopted instead of submitting (still queued or running, or
    /// finished with their end marker).
    pub fn adopted(&self) -> u64 {
        self.adopted.load(Ordering::SeqCst)
    }
    /// Seconds spent inside sbatch calls (summed over calls, which may overlap).
    pub fn sbatch_seconds(&self) -> f64 {
        self.sbatch_nanos.load(Ordering::SeqCst) as f64 * 1e-9
    }
    /// Seconds from the start of the first sbatch call to the end of the last one.
    pub fn submit_window_seconds(&self) -> f64 {
        self.submit_window
            .lock()
            .unwrap_or_else(|e| e.into_inner())
            .map(|(a, b)| (b - a).as_secs_f64())
            .unwrap_or(0.0)
    }

    /// An executor for one level: its engine (name and settings, for the worker) and its
    /// Slurm options; retry budget 2 and no per-run time limit unless set with
    /// [`SlurmExecutor::with_retries`] / [`SlurmExecutor::with_timeout`].
    pub fn executor(
        self: &Arc<Self>,
        level: &str,
        engine: &str,
        settings: &Settings,
        options: SlurmOptions,
    ) -> SlurmExecutor {
        SlurmExecutor {
            cluster: self.clone(),
            level: Arc::new(LevelJob {
                level: level.into(),
                engine: engine.into(),
                settings: settings.clone(),
                options,
                retries: 2,
                timeout_seconds: None,
            }),
        }
    }

    /// The state of `id` as of the last squeue query (refreshed when older than the poll
    /// interval; one query covers every watched job).
    async fn status(&self, id: u64) -> std::result::Result<Option<JobState>, String> {
        let mut c = self.cache.lock().await;
        let fresh =
            c.at.map(|t| t.elapsed() < self.poll).unwrap_or(false) && c.queried.contains(&id);
        if !fresh {
            let ids: Vec<u64> = {
                let mut w = self.watched.lock().unwrap_or_else(|e| e.into_inner());
                w.insert(id);
                w.iter().copied().collect()
            };
            match client::squeue(&ids).await {
                Listing::Jobs(m) => {
                    c.jobs = m;
                    c.error = None;
                }
                Listing::Failed(e) => c.error = Some(e),
            }
            c.queried = ids.into_iter().collect();
            c.at = Some(Instant::now());
        }
        if let Some(e) = &c.error {
            return Err(e.clone());
        }
        Ok(c.jobs.get(&id).cloned())
    }

    /// Force the next [`Cluster::status`] to ask squeue again.
    async fn invalidate(&self) {
        self.cache.lock().await.at = None;
    }

    /// Run one spec to its end: adopt the recorded job or submit, then wait.
    async fn run_spec(
        &self,
        spec: &Spec,
        opts: &SlurmOptions,
        resubmit: bool,
    ) -> Result<(String, JobEnd)> {
        let (text, hash) = spec.text_and_hash();
        let dir = files::spec_dir(&self.root, &hash);
        let name = format!("cairn-{}", &hash[..16]);
        let record: Option<Record> = files::read_json(&files::record_path(&dir))?;
        if !resubmit {
            if let Some(m) = files::read_json::<EndMarker>(&files::end_path(&dir))? {
                self.adopted.fetch_add(1, Ordering::SeqCst);
                let job_id = record.as_ref().and_then(|r| r.job_id);
                if let Some(id) = job_id {
                    append_line(&self.root.join("adoptions.log"), &format!("{id} {hash}\n"))?;
                }
                return Ok((
                    hash,
                    JobEnd {
                        job_id,
                        marker: Some(m),
                        state: None,
                        log: log_path(&dir, job_id),
                    },
                ));
            }
        }
        let mut adopt = None;
        if !resubmit {
            match &record {
                Some(r) if r.state == RecordState::Submitted => adopt = r.job_id,
                Some(r) if r.state == RecordState::Submitting => {
                    adopt = client::find_by_name(&r.name).await;
                    if let Some(id) = adopt {
                        self.write_record(&dir, spec, &hash, &name, Some(id))?;
                    }
                }
                _ => {}
            }
        }
        let id = match adopt {
            Some(id) => {
                tracing::info!("adopting Slurm job {id} ({name})");
                self.adopted.fetch_add(1, Ordering::SeqCst);
                append_line(&self.root.join("adoptions.log"), &format!("{id} {hash}\n"))?;
                id
            }
            None => {
                // A resubmission must not pick up the end marker of the previous job, nor its
                // marks on evaluations it started but did not finish.
                let _ = std::fs::remove_file(files::end_path(&dir));
                for k in 0..spec.jobs.len() {
                    if !files::result_path(&dir, k).exists() {
                        let _ = std::fs::remove_file(files::started_path(&dir, k));
                    }
                }
                self.submit(&dir, spec, &text, &hash, &name, opts).await?
            }
        };
        let end = self.wait(id, &dir).await;
        Ok((hash, end))
    }

    fn write_record(
        &self,
        dir: &Path,
        spec: &Spec,
        hash: &str,
        name: &str,
        id: Option<u64>,
    ) -> Result<()> {
        files::write_json(
            &files::record_path(dir),
            &Record {
                format: files::FORMAT,
                state: if id.is_some() {
                    RecordState::Submitted
                } else {
                    RecordState::Submitting
                },
                job_id: id,
                name: name.into(),
                hash: hash.into(),
                level: spec.level.clone(),
                evaluations: spec.jobs.len(),
                time: files::now_utc(),
            },
        )
    }

    async fn submit(
        &self,
        dir: &Path,
        spec: &Spec,
        text: &str,
        hash: &str,
        name: &str,
        opts: &SlurmOptions,
    ) -> Result<u64> {
        let spec_path = dir.join("spec.json");
        crate::xyz::write_atomic(&spec_path, &(text.to_string() + "\n"))?;
        let script = dir.join("job.sh");
        crate::xyz::write_atomic(&script, &self.script(&spec_path, hash, opts))?;
        self.write_record(dir, spec, hash, name, None)?;
        let mut args: Vec<String> = vec![
            "--parsable".into(),
            format!("--job-name={name}"),
            format!("--output={}", dir.join("slurm-%j.out").display()),
            format!("--chdir={}", dir.display()),
            "--export=ALL".into(),
            "--nodes=1".into(),
            "--ntasks=1".into(),
        ];
        if let Some(p) = &opts.partition {
            args.push(format!("--partition={p}"));
        }
        if let Some(a) = &opts.account {
            args.push(format!("--account={a}"));
        }
        if let Some(t) = opts.time_limit_minutes {
            args.push(format!("--time={t}"));
        }
        if let Some(m) = &opts.memory {
            args.push(format!("--mem={m}"));
        }
        if let Some(c) = opts.cpus_per_task {
            args.push(format!("--cpus-per-task={c}"));
        }
        args.push(script.display().to_string());
        let t0 = Instant::now();
        let out = client::run("sbatch", &args)
            .await
            .map_err(|e| Error::io("cannot run sbatch", e))?;
        let t1 = Instant::now();
        self.sbatch_nanos
            .fetch_add((t1 - t0).as_nanos() as u64, Ordering::SeqCst);
        {
            let mut w = self.submit_window.lock().unwrap_or_else(|e| e.into_inner());
            *w = Some(match *w {
                Some((a, b)) => (a.min(t0), b.max(t1)),
                None => (t0, t1),
            });
        }
        let id = match client::parse_sbatch(&out.stdout) {
            Some(id) if out.ok => id,
            _ => {
                let _ = std::fs::remove_file(files::record_path(dir));
                return Err(Error::invalid(format!(
                    "sbatch refused the job for level \"{}\" ({} evaluation{}): {}; check the level's `slurm:` block (partition, account, time-limit, memory, cpus-per-task, directives)",
                    spec.level,
                    spec.jobs.len(),
                    if spec.jobs.len() == 1 { "" } else { "s" },
                    out.stderr.trim()
                )));
            }
        };
        self.write_record(dir, spec, hash, name, Some(id))?;
        append_line(
            &self.root.join("submissions.log"),
            &format!("{id} {hash}\n"),
        )?;
        self.submitted.fetch_add(1, Ordering::SeqCst);
        self.invalidate().await;
        Ok(id)
    }

    /// The batch script: directives, `set -e`, setup lines, then the worker.
    fn script(&self, spec_path: &Path, hash: &str, opts: &SlurmOptions) -> String {
        let mut s = String::from("#!/bin/bash\n");
        for d in &opts.directives {
            s.push_str(&format!("#SBATCH {d}\n"));
        }
        s.push_str(&format!(
            "# Generated by Cairn for spec {hash}; the worker writes result-<k>.json and end.json here.\nset -e\n"
        ));
        for l in &opts.setup {
            s.push_str(l);
            s.push('\n');
        }
        s.push_str(&format!(
            "exec {} slurm-worker {}\n",
            client::shell_quote(&self.worker.display().to_string()),
            client::shell_quote(&spec_path.display().to_string())
        ));
        s
    }

    /// Wait until the job's end marker appears or Slurm says it ended without one.
    async fn wait(&self, id: u64, dir: &Path) -> JobEnd {
        let end = |marker, state| JobEnd {
            job_id: Some(id),
            marker,
            state,
            log: log_path(dir, Some(id)),
        };
        let mut missing = 0;
        let mut warned = false;
        let result = loop {
            if let Ok(Some(m)) = files::read_json::<EndMarker>(&files::end_path(dir)) {
                break end(Some(m), None);
            }
            match self.status(id).await {
                Ok(Some(s)) if s.is_live() => {}
                Ok(Some(s)) => {
                    // Ended: give a shared filesystem a moment to show the marker.
                    let mut m = None;
                    for _ in 0..6 {
                        if let Ok(Some(x)) = files::read_json::<EndMarker>(&files::end_path(dir)) {
                            m = Some(x);
                            break;
                        }
                        tokio::time::sleep(Duration::from_millis(500)).await;
                    }
                    break end(m, Some(s));
                }
                Ok(None) => {
                    missing += 1;
                    if missing >= 3 {
                        let s = client::sacct(id).await;
                        let m = files::read_json::<EndMarker>(&files::end_path(dir))
                            .ok()
                            .flatten();
                        break end(m, s);
                    }
                }
                Err(e) => {
                    if !warned {
                        tracing::warn!(
                            "cannot read the state of Slurm job {id}: {e}; still waiting"
                        );
                        warned = true;
                    }
                    tokio::time::sleep(self.poll * 4).await;
                }
            }
            tokio::time::sleep(self.poll).await;
        };
        self.watched
            .lock()
            .unwrap_or_else(|e| e.into_inner())
            .remove(&id);
        result
    }
}

fn log_path(dir: &Path, id: Option<u64>) -> PathBuf {
    match id {
        Some(id) => dir.join(format!("slurm-{id}.out")),
        None => dir.to_path_buf(),
    }
}

fn append_line(path: &Path, line: &str) -> Result<()> {
    use std::io::Write;
    let mut f = std::fs::OpenOptions::new()
        .create(true)
        .append(true)
        .open(path)
        .map_err(|e| Error::io(format!("cannot open {}", path.display()), e))?;
    f.write_all(line.as_bytes())
        .and_then(|_| f.sync_all())
        .map_err(|e| Error::io(format!("cannot write {}", path.display()), e))
}

/// `program` on PATH, if there.
pub fn which(program: &str) -> Option<PathBuf> {
    let path = std::env::var_os("PATH")?;
    std::env::split_paths(&path)
        .map(|d| d.join(program))
        .find(|p| p.is_file())
}

/// The program jobs run: `$CAIRN_WORKER` if set, else this executable when it is `cairn`.
fn default_worker() -> Result<PathBuf> {
    if let Some(w) = std::env::var_os("CAIRN_WORKER") {
        return Ok(PathBuf::from(w));
    }
    let exe = std::env::current_exe()
        .map_err(|e| Error::io("cannot find the running cairn executable", e))?;
    if exe
        .file_name()
        .map(|n| n.to_string_lossy().starts_with("cairn"))
        .unwrap_or(false)
    {
        Ok(exe)
    } else {
        Err(Error::invalid(format!(
            "the Slurm executor runs `cairn slurm-worker` in each job, but this program is {}; set CAIRN_WORKER to the cairn executable",
            exe.display()
        )))
    }
}

/// What an executor of one level needs to write specs.
#[derive(Clone)]
struct LevelJob {
    level: String,
    engine: String,
    settings: Settings,
    options: SlurmOptions,
    /// Attempts after the first, counted across jobs.
    retries: usize,
    /// The engine's own time limit per run (`timeout` in the study), passed to the worker.
    timeout_seconds: Option<f64>,
}

/// Runs a level's evaluations as Slurm jobs. Made by [`Cluster::executor`].
pub struct SlurmExecutor {
    cluster: Arc<Cluster>,
    level: Arc<LevelJob>,
}

impl SlurmExecutor {
    pub fn cluster(&self) -> &Arc<Cluster> {
        &self.cluster
    }
    /// Retry budget: attempts after a failed one (0 = none), counted across jobs.
    pub fn with_retries(mut self, retries: usize) -> Self {
        Arc::make_mut(&mut self.level).retries = retries;
        self
    }
    /// The engine's time limit per run inside the job (the job's own limit is `time-limit`).
    pub fn with_timeout(mut self, seconds: Option<f64>) -> Self {
        Arc::make_mut(&mut self.level).timeout_seconds = seconds;
        self
    }
}

impl Executor for SlurmExecutor {
    fn describe(&self) -> String {
        let o = &self.level.options;
        format!(
            "slurm, level {}: partition {}, {} evaluation{} per job, {} retr{}",
            self.level.level,
            o.partition.as_deref().unwrap_or("(default)"),
            o.group(),
            if o.group() == 1 { "" } else { "s" },
            self.level.retries,
            if self.level.retries == 1 { "y" } else { "ies" }
        )
    }

    fn run(&self, engine: Arc<dyn Engine>, jobs: Vec<Job>) -> BoxFuture<'_, Vec<RunReport>> {
        Box::pin(async move {
            let identity = engine.identity();
            let n = jobs.len();
            let g = self.level.options.group();
            let mut set = tokio::task::JoinSet::new();
            let mut start = 0;
            for chunk in jobs.chunks(g) {
                let cluster = self.cluster.clone();
                let level = self.level.clone();
                let identity = identity.clone();
                let chunk = chunk.to_vec();
                let first = start;
                start += chunk.len();
                set.spawn(
                    async move { (first, run_group(&cluster, &level, &identity, chunk).await) },
                );
            }
            let mut out: Vec<Option<RunReport>> = vec![None; n];
            while let Some(joined) = set.join_next().await {
                if let Ok((first, reports)) = joined {
                    for (k, r) in reports.into_iter().enumerate() {
                        if let Some(slot) = out.get_mut(first + k) {
                            *slot = Some(r);
                        }
                    }
                }
            }
            out.into_iter()
                .map(|r| {
                    r.unwrap_or_else(|| {
                        failed(
                            FailureKind::Crash,
                            "the Slurm group was lost (a bug in Cairn, please report it)".into(),
                            vec![],
                            0,
                        )
                    })
                })
                .collect()
        })
    }
}

fn failed(
    kind: FailureKind,
    message: String,
    mut failures: Vec<EngineFailure>,
    attempts: usize,
) -> RunReport {
    let f = EngineFailure {
        kind,
        message,
        output: None,
    };
    failures.push(f.clone());
    RunReport {
        result: Err(f),
        attempts: attempts.max(1),
        failures,
        unusable_output: String::new(),
    }
}

/// One evaluation of a group, across the Slurm jobs it takes.
struct Slot {
    job: Job,
    next_attempt: usize,
    attempts: usize,
    failures: Vec<EngineFailure>,
    done: Option<RunReport>,
}

/// Run a group of evaluations as one Slurm job (again, for what a killed job left undone).
async fn run_group(
    cluster: &Cluster,
    level: &LevelJob,
    identity: &str,
    jobs: Vec<Job>,
) -> Vec<RunReport> {
    let mut slots: Vec<Slot> = jobs
        .into_iter()
        .map(|job| Slot {
            job,
            next_attempt: 0,
            attempts: 0,
            failures: vec![],
            done: None,
        })
        .collect();
    let mut requeues = 0;
    let mut resubmit = false;
    loop {
        let todo: Vec<usize> = (0..slots.len())
            .filter(|&i| slots[i].done.is_none())
            .collect();
        if todo.is_empty() {
            break;
        }
        let spec = Spec {
            format: files::FORMAT,
            level: level.level.clone(),
            engine: level.engine.clone(),
            settings: level.settings.clone(),
            identity: identity.to_string(),
            last_attempt: level.retries,
            timeout_seconds: level.timeout_seconds,
            // Each evaluation may use its job's `threads`: run as many side by side as the
            // job's CPUs hold.
            parallel: (level.options.parallel()
                / todo
                    .iter()
                    .map(|&i| slots[i].job.threads.max(1))
                    .max()
                    .unwrap_or(1))
            .max(1),
            jobs: todo
                .iter()
                .map(|&i| SpecJob::of(&slots[i].job, slots[i].next_attempt))
                .collect(),
        };
        let (hash, end) = match cluster.run_spec(&spec, &level.options, resubmit).await {
            Ok(x) => x,
            Err(e) => {
                for &i in &todo {
                    let s = &mut slots[i];
                    s.done = Some(failed(
                        FailureKind::Crash,
                        e.to_string(),
                        std::mem::take(&mut s.failures),
                        s.attempts,
                    ));
                }
                break;
            }
        };
        resubmit = false;
        let dir = files::spec_dir(&cluster.root, &hash);
        if let Some(m) = &end.marker {
            if !m.ok {
                let why = m.error.clone().unwrap_or_default();
                for &i in &todo {
                    let s = &mut slots[i];
                    s.done = Some(failed(
                        FailureKind::Crash,
                        format!(
                            "the Slurm worker (job {}) could not run level \"{}\": {why} (log: {})",
                            end.job_id.map(|i| i.to_string()).unwrap_or_default(),
                            level.level,
                            end.log.display()
                        ),
                        std::mem::take(&mut s.failures),
                        s.attempts,
                    ));
                }
                break;
            }
        }
        // Collect what the job finished; count which evaluations it started.
        let mut unfinished = Vec::new();
        let mut any_started = false;
        for (k, &i) in todo.iter().enumerate() {
            match files::read_json::<ResultFile>(&files::result_path(&dir, k)) {
                Ok(Some(r)) => {
                    let s = &mut slots[i];
                    s.done = Some(r.into_report(std::mem::take(&mut s.failures), s.attempts));
                }
                other => {
                    let started = files::started_path(&dir, k).exists();
                    any_started |= started;
                    unfinished.push((i, started, other.err()));
                }
            }
        }
        if unfinished.is_empty() {
            continue;
        }
        let id_text = end
            .job_id
            .map(|i| format!("Slurm job {i}"))
            .unwrap_or_else(|| "the Slurm job".into());
        let (class, what) = match &end.state {
            Some(st) => (
                if end.marker.is_some() {
                    EndClass::Failed
                } else {
                    st.class()
                },
                format!("{id_text} ended: {}", st.describe()),
            ),
            None => (
                EndClass::Failed,
                format!(
                    "{id_text} {} and Slurm no longer knows its state (no accounting)",
                    if end.marker.is_some() {
                        "wrote its end marker but not every result"
                    } else {
                        "left the queue without writing its end marker"
                    }
                ),
            ),
        };
        let what = format!(
            "{what}; level \"{}\"; job log {}",
            level.level,
            end.log.display()
        );
        match class {
            EndClass::Requeue => {
                requeues += 1;
                if requeues > MAX_REQUEUES {
                    for (i, _, _) in unfinished {
                        let s = &mut slots[i];
                        s.done = Some(failed(
                            FailureKind::Crash,
                            format!("{what}; given up after {MAX_REQUEUES} resubmissions"),
                            std::mem::take(&mut s.failures),
                            s.attempts,
                        ));
                    }
                } else {
                    tracing::warn!("{what}; submitting it again");
                    resubmit = true;
                }
            }
            EndClass::Cancelled => {
                for (i, _, _) in unfinished {
                    let s = &mut slots[i];
                    s.done = Some(failed(
                        FailureKind::Crash,
                        format!("{what}: cancelled outside Cairn; run again to resubmit it"),
                        std::mem::take(&mut s.failures),
                        s.attempts + 1,
                    ));
                }
            }
            EndClass::Completed | EndClass::Timeout | EndClass::Failed => {
                let kind = if class == EndClass::Timeout {
                    FailureKind::Timeout
                } else {
                    FailureKind::Crash
                };
                for (i, started, read_err) in unfinished {
                    let s = &mut slots[i];
                    // An evaluation the job never reached is not to blame, unless none was
                    // reached at all (then the job itself fails, e.g. a setup line).
                    if !started && any_started {
                        continue;
                    }
                    let mut msg = what.clone();
                    if let Some(e) = read_err {
                        msg.push_str(&format!("; {e}"));
                    }
                    let f = EngineFailure {
                        kind: kind.clone(),
                        message: msg,
                        output: Some(end.log.clone()),
                    };
                    s.failures.push(f.clone());
                    s.attempts += 1;
                    s.next_attempt += 1;
                    if s.next_attempt > level.retries {
                        s.done = Some(RunReport {
                            result: Err(f),
                            attempts: s.attempts,
                            failures: std::mem::take(&mut s.failures),
                            unusable_output: String::new(),
                        });
                    }
                }
            }
        }
    }
    slots
        .into_iter()
        .map(|s| {
            s.done.unwrap_or_else(|| {
                failed(
                    FailureKind::Crash,
                    "not run (a bug in Cairn)".into(),
                    vec![],
                    0,
                )
            })
        })
        .collect()
}

/// Cancel the jobs recorded under `root` (normally `DIR/cluster`) that have no end marker:
/// each record is marked `cancelled_by_cairn` first (so a later run submits it again), then
/// all are cancelled with one `scancel` call. Returns the ids. Blocking; for Ctrl-C.
pub fn cancel_recorded(root: &Path) -> Result<Vec<u64>> {
    let jobs = root.join("jobs");
    let mut ids = Vec::new();
    let rd = match std::fs::read_dir(&jobs) {
        Ok(r) => r,
        Err(e) if e.kind() == std::io::ErrorKind::NotFound => return Ok(ids),
        Err(e) => return Err(Error::io(format!("cannot list {}", jobs.display()), e)),
    };
    for ent in rd.flatten() {
        let dir = ent.path();
        if files::end_path(&dir).exists() {
            continue;
        }
        let Ok(Some(mut r)) = files::read_json::<Record>(&files::record_path(&dir)) else {
            continue;
        };
        if r.state == RecordState::Submitting {
            // sbatch may have been accepted just before the interruption: find it by name.
            r.job_id = find_by_name_blocking(&r.name);
        } else if r.state != RecordState::Submitted {
            continue;
        }
        if let Some(id) = r.job_id {
            r.state = RecordState::CancelledByCairn;
            r.time = files::now_utc();
            files::write_json(&files::record_path(&dir), &r)?;
            ids.push(id);
        }
    }
    ids.sort_unstable();
    if !ids.is_empty() {
        let args: Vec<String> = ids.iter().map(u64::to_string).collect();
        let out = client::run_blocking("scancel", &args)
            .map_err(|e| Error::io("cannot run scancel", e))?;
        if !out.ok {
            // Jobs that already ended make scancel complain; the others are cancelled.
            tracing::warn!("scancel: {}", out.stderr.trim());
        }
    }
    Ok(ids)
}

fn find_by_name_blocking(name: &str) -> Option<u64> {
    let args: Vec<String> = [
        "-h",
        "-t",
        "all",
        "--me",
        "-n",
        name,
        "-O",
        "JobID:|,State:|,Reason:|",
    ]
    .iter()
    .map(|s| s.to_string())
    .collect();
    let o = client::run_blocking("squeue", &args).ok()?;
    client::parse_squeue(&o.stdout)
        .into_iter()
        .filter(|(_, s)| s.is_live())
        .map(|(id, _)| id)
        .max()
}
