//! The study runner: drains the plan's ready-queue, running each task's algorithm through the
//! driver (store + local executor), several tasks at once on tokio.
//!
//! Lifecycle: lock DIR → open the store (DIR/store) → one evaluator per level, all sharing the
//! store and one bounded pool → run tasks as they become ready → after each task, write its
//! files and the state record atomically → per reaction, `summary.json`. Running again with the
//! same DIR replays every algorithm from the store: only new evaluations reach an engine.
//!
//! Pitfalls: the drain loop never leaves early on a task failure (a failed task blocks only what
//! depends on it; other reactions go on); the lock is held until the end; every path goes
//! through [`OutputDir`].

use super::layout::OutputDir;
use super::lock::DirLock;
use super::model::*;
use super::plan::{Plan, Task};
use super::progress::{Progress, ProgressMode};
use super::record::{RunState, StateRecord, Summary, TaskRecord, Verdict, FORMAT};
use super::resume;
use super::stages;
use crate::driver::{Evaluator, Stats};
use crate::error::{Error, Result};
use crate::store::Store;
use nalgebra::DVector;
use petgraph::graph::NodeIndex;
use std::collections::{HashMap, HashSet};
use std::path::PathBuf;
use std::sync::Arc;

/// How to run.
#[derive(Debug, Clone)]
pub struct RunOptions {
    /// The output directory (created if missing).
    pub dir: PathBuf,
    /// Engine jobs at once.
    pub jobs: usize,
    /// How progress is shown.
    pub progress: ProgressMode,
}

impl RunOptions {
    /// Run into `dir` with `jobs` engine jobs at once, progress bars on a terminal.
    pub fn new(dir: impl Into<PathBuf>, jobs: usize) -> RunOptions {
        RunOptions {
            dir: dir.into(),
            jobs,
            progress: ProgressMode::Auto,
        }
    }
}

/// What a finished task hands to the tasks after it.
#[derive(Debug, Clone, serde::Serialize, serde::Deserialize)]
pub(super) enum Out {
    Relaxed {
        x: DVector<f64>,
        energy: f64,
    },
    Guess {
        x: DVector<f64>,
        mode: Option<DVector<f64>>,
    },
    Saddle {
        x: DVector<f64>,
        energy: f64,
    },
    Modes {
        n_imaginary: usize,
        /// The largest imaginary frequency, cm⁻¹ (positive number), if any.
        imaginary_cm1: Option<f64>,
    },
    Irc {
        forward: DVector<f64>,
        reverse: DVector<f64>,
    },
    Verified {
        status: Verdict,
        reason: String,
        connects: bool,
        forward_kcal: Option<f64>,
        reverse_kcal: Option<f64>,
        reaction_kcal: Option<f64>,
        /// The step's ends as the barriers use them (geometry, energy): reactant side, product
        /// side.
        ends: Box<[(DVector<f64>, f64); 2]>,
    },
    Kinetics(super::kinetics::KineticsOut),
}

pub(super) struct Ctx {
    pub(super) study: Study,
    pub(super) plan: Plan,
    pub(super) out: OutputDir,
    pub(super) evaluators: HashMap<String, Evaluator>,
}

/// The result of a run: the state record and one summary per reaction.
#[derive(Debug, Clone)]
pub struct RunReport {
    pub state: StateRecord,
    pub summaries: Vec<Summary>,
    /// Tasks run in this invocation (the rest were finished by an earlier one).
    pub tasks_run: usize,
    /// Tasks taken as finished from their markers.
    pub tasks_finished_earlier: usize,
    /// Engine wall seconds of the runs made in this invocation (summed over jobs; with N
    /// slots the ideal wall time is this ÷ N).
    pub engine_seconds: f64,
}

impl RunReport {
    /// True when this invocation had nothing left to do.
    pub fn nothing_to_do(&self) -> bool {
        self.tasks_run == 0
    }
}

