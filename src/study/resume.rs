//! Finished-task markers: how a second `cairn run` on the same directory knows what is done.
//!
//! Every task has a fingerprint: SHA-256 over what decides its result — the task kind, the
//! engine identity of its level (adapter, version, settings; not retries or time limits), its
//! options, the reaction's charge, multiplicity and start geometries, and the fingerprints of
//! the tasks it needs. When a task succeeds, after its own files are written, the runner files
//! a marker `DIR/tasks/<reaction>/<n>-<stage>.json` (species: `DIR/tasks/species/<key>.json`)
//! holding the fingerprint and the task's output. A later run takes a task whose marker has the
//! same fingerprint as finished and does not even replay it; a different fingerprint (a level's
//! settings changed, an option, a geometry) or a missing or unreadable marker runs the task
//! again — replayed from the store where its evaluations are already there. Changing one
//! level therefore reruns exactly the tasks that use it and those after them.

use super::model::{Geometry, StageKind, StageSpec, Start};
use super::plan::Task;
use super::run::{Ctx, Out};
use crate::driver::Stats;
use serde::{Deserialize, Serialize};
use sha2::{Digest, Sha256};

/// Version of the marker files (and of the fingerprint recipe).
pub const MARKER_FORMAT: u32 = 1;

/// `DIR/tasks/...`: one finished task.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub(super) struct Marker {
    pub format: u32,
    pub fingerprint: String,
    /// The task, in words (for people reading the directory).
    pub task: String,
    pub out: Out,
    /// What the task's algorithm asked for when it ran.
    pub evaluations: u64,
    pub energy_evaluations: u64,
    pub gradient_evaluations: u64,
    pub hessian_evaluations: u64,
    /// Engine runs and wall time of the invocation that finished it.
    pub engine_runs: u64,
    pub wall_seconds: f64,
}

impl Marker {
    pub fn new(fingerprint: &str, task: String, out: &Out, st: &Stats, secs: f64) -> Marker {
        Marker {
            format: MARKER_FORMAT,
            fingerprint: fingerprint.to_string(),
            task,
            out: out.clone(),
            evaluations: st.points,
            energy_evaluations: st.energy_evaluations,
            gradient_evaluations: st.gradient_evaluations,
            hessian_evaluations: st.hessian_evaluations,
            engine_runs: st.engine_runs,
            wall_seconds: secs,
        }
    }

    /// The work the task's algorithm asked for; nothing reached an engine in this invocation.
    pub fn replayed_stats(&self) -> Stats {
        Stats {
            points: self.evaluations,
            energy_evaluations: self.energy_evaluations,
            gradient_evaluations: self.gradient_evaluations,
            hessian_evaluations: self.hessian_evaluations,
            ..Stats::default()
        }
    }
}

/// Where task `i`'s marker lives, relative to DIR.
pub(super) fn marker_path(ctx: &Ctx, i: usize) -> Option<String> {
    match ctx.plan.tasks.get(i)?.0 {
        Task::Relax { species } => Some(format!(
            "tasks/species/{}.json",
            ctx.plan.species.get(species)?.key
        )),
        Task::Stage { reaction, stage } => {
            let r = ctx.study.reactions.get(reaction)?;
            let kind = r.stages.get(stage)?.kind();
            Some(format!(
                "tasks/{}/{}-{}.json",
                r.name,
                stage + 1,
                kind.name()
            ))
        }
    }
}

/// The marker of task `i` if it exists, is readable, and carries `fingerprint`.
pub(super) fn load_marker(ctx: &Ctx, i: usize, fingerprint: &str) -> Option<Marker> {
    let rel = marker_path(ctx, i)?;
    let path = ctx.out.join(&rel).ok()?;
    let text = std::fs::read_to_string(&path).ok()?;
    let m: Marker = match serde_json::from_str(&text) {
        Ok(m) => m,
        Err(e) => {
            tracing::warn!(
                "{}: unreadable task marker ({e}); the task runs again",
                path.display()
            );
            return None;
        }
    };
    (m.format == MARKER_FORMAT && m.fingerprint == fingerprint).then_some(m)
}

