//! The work of each task kind: relaxing a species, and each pipeline stage (band, scan, walk,
//! refine, modes, IRC, verify), as the runner calls them. Each drives a pure algorithm through
//! the level's evaluator and writes its files through the output directory.

use super::model::*;
use super::plan::{Role, Task};
use super::record::Verdict;
use crate::algo::freq;
use crate::algo::hessian::{HessianCalc, HessianSource};
use crate::algo::minimize::{MinOptions, Minimizer};
use crate::algo::saddle::{FollowMode, Method, SaddleOptions, SaddleSearch};
use crate::driver::{self, Evaluator, Stats, System};
use crate::error::{Error, Result};
use crate::geom::Frame;
use crate::molecule::Molecule;
use crate::path::{align, graph, interp, irc, neb, scan, walk};
use crate::units::KCALMOL_PER_HARTREE;
use nalgebra::DVector;

use super::run::{Ctx, Out};

pub(super) fn frame_of(m: &Molecule) -> Frame {
    if m.is_model_surface() {
        Frame::Surface
    } else {
        Frame::Molecule
    }
}

/// Which evaluator a stage uses: its level, with the stage's retry budget and time limit.
pub(super) fn evaluator_key(stage: &Stage) -> String {
    format!(
        "{}|retries={}|timeout={:?}",
        stage.level, stage.retries, stage.timeout_seconds
    )
}

pub(super) fn ev<'a>(ctx: &'a Ctx, stage: &Stage) -> Result<&'a Evaluator> {
    ctx.evaluators
        .get(&evaluator_key(stage))
        .ok_or_else(|| Error::invalid(format!("no evaluator for level '{}'", stage.level)))
}

