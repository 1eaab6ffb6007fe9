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
use super::record::{RunState, StateRecord, Summary, TaskRecord, Verdict, FORMAT};
use super::stages;
use crate::driver::{Evaluator, Stats};
use crate::error::{Error, Result};
use crate::executor::LocalExecutor;
use crate::store::Store;
use nalgebra::DVector;
use petgraph::graph::NodeIndex;
use std::collections::HashMap;
use std::path::PathBuf;
use std::sync::Arc;

/// How to run.
#[derive(Debug, Clone)]
pub struct RunOptions {
    /// The output directory (created if missing).
    pub dir: PathBuf,
    /// Engine jobs at once.
    pub jobs: usize,
}

/// What a finished task hands to the tasks after it.
#[derive(Debug, Clone)]
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
    },
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
}

/// Run a study into `opts.dir`.
pub async fn run(study: &Study, opts: &RunOptions) -> Result<RunReport> {
    std::fs::create_dir_all(&opts.dir)
        .map_err(|e| Error::io(format!("cannot create {}", opts.dir.display()), e))?;
    let _lock = DirLock::acquire(&opts.dir)?;
    let out = OutputDir::new(&opts.dir);
    let store = Arc::new(Store::open(opts.dir.join("store"))?);
    let executor: Arc<dyn crate::executor::Executor> = Arc::new(
        LocalExecutor::new(opts.jobs.max(1)).with_retries(study.defaults.retries as usize),
    );
    let mut evaluators = HashMap::new();
    for l in &study.levels {
        let engine = crate::engine::find_engine(&l.engine, &l.settings)?;
        evaluators.insert(
            l.name.clone(),
            Evaluator::new(engine, store.clone(), executor.clone()),
        );
    }
    let plan = Plan::new(study);
    let ctx = Arc::new(Ctx {
        study: study.clone(),
        plan,
        out,
        evaluators,
    });
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

    let mut queue = ctx.plan.queue(study);
    let mut outputs: HashMap<usize, Out> = HashMap::new();
    let mut stats: HashMap<usize, Stats> = HashMap::new();
    let mut errors: HashMap<usize, String> = HashMap::new();
    let mut running = tokio::task::JoinSet::new();
    loop {
        while let Some(n) = queue.next_ready() {
            let inputs: Vec<(usize, Out)> = ctx.plan.tasks[n.index()]
                .1
                .iter()
                .filter_map(|d| outputs.get(&d.index()).map(|o| (d.index(), o.clone())))
                .collect();
            if let Some(r) = state.tasks.get_mut(n.index()) {
                r.state = RunState::Running;
            }
            let c = ctx.clone();
            running.spawn(async move {
                let t0 = std::time::Instant::now();
                let res = run_task(&c, n, &inputs).await;
                (n, res, t0.elapsed().as_secs_f64())
            });
        }
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

    let mut summaries = Vec::new();
    for (ri, r) in study.reactions.iter().enumerate() {
        let s = summarize(&ctx, ri, r, &outputs, &stats, &errors, &state);
        let text = serde_json::to_string_pretty(&s).unwrap_or_default();
        ctx.out
            .write(&format!("{}/summary.json", r.name), &(text + "\n"))?;
        summaries.push(s);
    }
    Ok(RunReport { state, summaries })
}

fn fill_counts(r: &mut TaskRecord, st: &Stats, secs: f64) {
    r.evaluations = st.points;
    r.engine_runs = st.engine_runs;
    r.store_hits = st.store_hits;
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

fn summarize(
    ctx: &Ctx,
    ri: usize,
    r: &Reaction,
    outputs: &HashMap<usize, Out>,
    stats: &HashMap<usize, Stats>,
    errors: &HashMap<usize, String>,
    state: &StateRecord,
) -> Summary {
    let mut s = Summary::empty(&r.name);
    // This reaction's tasks: its species and its stages.
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
    for i in &mine {
        if let Some(st) = stats.get(i) {
            s.gradient_evaluations += st.gradient_evaluations;
            s.hessian_evaluations += st.hessian_evaluations;
            s.engine_runs += st.engine_runs;
            s.store_hits += st.store_hits;
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
            Some(Out::Irc { .. }) => s.irc_xyz = Some(format!("{}/irc.xyz", r.name)),
            Some(Out::Guess { .. }) => {
                if let Some(Task::Stage { stage, .. }) = ctx.plan.tasks.get(*i).map(|t| &t.0) {
                    match r.stages.get(*stage).map(Stage::kind) {
                        Some(StageKind::Band) => s.band_xyz = Some(format!("{}/band.xyz", r.name)),
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
    let failed: Vec<String> = mine
        .iter()
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