/// Run a study into `opts.dir`.
pub async fn run(study: &Study, opts: &RunOptions) -> Result<RunReport> {
    std::fs::create_dir_all(&opts.dir)
        .map_err(|e| Error::io(format!("cannot create {}", opts.dir.display()), e))?;
    let _lock = DirLock::acquire(&opts.dir)?;
    let out = OutputDir::new(&opts.dir);
    let store = Arc::new(Store::open(opts.dir.join("store"))?);
    let executors = super::executors::Executors::new(study, &opts.dir, opts.jobs)?;
    // One evaluator per (level, retry budget, time limit) that some task uses; all share the
    // store and one executor set (the bounded local pool, or the Slurm cluster).
    let plan = Plan::new(study);
    let mut wanted: Vec<&Stage> = plan.species.iter().map(|sp| &sp.stage).collect();
    for r in &study.reactions {
        wanted.extend(r.stages.iter());
    }
    let mut evaluators = HashMap::new();
    let mut identities: HashMap<String, String> = HashMap::new();
    for st in wanted {
        let key = stages::evaluator_key(st);
        if evaluators.contains_key(&key) {
            continue;
        }
        let l = study
            .level(&st.level)
            .ok_or_else(|| Error::invalid(format!("no level '{}' in the study", st.level)))?;
        let limit = st.timeout_seconds.map(std::time::Duration::from_secs_f64);
        let engine = crate::engine::find_engine_limited(&l.engine, &l.settings, limit)?;
        identities.insert(l.name.clone(), engine.identity());
        let executor = executors.for_stage(l, st.retries as usize, st.timeout_seconds);
        evaluators.insert(
            key,
            Evaluator::new(engine, store.clone(), executor).with_threads(l.threads as usize),
        );
    }
    let ctx = Arc::new(Ctx {
        study: study.clone(),
        plan,
        out,
        evaluators,
    });
    let fingerprints = Arc::new(resume::fingerprints(&ctx, &|level| {
        identities.get(level).cloned().unwrap_or_default()
    }));
    let study_sha = {
        use sha2::{Digest, Sha256};
        hex::encode(Sha256::digest(study.source.as_bytes()))
    };
    let mut state = StateRecord {
        format: FORMAT,
        study: study.file.display().to_string(),
        study_sha256: study_sha,
        tasks: ctx
            .plan
            .tasks
            .iter()
            .map(|(t, _)| task_record(&ctx, t))
            .collect(),
    };
    write_state(&ctx, &state)?;

    let mut per_reaction: HashMap<String, u64> = HashMap::new();
    for (t, _) in &ctx.plan.tasks {
        match *t {
            // A shared species shows under the first reaction that uses it (as in state.json).
            Task::Relax { species } => {
                if let Some((ri, _)) = ctx.plan.species[species].used_by.first() {
                    *per_reaction
                        .entry(study.reactions[*ri].name.clone())
                        .or_default() += 1;
                }
            }
            Task::Stage { reaction, .. } => {
                *per_reaction
                    .entry(study.reactions[reaction].name.clone())
                    .or_default() += 1
            }
        }
    }
    let mut progress = Progress::new(opts.progress, ctx.plan.tasks.len() as u64, per_reaction);

    let mut queue = ctx.plan.queue(study);
    let mut outputs: HashMap<usize, Out> = HashMap::new();
    let mut stats: HashMap<usize, Stats> = HashMap::new();
    let mut errors: HashMap<usize, String> = HashMap::new();
    let mut ran: HashSet<usize> = HashSet::new();
    let mut finished_earlier = 0usize;
    let mut running = tokio::task::JoinSet::new();
    loop {
        let mut skipped_now = 0u64;
        while let Some(n) = queue.next_ready() {
            let i = n.index();
            if let Some(m) = resume::load_marker(&ctx, i, &fingerprints[i]) {
                // Finished by an earlier run with the same inputs: take its output as it is.
                if let Some(r) = state.tasks.get_mut(i) {
                    r.state = RunState::Done;
                    r.evaluations = m.evaluations;
                    r.wall_seconds = m.wall_seconds;
                    r.message = Some("finished in an earlier run".into());
                }
                stats.insert(i, m.replayed_stats());
                outputs.insert(i, m.out);
                finished_earlier += 1;
                skipped_now += 1;
                let _ = queue.complete(n);
                continue;
            }
            let inputs: Vec<(usize, Out)> = ctx.plan.tasks[i]
                .1
                .iter()
                .filter_map(|d| outputs.get(&d.index()).map(|o| (d.index(), o.clone())))
                .collect();
            if let Some(r) = state.tasks.get_mut(i) {
                r.state = RunState::Running;
                progress.started(&r.reaction, &task_label(r));
            }
            ran.insert(i);
            let c = ctx.clone();
            let fp = fingerprints.clone();
            let weight = queue.priority(n).unwrap_or(0);
            running.spawn(async move {
                let t0 = std::time::Instant::now();
                let res = crate::executor::with_weight(weight, run_task(&c, n, &inputs)).await;
                let secs = t0.elapsed().as_secs_f64();
                // File the marker once the task's own files are written.
                let res = match res {
                    Ok((o, st)) => {
                        let m = resume::Marker::new(
                            &fp[n.index()],
                            describe_task(&c, &c.plan.tasks[n.index()].0),
                            &o,
                            &st,
                            secs,
                        );
                        match resume::save_marker(&c, n.index(), &m) {
                            Ok(()) => Ok((o, st)),
                            Err(e) => Err((e.to_string(), st)),
                        }
                    }
                    Err(x) => Err(x),
                };
                (n, res, secs)
            });
        }
        progress.skipped(skipped_now);
        let Some(joined) = running.join_next().await else {
            break;
        };
        let (n, res, secs) = match joined {
            Ok(x) => x,
            Err(e) => {
                return Err(Error::Algorithm(format!(
                    "a study task stopped unexpectedly: {e}"
                )))
            }
        };
        let i = n.index();
        match res {
            Ok((o, st)) => {
                if let Some(r) = state.tasks.get_mut(i) {
                    r.state = RunState::Done;
                    fill_counts(r, &st, secs);
                    progress.ended(
                        &r.reaction,
                        &task_label(r),
                        &format!(
                            "done: {} evaluations ({} by the engine), {:.1} s",
                            st.points, st.engine_runs, secs
                        ),
                    );
                }
                outputs.insert(i, o);
                stats.insert(i, st);
                let _ = queue.complete(n);
            }
            Err((e, st)) => {
                if let Some(r) = state.tasks.get_mut(i) {
                    r.state = RunState::Failed;
                    r.message = Some(e.clone());
                    fill_counts(r, &st, secs);
                    progress.ended(&r.reaction, &task_label(r), &format!("failed: {e}"));
                }
                stats.insert(i, st);
                errors.insert(i, e.clone());
                if let Ok(blocked) = queue.fail(n) {
                    for b in blocked {
                        if let Some(r) = state.tasks.get_mut(b.index()) {
                            r.state = RunState::Blocked;
                            r.message = Some(format!(
                                "not run: {} failed",
                                describe_task(&ctx, &ctx.plan.tasks[i].0)
                            ));
                        }
                    }
                }
            }
        }
        write_state(&ctx, &state)?;
    }
    progress.finish();
    write_state(&ctx, &state)?;

    let mut summaries = Vec::new();
    for (ri, r) in study.reactions.iter().enumerate() {
        let mine = reaction_tasks(&ctx, ri);
        let s = summarize(&ctx, ri, r, &mine, &outputs, &stats, &errors, &state);
        // A reaction none of whose tasks ran keeps the summary of the run that finished it
        // (rewriting thousands of unchanged files would make a no-op resume slow).
        let rel = format!("{}/summary.json", r.name);
        let on_disk = ctx.out.join(&rel).ok().filter(|p| p.exists());
        if mine.iter().any(|i| ran.contains(i)) || on_disk.is_none() {
            let text = serde_json::to_string_pretty(&s).unwrap_or_default();
            ctx.out.write(&rel, &(text + "\n"))?;
        }
        summaries.push(s);
    }
    // DIR/summary.json: every reaction's summary in one file (the study's order).
    let all = serde_json::json!({
        "format": FORMAT,
        "study": study.name,
        "reactions": summaries,
    });
    ctx.out.write(
        "summary.json",
        &(serde_json::to_string_pretty(&all).unwrap_or_default() + "\n"),
    )?;
    crate::engine::process::finish_scratch_removal();
    Ok(RunReport {
        state,
        summaries,
        tasks_run: ran.len(),
        tasks_finished_earlier: finished_earlier,
        engine_seconds: ran
            .iter()
            .filter_map(|i| stats.get(i))
            .map(|s| s.engine_seconds)
            .sum(),
    })
}

