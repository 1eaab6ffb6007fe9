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
use super::plan::{Plan, Role, Task};
use super::record::{RunState, StateRecord, Summary, TaskRecord, Verdict, FORMAT};
use crate::algo::freq;
use crate::algo::hessian::{HessianCalc, HessianSource};
use crate::algo::minimize::{MinOptions, Minimizer};
use crate::algo::saddle::{FollowMode, Method, SaddleOptions, SaddleSearch};
use crate::driver::{self, Evaluator, Stats, System};
use crate::error::{Error, Result};
use crate::executor::LocalExecutor;
use crate::geom::Frame;
use crate::molecule::Molecule;
use crate::path::{align, graph, interp, irc, neb, scan, walk};
use crate::store::Store;
use crate::units::KCALMOL_PER_HARTREE;
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
enum Out {
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

struct Ctx {
    study: Study,
    plan: Plan,
    out: OutputDir,
    evaluators: HashMap<String, Evaluator>,
}

/// The result of a run: the state record and one summary per reaction.
#[derive(Debug, Clone)]
pub struct RunReport {
    pub state: StateRecord,
    pub summaries: Vec<Summary>,
}

fn frame_of(m: &Molecule) -> Frame {
    if m.is_model_surface() {
        Frame::Surface
    } else {
        Frame::Molecule
    }
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
        Task::Relax { species } => relax_species(ctx, species, &mut acc).await,
        Task::Stage { reaction, stage } => run_stage(ctx, reaction, stage, inputs, &mut acc).await,
    };
    match r {
        Ok(o) => Ok((o, acc)),
        Err(e) => Err((e.to_string(), acc)),
    }
}

fn ev<'a>(ctx: &'a Ctx, level: &str) -> Result<&'a Evaluator> {
    ctx.evaluators
        .get(level)
        .ok_or_else(|| Error::invalid(format!("no evaluator for level '{level}'")))
}

fn add(acc: &mut Stats, s: &Stats) {
    acc.points += s.points;
    acc.batches += s.batches;
    acc.energy_evaluations += s.energy_evaluations;
    acc.gradient_evaluations += s.gradient_evaluations;
    acc.hessian_evaluations += s.hessian_evaluations;
    acc.store_hits += s.store_hits;
    acc.engine_runs += s.engine_runs;
    acc.retries += s.retries;
    acc.failed_runs += s.failed_runs;
    acc.engine_seconds += s.engine_seconds;
}

fn min_options(frame: Frame, max_steps: u32) -> MinOptions {
    let base = match frame {
        Frame::Surface => MinOptions::for_surface(),
        Frame::Molecule => MinOptions::default(),
    };
    MinOptions {
        max_iterations: max_steps as usize,
        ..base
    }
}

/// The species' molecule (from the first reaction that uses it).
fn species_molecule(ctx: &Ctx, species: usize) -> Option<Molecule> {
    let sp = ctx.plan.species.get(species)?;
    let (ri, role) = *sp.used_by.first()?;
    let r = ctx.study.reactions.get(ri)?;
    let (re, pr) = r.ends();
    match role {
        Role::Reactant => re.map(|g| g.molecule.clone()),
        Role::Product => pr.map(|g| g.molecule.clone()),
    }
}

async fn relax_species(ctx: &Ctx, species: usize, acc: &mut Stats) -> Result<Out> {
    let sp = &ctx.plan.species[species];
    let m = species_molecule(ctx, species)
        .ok_or_else(|| Error::invalid("species without a geometry"))?;
    let max_steps = match sp.stage.spec {
        StageSpec::RelaxEnds { max_steps } => max_steps,
        _ => 200,
    };
    let system = System::of(&m)?;
    let frame = frame_of(&m);
    let mut algo = Minimizer::new(m.flat(), frame, min_options(frame, max_steps));
    let (v, st) = driver::drive(&mut algo, ev(ctx, &sp.level)?, &system).await?;
    add(acc, &st);
    let mut relaxed = m.with_flat(&v.x);
    relaxed.comment = format!(
        "{} relaxed at level {}: E = {:.10} Eh; {}",
        sp.formula, sp.level, v.energy, v.reason
    );
    ctx.out
        .write(
            &format!("species/{}.xyz", sp.key),
            &crate::xyz::format_frame(&relaxed, &relaxed.comment),
        )
        .map_err(|e| Error::invalid(e.to_string()))?;
    if !v.converged {
        return Err(Error::Algorithm(format!(
            "relaxing {} ({}): {}",
            sp.formula, sp.file, v.reason
        )));
    }
    Ok(Out::Relaxed {
        x: v.x,
        energy: v.energy,
    })
}