pub(super) fn add(acc: &mut Stats, s: &Stats) {
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

pub(super) async fn relax_species(ctx: &Ctx, species: usize, acc: &mut Stats) -> Result<Out> {
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
    let (v, st) = driver::drive(&mut algo, ev(ctx, &sp.stage)?, &system).await?;
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
pub(super) struct Inputs {
    reactant: Option<(DVector<f64>, Option<f64>)>,
    product: Option<(DVector<f64>, Option<f64>)>,
    guess: Option<(DVector<f64>, Option<DVector<f64>>)>,
    saddle: Option<(DVector<f64>, f64)>,
    modes: Option<(usize, Option<f64>)>,
    irc: Option<(DVector<f64>, DVector<f64>)>,
    /// The verdict and the ends the barriers use (reactant side, product side).
    verified: Option<(Verdict, [super::kinetics::Point; 2])>,
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
        verified: None,
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
            Out::Verified { status, ends, .. } => {
                g.verified = Some((*status, (**ends).clone()));
            }
            Out::Kinetics(_) => {}
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

pub(super) async fn run_stage(
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
    let e = ev(ctx, st)?;
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
            // On model surfaces the straight line is the start; molecules get IDPP (which
            // bows collinear starts such as HCN → HNC off their axis).
            let start = if ends.frame == Frame::Surface {
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
            // The energy profile after every evaluated batch: the first batch has every image,
            // later ones the moving images only.
            let n_img = images as usize + 2;
            let mut current = vec![f64::NAN; n_img];
            let mut history: Vec<Vec<f64>> = Vec::new();
            let (v, s) = driver::drive_observed(&mut algo, e, &system, |step| {
                let offset = if step.answers.len() == n_img { 0 } else { 1 };
                for (k, a) in step.answers.iter().enumerate() {
                    if let Some(c) = current.get_mut(k + offset) {
                        *c = a.energy;
                    }
                }
                history.push(current.clone());
            })
            .await?;
            add(acc, &s);
            super::history::write_band_history(ctx, &r.name, &history, m.is_model_surface())?;
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
            write_xyz(
                "irc-ends.xyz",
                &[
                    (
                        v2.x.clone(),
                        format!(
                            "reverse IRC end, minimised: E = {:.10} Eh; {}",
                            v2.energy, v2.reason
                        ),
                    ),
                    (
                        v1.x.clone(),
                        format!(
                            "forward IRC end, minimised: E = {:.10} Eh; {}",
                            v1.energy, v1.reason
                        ),
                    ),
                ],
            )?;
            let (out, unexpected) = judge(
                m,
                frame,
                &inp,
                n_imag,
                e_ts,
                (&v1.x, v1.energy, v1.converged),
                (&v2.x, v2.energy, v2.converged),
                same_species_rmsd_angstrom,
                &r.name,
            );
            for (file, x, energy) in unexpected {
                let mut mm = m.with_flat(&x);
                mm.comment = format!(
                    "{}: an IRC end that is neither expected end, minimised: E = {energy:.10} Eh",
                    r.name
                );
                ctx.out
                    .write(&file, &crate::xyz::format_frame(&mm, &mm.comment))?;
            }
            Ok(out)
        }
        StageSpec::Rates(ref spec) => {
            let (verdict, ends) = inp.verified.clone().ok_or_else(|| missing("verdict"))?;
            let saddle = inp.saddle.clone().ok_or_else(|| missing("saddle"))?;
            // The relaxed ends when the reaction has them (as the verdict's barriers), else the
            // minimised IRC ends.
            let pick = |relaxed: &Option<(DVector<f64>, Option<f64>)>,
                        end: &(DVector<f64>, f64)| {
                match relaxed {
                    Some((x, Some(en))) => (x.clone(), *en),
                    _ => end.clone(),
                }
            };
            let input = super::kinetics::RatesInput {
                reactant: pick(&inp.reactant, &ends[0]),
                product: pick(&inp.product, &ends[1]),
                saddle,
                verdict,
                irc_ends: Some(ends),
            };
            super::kinetics::run_rates(ctx, r, st, spec, m, input, e, acc).await
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

/// An IRC end that is none of the minima the reaction should reach: (file relative to DIR,
/// coordinates, energy).
type Unexpected = (String, DVector<f64>, f64);

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
    reaction: &str,
) -> (Out, Vec<Unexpected>) {
    let kcal = |e: f64| e * KCALMOL_PER_HARTREE;
    let mut problems = Vec::new();
    let mut unexpected: Vec<Unexpected> = Vec::new();
    let keep = |x: &DVector<f64>, e: f64, unexpected: &mut Vec<Unexpected>| {
        let file = format!("{reaction}/unexpected-minimum-{}.xyz", unexpected.len() + 1);
        unexpected.push((file.clone(), x.clone(), e));
        file
    };
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
                let is =
                    |e: &(&DVector<f64>, f64, bool), x: &DVector<f64>| same_end(m, frame, e.0, x);
                let what = |e: &(&DVector<f64>, f64, bool)| {
                    if is(e, rx) {
                        Some("the reactant")
                    } else if is(e, px) {
                        Some("the product")
                    } else {
                        None
                    }
                };
                let detail = match (what(&rev), what(&fwd)) {
                    // (Different known ends would have connected.)
                    (Some(a), Some(_)) => format!("both ends are {a}"),
                    (Some(known), None) => {
                        let f = keep(fwd.0, fwd.1, &mut unexpected);
                        format!("it joins {known} to an unexpected minimum (saved as {f})")
                    }
                    (None, Some(known)) => {
                        let f = keep(rev.0, rev.1, &mut unexpected);
                        format!("it joins {known} to an unexpected minimum (saved as {f})")
                    }
                    (None, None) => {
                        let f1 = keep(rev.0, rev.1, &mut unexpected);
                        let f2 = keep(fwd.0, fwd.1, &mut unexpected);
                        format!("it joins two unexpected minima (saved as {f1} and {f2})")
                    }
                };
                problems.push(format!(
                    "the IRC ends are not the reaction's reactant and product: {detail}"
                ));
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
                let f1 = keep(rev.0, rev.1, &mut unexpected);
                let f2 = keep(fwd.0, fwd.1, &mut unexpected);
                problems.push(format!(
                    "neither IRC end is the reactant: it joins two unexpected minima (saved as {f1} and {f2})"
                ));
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
    (
        Out::Verified {
            status,
            reason,
            connects,
            forward_kcal: Some(kcal(e_ts - e_r)),
            reverse_kcal: Some(kcal(e_ts - e_p)),
            reaction_kcal: Some(kcal(e_p - e_r)),
            ends: Box::new([(r_end.0.clone(), r_end.1), (p_end.0.clone(), p_end.1)]),
        },
        unexpected,
    )
}

fn aligned_rmsd_angstrom(frame: Frame, a: &DVector<f64>, b: &DVector<f64>) -> f64 {
    match frame {
        Frame::Surface => align::rmsd(a, b),
        Frame::Molecule => align::rmsd(a, &align::kabsch(a, b)) * crate::units::ANGSTROM_PER_BOHR,
    }
}