/// "relax-ends CHN (hcn.xyz)" or "band".
fn task_label(r: &TaskRecord) -> String {
    match &r.species {
        Some(s) => format!("{} {s}", r.stage),
        None => r.stage.clone(),
    }
}

/// The tasks of reaction `ri`: its species relaxations and its stages.
fn reaction_tasks(ctx: &Ctx, ri: usize) -> Vec<usize> {
    let mut mine: Vec<usize> = Vec::new();
    for (_, k) in ctx.plan.reaction_species.get(ri).into_iter().flatten() {
        if let Some(i) = ctx
            .plan
            .tasks
            .iter()
            .position(|(t, _)| *t == Task::Relax { species: *k })
        {
            mine.push(i);
        }
    }
    mine.extend(
        ctx.plan
            .stage_task
            .get(ri)
            .into_iter()
            .flatten()
            .flatten()
            .map(|n| n.index()),
    );
    mine
}

fn fill_counts(r: &mut TaskRecord, st: &Stats, secs: f64) {
    r.evaluations = st.points;
    r.engine_runs = st.engine_runs;
    r.store_hits = st.store_hits;
    r.engine_retries = st.retries;
    r.wall_seconds = secs;
}

fn write_state(ctx: &Ctx, state: &StateRecord) -> Result<()> {
    let text = serde_json::to_string_pretty(state).unwrap_or_default();
    ctx.out.write("state.json", &(text + "\n"))?;
    Ok(())
}

