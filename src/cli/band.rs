//! `cairn band REACTANT.xyz PRODUCT.xyz --engine E`: a climbing-image nudged elastic band
//! between two minima. Writes the band (multi-frame XYZ with energies), the highest image as a
//! saddle guess with its tangent as the mode to follow, and a JSON record.
//!
//! Also holds the pieces the path commands share (engine options, setting up the evaluator,
//! writing records).
//!
//! Exit status: 0 converged; 1 error; 2 usage error; 3 finished without converging (results
//! kept).

use crate::driver::{block_on, drive, Evaluator, Stats, System};
use crate::engine::Engine;
use crate::error::{Error, Result};
use crate::geom::Frame;
use crate::molecule::Molecule;
use crate::path::align::prepare_endpoints;
use crate::path::interp::{self, Interpolation};
use crate::path::neb::{Neb, NebOptions};
use crate::path::report;
use serde_json::json;
use std::path::{Path, PathBuf};
use std::sync::Arc;
use std::time::Instant;

/// Engine options shared by the path commands.
#[derive(clap::Args, Debug, Clone)]
pub struct EngineArgs {
    #[command(flatten)]
    pub choice: crate::cli::evaluate::EngineChoice,
    /// Engine jobs run at once (parallel slots).
    #[arg(long, default_value_t = 2, value_parser = clap::value_parser!(u64).range(1..))]
    pub jobs: u64,
}

/// What a path command needs to evaluate: engine, evaluator, system, frame.
pub(crate) struct Session {
    pub engine: Arc<dyn Engine>,
    pub ev: Evaluator,
    pub system: System,
    pub frame: Frame,
    pub surface: bool,
    pub jobs: usize,
}

/// Set charge and multiplicity on `m` (read from `file`), check them, find the engine and
/// open the store.
pub(crate) fn session(args: &EngineArgs, m: &mut Molecule, file: &Path) -> Result<Session> {
    let system = args.choice.system_of(m, file)?;
    let engine = args.choice.find()?;
    let surface = engine.is_model() || m.is_model_surface();
    if engine.is_model() != m.is_model_surface() {
        return Err(Error::invalid(format!(
            "{}: {} but engine '{}' {}",
            file.display(),
            if m.is_model_surface() {
                "holds a model-surface point (atom X)"
            } else {
                "holds real atoms"
            },
            args.choice.engine,
            if engine.is_model() {
                "is a model surface (give one pseudo-atom X)"
            } else {
                "needs real atoms"
            }
        )));
    }
    let jobs = usize::try_from(args.jobs).unwrap_or(1).max(1);
    let store = args.choice.store_dir();
    let ev = Evaluator::local(engine.clone(), &store, jobs)?;
    Ok(Session {
        engine,
        ev,
        system,
        frame: if surface {
            Frame::Surface
        } else {
            Frame::Molecule
        },
        surface,
        jobs,
    })
}

/// The engine block of a record.
pub(crate) fn engine_json(s: &Session) -> serde_json::Value {
    json!({
        "name": s.engine.name(),
        "identity": s.engine.identity(),
        "charge": s.system.charge(),
        "multiplicity": s.system.multiplicity(),
        "energy_unit": report::energy_unit(s.surface),
    })
}

/// The cost block of a record: counters of the drive, wall time, slots.
pub(crate) fn cost_json(stats: &Stats, wall: f64, jobs: usize) -> serde_json::Value {
    let ideal = stats.engine_seconds / jobs as f64;
    json!({
        "gradient_evaluations": stats.gradient_evaluations,
        "hessian_evaluations": stats.hessian_evaluations,
        "engine_runs": stats.engine_runs,
        "store_hits": stats.store_hits,
        "batches": stats.batches,
        "engine_seconds": stats.engine_seconds,
        "wall_seconds": wall,
        "parallel_slots": jobs,
        "wall_over_ideal": if ideal > 0.0 { Some(wall / ideal) } else { None },
    })
}

