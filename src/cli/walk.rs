//! `cairn walk MINIMUM.xyz --engine E [--mode K]`: walk uphill from a minimum along one of its
//! soft modes to a saddle (dimer min-mode following), without knowing the product.
//!
//! Exit status: 0 converged to a point with negative curvature; 1 error; 2 usage error;
//! 3 not converged (results kept).

use super::band::{cost_json, engine_json, finish, out_dir, session, write_json, EngineArgs};
use crate::driver::{block_on, drive};
use crate::error::{Error, Result};
use crate::path::report;
use crate::path::walk::{Walk, WalkOptions, WalkStart};
use serde_json::json;
use std::path::PathBuf;
use std::time::Instant;

/// Walk uphill from a minimum to a saddle along a soft mode (dimer method).
///
/// The Hessian at the minimum picks the direction: mode K, counted from the softest (1).
/// Writes into --out: walk.xyz (the dimer centres with energies), saddle_guess.xyz,
/// saddle_guess_mode.txt (the dimer direction: the mode to follow when refining), walk.json.
/// Exit status: 0 converged; 1 error; 2 usage error; 3 not converged (results kept).
#[derive(clap::Args, Debug)]
pub struct Args {
    /// Minimum to start from (XYZ, Å).
    pub minimum: PathBuf,
    #[command(flatten)]
    pub engine: EngineArgs,
    /// Which mode to walk along, counted from the softest (1).
    #[arg(long, default_value_t = 1, value_parser = clap::value_parser!(u64).range(1..))]
    pub mode: u64,
    /// Walk along −mode instead (the sign of a mode: its largest component positive).
    #[arg(long)]
    pub reverse: bool,
    /// Iteration budget (default 300; 1000 on model surfaces).
    #[arg(long)]
    pub max_iterations: Option<usize>,
    /// Output directory.
    #[arg(long, default_value = "walk")]
    pub out: PathBuf,
}

pub fn run(args: Args) -> i32 {
    finish("walk", execute(&args))
}

fn execute(args: &Args) -> Result<(String, bool)> {
    let t0 = Instant::now();
    let mut m = crate::xyz::read(&args.minimum)?;
    let name = args.minimum.display().to_string();
    let s = session(&args.engine, &mut m, &args.minimum)?;
    let mut opts = WalkOptions::for_frame(s.frame);
    opts.reverse = args.reverse;
    if let Some(k) = args.max_iterations {
        opts.max_iterations = k;
    }
    let k = usize::try_from(args.mode).unwrap_or(1);
    let mut walk =
        Walk::new(m.flat(), s.frame, WalkStart::Mode(k), opts).map_err(|e| Error::invalid(e.0))?;
    out_dir(&args.out)?;
    let (v, stats) = block_on(drive(&mut walk, &s.ev, &s.system))
        .map_err(|e| Error::Algorithm(format!("{name}: {e}")))?;
    let wall = t0.elapsed().as_secs_f64();
    let e0 = v.path.first().map_or(v.energy, |p| p.energy);
    let frames: Vec<_> = v
        .path
        .iter()
        .enumerate()
        .map(|(i, p)| {
            (
                p.x.clone(),
                format!(
                    "walk step {i} E = {} curvature = {:.4e} {}",
                    report::energy(p.energy, s.surface),
                    p.curvature,
                    if s.surface {
                        "(surface units)"
                    } else {
                        "Eh/bohr^2"
                    }
                ),
            )
        })
        .collect();
    let walk_file = args.out.join("walk.xyz");
    crate::xyz::write_atomic(&walk_file, &report::frames_xyz(&m, &frames))?;
    let guess_file = args.out.join("saddle_guess.xyz");
    crate::xyz::write_atomic(
        &guess_file,
        &crate::xyz::format_frame(
            &m.with_flat(&v.x),
            &format!(
                "saddle guess from walking uphill along mode {k}: E = {}",
                report::energy(v.energy, s.surface)
            ),
        ),
    )?;
    let mode_file = args.out.join("saddle_guess_mode.txt");
    crate::xyz::write_atomic(
        &mode_file,
        &report::mode_text(&m, &v.mode, "dimer direction at the saddle guess"),
    )?;
    let record = json!({
        "command": "walk",
        "minimum": name,
        "engine": engine_json(&s),
        "mode": k,
        "reverse": args.reverse,
        "start_eigenvalue": v.start_eigenvalue,
        "converged": v.converged,
        "reason": v.reason,
        "iterations": v.iterations,
        "saddle_guess": {
            "energy": v.energy,
            "curvature": v.curvature,
            "largest_gradient_component": v.gradient_max,
            "geometry": report::geometry_json(&m, &v.x),
            "mode": v.mode.iter().copied().collect::<Vec<f64>>(),
        },
        "energies": v.path.iter().map(|p| p.energy).collect::<Vec<_>>(),
        "files": {
            "path": walk_file.display().to_string(),
            "saddle_guess": guess_file.display().to_string(),
            "saddle_guess_mode": mode_file.display().to_string(),
        },
        "cost": cost_json(&stats, wall, s.jobs),
    });
    let rec_file = args.out.join("walk.json");
    write_json(&rec_file, &record)?;
    let mut text = format!(
        "walk from {name} along mode {k}{}, engine {}\n{}\n",
        if args.reverse { " (reversed)" } else { "" },
        s.engine.name(),
        v.reason
    );
    text.push_str(&format!(
        "saddle guess: E = {}, {} above the start, curvature {:.4e} {}\n",
        report::energy(v.energy, s.surface),
        report::relative(v.energy, e0, s.surface),
        v.curvature,
        if s.surface {
            "(surface units)"
        } else {
            "Eh/bohr^2"
        }
    ));
    text.push_str(&format!(
        "{} gradients, {} Hessians, {:.1} s wall; written: {}, {}, {}, {}\n",
        stats.gradient_evaluations,
        stats.hessian_evaluations,
        wall,
        walk_file.display(),
        guess_file.display(),
        mode_file.display(),
        rec_file.display()
    ));
    if !v.converged {
        text.push_str("NOT CONVERGED: the last point is kept as a guess\n");
    }
    Ok((text, v.converged))
}