fn describe_task(ctx: &Ctx, t: &Task) -> String {
    match *t {
        Task::Relax { species } => ctx
            .plan
            .species
            .get(species)
            .map(|s| format!("relax-ends {} ({})", s.formula, s.file))
            .unwrap_or_default(),
        Task::Stage { reaction, stage } => ctx
            .study
            .reactions
            .get(reaction)
            .and_then(|r| {
                r.stages
                    .get(stage)
                    .map(|s| format!("{} {}", r.name, s.kind()))
            })
            .unwrap_or_default(),
    }
}

fn task_record(ctx: &Ctx, t: &Task) -> TaskRecord {
    let (reaction, stage, species) = match *t {
        Task::Relax { species } => {
            let sp = &ctx.plan.species[species];
            let r = sp
                .used_by
                .first()
                .and_then(|(ri, _)| ctx.study.reactions.get(*ri))
                .map(|r| r.name.clone())
                .unwrap_or_default();
            (
                r,
                "relax-ends".to_string(),
                Some(format!("{} ({})", sp.formula, sp.file)),
            )
        }
        Task::Stage { reaction, stage } => {
            let r = &ctx.study.reactions[reaction];
            (
                r.name.clone(),
                r.stages[stage].kind().name().to_string(),
                None,
            )
        }
    };
    TaskRecord {
        reaction,
        stage,
        species,
        state: RunState::Pending,
        evaluations: 0,
        engine_runs: 0,
        store_hits: 0,
        engine_retries: 0,
        wall_seconds: 0.0,
        message: None,
    }
}

type TaskResult = std::result::Result<(Out, Stats), (String, Stats)>;

async fn run_task(ctx: &Ctx, n: NodeIndex, inputs: &[(usize, Out)]) -> TaskResult {
    let mut acc = Stats::default();
    let r = match ctx.plan.tasks[n.index()].0 {
        Task::Relax { species } => stages::relax_species(ctx, species, &mut acc).await,
        Task::Stage { reaction, stage } => {
            stages::run_stage(ctx, reaction, stage, inputs, &mut acc).await
        }
    };
    match r {
        Ok(o) => Ok((o, acc)),
        Err(e) => Err((e.to_string(), acc)),
    }
}