/// File task `i`'s marker (atomically).
pub(super) fn save_marker(ctx: &Ctx, i: usize, m: &Marker) -> crate::Result<()> {
    let Some(rel) = marker_path(ctx, i) else {
        return Ok(());
    };
    let text = serde_json::to_string(m)
        .map_err(|e| crate::Error::invalid(format!("cannot encode the marker of {rel}: {e}")))?;
    ctx.out.write(&rel, &(text + "\n"))?;
    Ok(())
}

/// Every task's fingerprint, in plan order (dependencies come first in the plan).
/// `identity(level)` is the engine identity of a level.
pub(super) fn fingerprints(ctx: &Ctx, identity: &dyn Fn(&str) -> String) -> Vec<String> {
    let mut out: Vec<String> = Vec::with_capacity(ctx.plan.tasks.len());
    for (task, deps) in &ctx.plan.tasks {
        let mut h = Sha256::new();
        h.update(format!("cairn-task-v{MARKER_FORMAT}\n").as_bytes());
        match *task {
            Task::Relax { species } => {
                if let Some(sp) = ctx.plan.species.get(species) {
                    // The species key covers level settings, charge, multiplicity, geometry
                    // and the relaxation's options.
                    h.update(format!("relax {}\n{}\n", sp.key, identity(&sp.level)).as_bytes());
                    h.update(spec_text(&sp.stage.spec).as_bytes());
                }
            }
            Task::Stage { reaction, stage } => {
                if let Some(r) = ctx.study.reactions.get(reaction) {
                    h.update(
                        format!(
                            "stage {stage}\ncharge={}\nmultiplicity={}\n{}",
                            r.charge,
                            r.multiplicity,
                            start_text(&r.start)
                        )
                        .as_bytes(),
                    );
                    if let Some(st) = r.stages.get(stage) {
                        h.update(identity(&st.level).as_bytes());
                        h.update(spec_text(&st.spec).as_bytes());
                    }
                }
            }
        }
        for d in deps.iter().filter(|d| feeds(ctx, task, d.index())) {
            h.update(b"needs ");
            h.update(
                out.get(d.index())
                    .map(String::as_str)
                    .unwrap_or("?")
                    .as_bytes(),
            );
            h.update(b"\n");
        }
        out.push(hex::encode(h.finalize()));
    }
    out
}

/// The start's geometries (elements and exact coordinate bits; not file names or comments,
/// so moving the study or editing a comment line reruns nothing) and driven distance.
fn start_text(start: &Start) -> String {
    let mol = |tag: &str, g: &Geometry| {
        let mut t = format!("{tag}\n");
        for (e, c) in g.molecule.elements.iter().zip(&g.molecule.coords) {
            t.push_str(&format!(
                "{} {:016x} {:016x} {:016x}\n",
                e.z(),
                c[0].to_bits(),
                c[1].to_bits(),
                c[2].to_bits()
            ));
        }
        t
    };
    match start {
        Start::Ends { reactant, product } => mol("reactant", reactant) + &mol("product", product),
        Start::Guess { guess, ends } => {
            let mut t = mol("guess", guess);
            if let Some((r, p)) = ends {
                t += &mol("reactant", r);
                t += &mol("product", p);
            }
            t
        }
        Start::Drive { reactant, drive } => {
            mol("reactant", reactant)
                + &format!("drive {:?} {:016x}\n", drive.atoms, drive.to_bohr.to_bits())
        }
        Start::Alone { reactant } => mol("alone", reactant),
    }
}

/// Whether task `dep`'s output goes into `task`'s result. Every dependency does except one
/// that is there for order only: the IRC waits for the normal modes (no IRC from a saddle that
/// failed its frequency check) but does not use them, so a new modes level leaves it alone.
fn feeds(ctx: &Ctx, task: &Task, dep: usize) -> bool {
    let kind = |t: &Task| match *t {
        Task::Stage { reaction, stage } => ctx
            .study
            .reactions
            .get(reaction)
            .and_then(|r| r.stages.get(stage))
            .map(|s| s.kind()),
        Task::Relax { .. } => None,
    };
    let producer = ctx.plan.tasks.get(dep).and_then(|(t, _)| kind(t));
    !(kind(task) == Some(StageKind::Irc) && producer == Some(StageKind::Modes))
}

/// A stage's options as text (Rust's `Debug` prints every float exactly, shortest round trip).
fn spec_text(spec: &StageSpec) -> String {
    format!("\n{spec:?}\n")
}