/// Inputs of a stage task: relaxed ends by role, and outputs of earlier stages.
struct Inputs {
    reactant: Option<(DVector<f64>, Option<f64>)>,
    product: Option<(DVector<f64>, Option<f64>)>,
    guess: Option<(DVector<f64>, Option<DVector<f64>>)>,
    saddle: Option<(DVector<f64>, f64)>,
    modes: Option<(usize, Option<f64>)>,
    irc: Option<(DVector<f64>, DVector<f64>)>,
}

fn gather(ctx: &Ctx, ri: usize, inputs: &[(usize, Out)]) -> Inputs {
    let r = &ctx.study.reactions[ri];
    let (re, pr) = r.ends();
    let mut g = Inputs {
        reactant: re.map(|g| (g.molecule.flat(), None)),
        product: pr.map(|g| (g.molecule.flat(), None)),
        guess: match &r.start {
            Start::Guess { guess, .. } => Some((guess.molecule.flat(), None)),
            _ => None,
        },
        saddle: None,
        modes: None,
        irc: None,
    };
    for (idx, o) in inputs {
        match o {
            Out::Relaxed { x, energy } => {
                if let Some(Task::Relax { species }) = ctx.plan.tasks.get(*idx).map(|t| &t.0) {
                    for (role, k) in ctx.plan.reaction_species.get(ri).into_iter().flatten() {
                        if k == species {
                            match role {
                                Role::Reactant => g.reactant = Some((x.clone(), Some(*energy))),
                                Role::Product => g.product = Some((x.clone(), Some(*energy))),
                            }
                        }
                    }
                }
            }
            Out::Guess { x, mode } => g.guess = Some((x.clone(), mode.clone())),
            Out::Saddle { x, energy } => g.saddle = Some((x.clone(), *energy)),
            Out::Modes {
                n_imaginary,
                imaginary_cm1,
            } => g.modes = Some((*n_imaginary, *imaginary_cm1)),
            Out::Irc { forward, reverse } => g.irc = Some((forward.clone(), reverse.clone())),
            Out::Verified { .. } => {}
        }
    }
    g
}

fn base_molecule(r: &Reaction) -> &Molecule {
    match &r.start {
        Start::Ends { reactant, .. }
        | Start::Drive { reactant, .. }
        | Start::Alone { reactant } => &reactant.molecule,
        Start::Guess { guess, .. } => &guess.molecule,
    }
}

fn missing(what: &str) -> Error {
    Error::invalid(format!("no {what} from an earlier stage"))
}