#[allow(clippy::too_many_arguments)]
fn summarize(
    ctx: &Ctx,
    _ri: usize,
    r: &Reaction,
    mine: &[usize],
    outputs: &HashMap<usize, Out>,
    stats: &HashMap<usize, Stats>,
    errors: &HashMap<usize, String>,
    state: &StateRecord,
) -> Summary {
    let mut s = Summary::empty(&r.name);
    for i in mine {
        if let Some(st) = stats.get(i) {
            s.gradient_evaluations += st.gradient_evaluations;
            s.hessian_evaluations += st.hessian_evaluations;
            s.engine_runs += st.engine_runs;
            s.store_hits += st.store_hits;
            s.engine_retries += st.retries;
        }
        if let Some(t) = state.tasks.get(*i) {
            s.wall_seconds += t.wall_seconds;
        }
        match outputs.get(i) {
            Some(Out::Modes {
                n_imaginary,
                imaginary_cm1,
            }) => {
                s.n_imaginary = Some(*n_imaginary as u32);
                s.imaginary_frequency_cm1 = *imaginary_cm1;
            }
            Some(Out::Saddle { .. }) => s.saddle_xyz = Some(format!("{}/saddle.xyz", r.name)),
            Some(Out::Kinetics(k)) => {
                s.kinetics_json = Some(format!("{}/kinetics.json", r.name));
                s.gibbs_temperature_k = Some(k.gibbs_temperature_k);
                s.barrier_forward_gibbs_kcal_mol = Some(k.forward_gibbs_kcal);
                s.barrier_reverse_gibbs_kcal_mol = Some(k.reverse_gibbs_kcal);
                s.reaction_gibbs_kcal_mol = Some(k.reaction_gibbs_kcal);
                s.rate_constants = Some(k.rates.clone());
            }
            Some(Out::Irc { .. }) => s.irc_xyz = Some(format!("{}/irc.xyz", r.name)),
            Some(Out::Guess { .. }) => {
                if let Some(Task::Stage { stage, .. }) = ctx.plan.tasks.get(*i).map(|t| &t.0) {
                    match r.stages.get(*stage).map(Stage::kind) {
                        Some(StageKind::Band) => {
                            s.band_xyz = Some(format!("{}/band.xyz", r.name));
                            s.band_history_json = Some(format!("{}/band-history.json", r.name));
                        }
                        Some(StageKind::Scan) => s.band_xyz = Some(format!("{}/scan.xyz", r.name)),
                        _ => {}
                    }
                }
            }
            Some(Out::Verified {
                status,
                reason,
                connects,
                forward_kcal,
                reverse_kcal,
                reaction_kcal,
                ..
            }) => {
                s.status = *status;
                s.reason = reason.clone();
                s.irc_connects = Some(*connects);
                s.barrier_forward_kcal_mol = *forward_kcal;
                s.barrier_reverse_kcal_mol = *reverse_kcal;
                s.reaction_energy_kcal_mol = *reaction_kcal;
            }
            _ => {}
        }
    }
    // A failed `rates` stage leaves the verdict alone: it is reported on its own.
    let is_rates = |i: &usize| {
        matches!(ctx.plan.tasks.get(*i).map(|t| &t.0), Some(Task::Stage { stage, .. })
            if r.stages.get(*stage).map(Stage::kind) == Some(StageKind::Rates))
    };
    if let Some(e) = mine
        .iter()
        .filter(|i| is_rates(i))
        .find_map(|i| errors.get(i))
    {
        s.kinetics_error = Some(e.clone());
    }
    let failed: Vec<String> = mine
        .iter()
        .filter(|i| !is_rates(i))
        .filter_map(|i| {
            errors
                .get(i)
                .map(|e| format!("{} failed: {e}", describe_task(ctx, &ctx.plan.tasks[*i].0)))
        })
        .collect();
    let has_verdict = mine
        .iter()
        .any(|i| matches!(outputs.get(i), Some(Out::Verified { .. })));
    if !failed.is_empty() {
        s.status = Verdict::Failed;
        s.reason = failed.join("; ");
    } else if !has_verdict {
        let all_done = mine.iter().all(|i| outputs.contains_key(i));
        s.status = if all_done && s.saddle_xyz.is_some() {
            Verdict::Unverified
        } else {
            Verdict::Failed
        };
        s.reason = if all_done {
            "the pipeline has no verify stage".into()
        } else {
            "not all stages ran".into()
        };
    }
    s
}