/// Write a JSON record (pretty, atomically).
pub(crate) fn write_json(path: &Path, v: &serde_json::Value) -> Result<()> {
    let mut s = serde_json::to_string_pretty(v)
        .map_err(|e| Error::invalid(format!("cannot encode {} as JSON: {e}", path.display())))?;
    s.push('\n');
    crate::xyz::write_atomic(path, &s)
}

/// Make the output directory.
pub(crate) fn out_dir(dir: &Path) -> Result<()> {
    std::fs::create_dir_all(dir).map_err(|e| {
        Error::io(
            format!("cannot create output directory {}", dir.display()),
            e,
        )
    })
}

/// Run a command body and turn its outcome into an exit status.
pub(crate) fn finish(name: &str, r: Result<(String, bool)>) -> i32 {
    match r {
        Ok((text, true)) => {
            print!("{text}");
            0
        }
        Ok((text, false)) => {
            print!("{text}");
            3
        }
        Err(e) => {
            eprintln!("error: cairn {name}: {e}");
            1
        }
    }
}

/// Climbing-image nudged elastic band between two minima.
///
/// Writes into --out: band.xyz (every image with its energy), saddle_guess.xyz (the highest
/// image), saddle_guess_mode.txt (the band tangent there: the mode to follow when refining),
/// band.json (the record). The product is aligned onto the reactant first (minimum RMSD).
/// Exit status: 0 converged; 1 error; 2 usage error; 3 not converged (results kept).
#[derive(clap::Args, Debug)]
pub struct Args {
    /// Reactant geometry (XYZ, Å).
    pub reactant: PathBuf,
    /// Product geometry (XYZ, Å): same atoms in the same order.
    pub product: PathBuf,
    #[command(flatten)]
    pub engine: EngineArgs,
    /// Images between the two ends.
    #[arg(long, default_value_t = 8, value_parser = clap::value_parser!(u64).range(1..200))]
    pub images: u64,
    /// First path: idpp (default for molecules) or linear (always used on model surfaces).
    #[arg(long, value_parser = ["idpp", "linear"])]
    pub interpolation: Option<String>,
    /// Turn the climbing image off.
    #[arg(long)]
    pub no_climb: bool,
    /// Step budget (band iterations; default 500 for molecules, 2000 on model surfaces).
    #[arg(long)]
    pub max_iterations: Option<usize>,
    /// Output directory.
    #[arg(long, default_value = "band")]
    pub out: PathBuf,
}

pub fn run(args: Args) -> i32 {
    finish("band", execute(&args))
}