async fn run_stage(
    ctx: &Ctx,
    ri: usize,
    si: usize,
    inputs: &[(usize, Out)],
    acc: &mut Stats,
) -> Result<Out> {
    let r = &ctx.study.reactions[ri];
    let st = &r.stages[si];
    let m = base_molecule(r);
    let frame = frame_of(m);
    let system = System::of(m)?;
    let e = ev(ctx, &st.level)?;
    let inp = gather(ctx, ri, inputs);
    let write_xyz = |file: &str, frames: &[(DVector<f64>, String)]| -> Result<()> {
        let mols: Vec<(Molecule, String)> = frames
            .iter()
            .map(|(x, c)| (m.with_flat(x), c.clone()))
            .collect();
        let text = crate::xyz::format_frames(mols.iter().map(|(mm, c)| (mm, c.clone())));
        ctx.out.write(&format!("{}/{file}", r.name), &text)?;
        Ok(())
    };
    match st.spec {
        StageSpec::RelaxEnds { .. } => Err(Error::invalid(
            "relax-ends runs as species tasks, not as a stage task",
        )),
        StageSpec::Band {
            images,
            climbing,
            max_steps,
        } => {
            let (ra, pa) = match (&inp.reactant, &inp.product) {
                (Some(a), Some(b)) => (a, b),
                _ => return Err(missing("reactant and product")),
            };
            let rm = m.with_flat(&ra.0);
            let pm = m.with_flat(&pa.0);
            let ends = align::prepare_endpoints(&rm, &pm, ("reactant", "product"))?;
            // IDPP needs more pair distances than internal coordinates to be of use; with 3
            // atoms or fewer (and on model surfaces) the straight line is the start.
            let start = if ends.frame == Frame::Surface || m.len() < 4 {
                interp::linear(&ends.reactant, &ends.product, images as usize)
            } else {
                interp::idpp(&ends.reactant, &ends.product, images as usize)
                    .map_err(|e| Error::Algorithm(format!("IDPP interpolation: {e}")))?
            };
            let mut opts = neb::NebOptions::for_frame(ends.frame);
            opts.climbing = climbing;
            opts.max_iterations = max_steps as usize;
            let mut algo = neb::Neb::new(start, ends.frame, opts)
                .map_err(|e| Error::Algorithm(e.to_string()))?;
            let (v, s) = driver::drive(&mut algo, e, &system).await?;
            add(acc, &s);
            let frames: Vec<(DVector<f64>, String)> = v
                .images
                .iter()
                .zip(&v.energies)
                .enumerate()
                .map(|(k, (x, en))| (x.clone(), format!("image {k}: E = {en:.10} Eh")))
                .collect();
            write_xyz("band.xyz", &frames)?;
            let x = v
                .images
                .get(v.highest)
                .cloned()
                .ok_or_else(|| Error::Algorithm("band without a highest image".into()))?;
            Ok(Out::Guess {
                x,
                mode: Some(v.tangent.clone()),
            })
        }
        StageSpec::Scan { points, max_steps } => {
            let (x0, _) = inp.reactant.clone().ok_or_else(|| missing("reactant"))?;
            let d = match &r.start {
                Start::Drive { drive, .. } => drive.clone(),
                _ => return Err(missing("driven distance")),
            };
            let from = {
                let (i, j) = (d.atoms[0], d.atoms[1]);
                (0..3)
                    .map(|k| (x0[3 * i + k] - x0[3 * j + k]).powi(2))
                    .sum::<f64>()
                    .sqrt()
            };
            let axis = scan::ScanAxis::range(
                crate::path::coords::Coord::Bond(d.atoms[0], d.atoms[1]),
                from,
                d.to_bohr,
                points as usize,
            );
            let mut opts = match frame {
                Frame::Surface => scan::ScanOptions::surface(),
                Frame::Molecule => scan::ScanOptions::molecule(),
            };
            opts.min.max_iterations = max_steps as usize;
            let mut algo = scan::Scan::new(x0, frame, vec![axis], opts)
                .map_err(|e| Error::Algorithm(e.to_string()))?;
            let (v, s) = driver::drive(&mut algo, e, &system).await?;
            add(acc, &s);
            let frames: Vec<(DVector<f64>, String)> = v
                .points
                .iter()
                .map(|p| {
                    (
                        p.x.clone(),
                        format!(
                            "distance {:.4} Å: E = {:.10} Eh",
                            p.reached.first().copied().unwrap_or(0.0)
                                * crate::units::ANGSTROM_PER_BOHR,
                            p.energy
                        ),
                    )
                })
                .collect();
            write_xyz("scan.xyz", &frames)?;
            let k = v.saddle_guess.ok_or_else(|| {
                Error::Algorithm(format!("the scan gave no saddle guess: {}", v.guess_note))
            })?;
            let x = v
                .points
                .get(k)
                .map(|p| p.x.clone())
                .ok_or_else(|| Error::Algorithm("scan guess index out of range".into()))?;
            Ok(Out::Guess {
                x,
                mode: v.guess_mode.clone(),
            })
        }
        StageSpec::Walk { mode, max_steps } => {
            let (x0, _) = inp.reactant.clone().ok_or_else(|| missing("reactant"))?;
            let mut opts = match frame {
                Frame::Surface => walk::WalkOptions::surface(),
                Frame::Molecule => walk::WalkOptions::molecule(),
            };
            opts.max_iterations = max_steps as usize;
            let mut algo = walk::Walk::new(x0, frame, walk::WalkStart::Mode(mode as usize), opts)
                .map_err(|e| Error::Algorithm(e.to_string()))?;
            let (v, s) = driver::drive(&mut algo, e, &system).await?;
            add(acc, &s);
            Ok(Out::Guess {
                x: v.x,
                mode: Some(v.mode),
            })
        }
        StageSpec::Refine {
            max_steps,
            fresh_hessian_every,
            ..
        } => {
            let (x0, mode) = inp.guess.clone().ok_or_else(|| missing("saddle guess"))?;
            let base = match frame {
                Frame::Surface => SaddleOptions::for_surface(),
                Frame::Molecule => SaddleOptions::default(),
            };
            let opts = SaddleOptions {
                method: Method::Prfo,
                follow: match mode {
                    Some(v) => FollowMode::Vector(v),
                    None => FollowMode::Lowest,
                },
                hessian: HessianSource::Engine,
                recompute_every: if fresh_hessian_every == 0 {
                    None
                } else {
                    Some(fresh_hessian_every as usize)
                },
                max_iterations: max_steps as usize,
                ..base
            };
            let mut algo = SaddleSearch::new(x0, frame, opts);
            let (v, s) = driver::drive(&mut algo, e, &system).await?;
            add(acc, &s);
            let mut saddle = m.with_flat(&v.x);
            saddle.comment = format!("saddle point: E = {:.10} Eh; {}", v.energy, v.reason);
            ctx.out.write(
                &format!("{}/saddle.xyz", r.name),
                &crate::xyz::format_frame(&saddle, &saddle.comment),
            )?;
            if !v.converged {
                return Err(Error::Algorithm(format!("refine: {}", v.reason)));
            }
            Ok(Out::Saddle {
                x: v.x,
                energy: v.energy,
            })
        }
        StageSpec::Modes {
            imaginary_threshold_cm1,
        } => {
            let (x, _) = inp.saddle.clone().ok_or_else(|| missing("saddle"))?;
            let mut algo = HessianCalc::new(x.clone(), frame, HessianSource::Engine);
            let (v, s) = driver::drive(&mut algo, e, &system).await?;
            add(acc, &s);
            let masses: Vec<f64> = if frame == Frame::Surface {
                vec![1.0; m.len()]
            } else {
                m.masses()
            };
            let modes = freq::analyze(&v.hessian, &x, &masses, frame, imaginary_threshold_cm1)
                .map_err(|e| Error::Algorithm(e.to_string()))?;
            let imag = modes
                .frequencies_cm1
                .iter()
                .copied()
                .filter(|f| *f < 0.0)
                .map(f64::abs)
                .fold(None, |a: Option<f64>, f| Some(a.map_or(f, |b| b.max(f))));
            let text = serde_json::json!({
                "frequencies_cm1": modes.frequencies_cm1,
                "n_imaginary": modes.n_imaginary,
                "imaginary_threshold_cm1": imaginary_threshold_cm1,
                "level": st.level,
            });
            ctx.out.write(
                &format!("{}/modes.json", r.name),
                &(serde_json::to_string_pretty(&text).unwrap_or_default() + "\n"),
            )?;
            Ok(Out::Modes {
                n_imaginary: modes.n_imaginary,
                imaginary_cm1: imag,
            })
        }
        StageSpec::Irc { step, max_steps } => {
            let (x, _) = inp.saddle.clone().ok_or_else(|| missing("saddle"))?;
            let masses: Vec<f64> = if frame == Frame::Surface {
                vec![1.0; m.len()]
            } else {
                m.masses()
            };
            let mut opts = irc::IrcOptions::for_frame(frame);
            opts.step = if frame == Frame::Surface {
                opts.step
            } else {
                step
            };
            opts.max_steps = max_steps as usize;
            opts.minimize_ends = false;
            let mut algo = irc::Irc::new(x, &masses, frame, opts)
                .map_err(|e| Error::Algorithm(e.to_string()))?;
            let (v, s) = driver::drive(&mut algo, e, &system).await?;
            add(acc, &s);
            let mut frames: Vec<(DVector<f64>, String)> = v
                .reverse
                .points
                .iter()
                .rev()
                .map(|p| (p.x.clone(), format!("reverse: E = {:.10} Eh", p.energy)))
                .collect();
            frames.push((
                v.saddle.clone(),
                format!("saddle: E = {:.10} Eh", v.saddle_energy),
            ));
            frames.extend(
                v.forward
                    .points
                    .iter()
                    .map(|p| (p.x.clone(), format!("forward: E = {:.10} Eh", p.energy))),
            );
            write_xyz("irc.xyz", &frames)?;
            let last = |b: &irc::IrcBranch| b.points.last().map(|p| p.x.clone());
            match (last(&v.forward), last(&v.reverse)) {
                (Some(f), Some(rv)) => Ok(Out::Irc {
                    forward: f,
                    reverse: rv,
                }),
                _ => Err(Error::Algorithm(
                    "the IRC did not leave the saddle in both directions".into(),
                )),
            }
        }
        StageSpec::Verify {
            same_species_rmsd_angstrom,
            max_steps,
        } => {
            let (f, rv) = inp.irc.clone().ok_or_else(|| missing("IRC"))?;
            let (n_imag, _) = inp.modes.ok_or_else(|| missing("normal modes"))?;
            let (_, e_ts) = inp.saddle.clone().ok_or_else(|| missing("saddle"))?;
            let opts = min_options(frame, max_steps);
            let mut a1 = Minimizer::new(f, frame, opts.clone());
            let mut a2 = Minimizer::new(rv, frame, opts);
            let (r1, r2) = tokio::join!(
                driver::drive(&mut a1, e, &system),
                driver::drive(&mut a2, e, &system)
            );
            let (v1, s1) = r1?;
            let (v2, s2) = r2?;
            add(acc, &s1);
            add(acc, &s2);
            Ok(judge(
                m,
                frame,
                &inp,
                n_imag,
                e_ts,
                (&v1.x, v1.energy, v1.converged),
                (&v2.x, v2.energy, v2.converged),
                same_species_rmsd_angstrom,
            ))
        }
    }
}

/// Same species as far as the verdict goes: the same bonds between the same atoms (molecules),
/// or within 0.05 surface units (model surfaces).
fn same_end(m: &Molecule, frame: Frame, a: &DVector<f64>, b: &DVector<f64>) -> bool {
    match frame {
        Frame::Surface => (a - b).norm() < graph::SURFACE_MATCH_DISTANCE,
        Frame::Molecule => graph::bonds(&m.elements, a) == graph::bonds(&m.elements, b),
    }
}

#[allow(clippy::too_many_arguments)]
fn judge(
    m: &Molecule,
    frame: Frame,
    inp: &Inputs,
    n_imag: usize,
    e_ts: f64,
    fwd: (&DVector<f64>, f64, bool),
    rev: (&DVector<f64>, f64, bool),
    rmsd_tol_angstrom: f64,
) -> Out {
    let kcal = |e: f64| e * KCALMOL_PER_HARTREE;
    let mut problems = Vec::new();
    if n_imag != 1 {
        problems.push(format!(
            "{n_imag} imaginary frequencies at the saddle, not 1"
        ));
    }
    if !fwd.2 || !rev.2 {
        problems.push("an IRC end did not minimise to convergence".to_string());
    }
    // Which IRC end is the reactant side.
    let (mut r_end, mut p_end) = (rev, fwd);
    let connects;
    match (&inp.reactant, &inp.product) {
        (Some((rx, _)), Some((px, _))) => {
            let straight = same_end(m, frame, r_end.0, rx) && same_end(m, frame, p_end.0, px);
            let swapped = same_end(m, frame, p_end.0, rx) && same_end(m, frame, r_end.0, px);
            if swapped && !straight {
                std::mem::swap(&mut r_end, &mut p_end);
            }
            connects = straight || swapped;
            if !connects {
                problems.push("the IRC ends are not the reaction's reactant and product".into());
            }
        }
        (Some((rx, _)), None) => {
            if same_end(m, frame, p_end.0, rx) && !same_end(m, frame, r_end.0, rx) {
                std::mem::swap(&mut r_end, &mut p_end);
            }
            let distinct = !same_end(m, frame, r_end.0, p_end.0)
                || aligned_rmsd_angstrom(frame, r_end.0, p_end.0) > rmsd_tol_angstrom;
            let reaches_reactant = same_end(m, frame, r_end.0, rx);
            connects = distinct && reaches_reactant;
            if !distinct {
                problems.push("both IRC ends are the same species".into());
            } else if !reaches_reactant {
                problems.push("neither IRC end is the reactant".into());
            }
        }
        _ => {
            let distinct = !same_end(m, frame, r_end.0, p_end.0)
                || aligned_rmsd_angstrom(frame, r_end.0, p_end.0) > rmsd_tol_angstrom;
            connects = distinct;
            if !distinct {
                problems.push("both IRC ends are the same species".into());
            }
        }
    }
    // Energies: relaxed ends when the reaction has them, else the minimised IRC ends.
    let e_r = inp
        .reactant
        .as_ref()
        .and_then(|(_, e)| *e)
        .unwrap_or(r_end.1);
    let e_p = inp
        .product
        .as_ref()
        .and_then(|(_, e)| *e)
        .unwrap_or(p_end.1);
    let status = if problems.is_empty() {
        Verdict::Verified
    } else {
        Verdict::Unverified
    };
    let reason = if problems.is_empty() {
        "one imaginary frequency; the IRC connects the two ends".to_string()
    } else {
        problems.join("; ")
    };
    Out::Verified {
        status,
        reason,
        connects,
        forward_kcal: Some(kcal(e_ts - e_r)),
        reverse_kcal: Some(kcal(e_ts - e_p)),
        reaction_kcal: Some(kcal(e_p - e_r)),
    }
}

fn aligned_rmsd_angstrom(frame: Frame, a: &DVector<f64>, b: &DVector<f64>) -> f64 {
    match frame {
        Frame::Surface => align::rmsd(a, b),
        Frame::Molecule => align::rmsd(a, &align::kabsch(a, b)) * crate::units::ANGSTROM_PER_BOHR,
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