fn execute(args: &Args) -> Result<(String, bool)> {
    let t0 = Instant::now();
    let mut reactant = crate::xyz::read(&args.reactant)?;
    let product = crate::xyz::read(&args.product)?;
    let rname = args.reactant.display().to_string();
    let pname = args.product.display().to_string();
    let ends = prepare_endpoints(&reactant, &product, (&rname, &pname))?;
    let s = session(&args.engine, &mut reactant, &args.reactant)?;
    let n = usize::try_from(args.images).unwrap_or(8);
    let method = match (args.interpolation.as_deref(), s.surface) {
        (_, true) | (Some("linear"), _) => Interpolation::Linear,
        _ => Interpolation::Idpp,
    };
    let images = match method {
        Interpolation::Linear => interp::linear(&ends.reactant, &ends.product, n),
        Interpolation::Idpp => interp::idpp(&ends.reactant, &ends.product, n)
            .map_err(|e| Error::Algorithm(format!("IDPP interpolation: {e}")))?,
    };
    let mut opts = NebOptions::for_frame(s.frame);
    opts.climbing = !args.no_climb;
    if let Some(m) = args.max_iterations {
        opts.max_iterations = m;
    }
    let mut neb = Neb::new(images, s.frame, opts).map_err(|e| Error::invalid(e.0))?;
    out_dir(&args.out)?;
    let outcome = block_on(drive(&mut neb, &s.ev, &s.system));
    let (v, stats) = match outcome {
        Ok(x) => x,
        Err(e) => {
            // Keep the band as it was when the evaluation failed.
            let frames: Vec<_> = neb
                .images()
                .iter()
                .enumerate()
                .map(|(k, x)| (x.clone(), format!("image {k} (band at the failure)")))
                .collect();
            let path = args.out.join("band_partial.xyz");
            crate::xyz::write_atomic(&path, &report::frames_xyz(&reactant, &frames))?;
            return Err(Error::Algorithm(format!(
                "{e}; the band as it was is kept in {}",
                path.display()
            )));
        }
    };
    let wall = t0.elapsed().as_secs_f64();
    let e0 = v.energies[0];
    let m = v.images.len();
    let frames: Vec<_> = v
        .images
        .iter()
        .zip(&v.energies)
        .enumerate()
        .map(|(k, (x, e))| {
            (
                x.clone(),
                format!(
                    "image {k} of {} E = {} rel = {}{}",
                    m - 1,
                    report::energy(*e, s.surface),
                    report::relative(*e, e0, s.surface),
                    if k == v.highest { " (highest)" } else { "" }
                ),
            )
        })
        .collect();
    let band_file = args.out.join("band.xyz");
    crate::xyz::write_atomic(&band_file, &report::frames_xyz(&reactant, &frames))?;
    let guess_file = args.out.join("saddle_guess.xyz");
    let top = &v.images[v.highest];
    crate::xyz::write_atomic(
        &guess_file,
        &crate::xyz::format_frame(
            &reactant.with_flat(top),
            &format!(
                "saddle guess: band image {} E = {} ({})",
                v.highest,
                report::energy(v.energies[v.highest], s.surface),
                if v.climbing {
                    "climbing image"
                } else {
                    "highest image"
                }
            ),
        ),
    )?;
    let mode_file = args.out.join("saddle_guess_mode.txt");
    crate::xyz::write_atomic(
        &mode_file,
        &report::mode_text(&reactant, &v.tangent, "band tangent at the saddle guess"),
    )?;
    let record = json!({
        "command": "band",
        "reactant": rname,
        "product": pname,
        "engine": engine_json(&s),
        "interpolation": method,
        "images_between_ends": n,
        "climbing": opts.climbing,
        "converged": v.converged,
        "reason": v.reason,
        "iterations": v.iterations,
        "max_perpendicular_gradient": v.max_perp,
        "climbing_image_gradient": v.climb_grad,
        "gradient_unit": if s.surface { "surface units" } else { "Eh/bohr" },
        "energies": v.energies,
        "highest_image": v.highest,
        "saddle_guess": {
            "energy": v.energies[v.highest],
            "geometry": report::geometry_json(&reactant, top),
            "mode": v.tangent.iter().copied().collect::<Vec<f64>>(),
        },
        "endpoint_rmsd": ends.rmsd,
        "files": {
            "band": band_file.display().to_string(),
            "saddle_guess": guess_file.display().to_string(),
            "saddle_guess_mode": mode_file.display().to_string(),
        },
        "history": v.history,
        "cost": cost_json(&stats, wall, s.jobs),
    });
    let rec_file = args.out.join("band.json");
    write_json(&rec_file, &record)?;
    let mut text = format!(
        "band {} -> {}: {} images between the ends, engine {}\n{}\n",
        rname,
        pname,
        n,
        s.engine.name(),
        v.reason
    );
    text.push_str(&format!(
        "highest image {}: E = {}, {} above the reactant\n",
        v.highest,
        report::energy(v.energies[v.highest], s.surface),
        report::relative(v.energies[v.highest], e0, s.surface)
    ));
    text.push_str(&format!(
        "{} gradients, {:.1} s wall; written: {}, {}, {}, {}\n",
        stats.gradient_evaluations,
        wall,
        band_file.display(),
        guess_file.display(),
        mode_file.display(),
        rec_file.display()
    ));
    if !v.converged {
        text.push_str(
            "NOT CONVERGED: the results above are kept but the saddle guess may be poor\n",
        );
    }
    Ok((text, v.converged))
}
