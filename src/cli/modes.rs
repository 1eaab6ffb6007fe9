//! `cairn modes`: harmonic frequency analysis of one geometry.

use super::record::{self, Common, Outcome, Setup};
use crate::algo::common::{max_abs, Convergence};
use crate::algo::freq::{analyze, DEFAULT_IMAG_THRESHOLD_CM1};
use crate::algo::hessian::{HessianCalc, HessianSource};
use crate::driver::{block_on, drive};
use crate::error::{Error, Result};
use serde_json::json;
use std::path::PathBuf;

/// Harmonic frequencies, normal modes and reduced masses of one geometry (translations and
/// rotations projected out; imaginary frequencies shown as negative numbers).
///
/// The Hessian comes from the engine, or with --fd-step from central differences of gradients.
/// Writes PREFIX.xyz (the geometry) and PREFIX.json (printed with --json).
/// Exit status: 0 done, 1 error, 2 usage error.
#[derive(clap::Args, Debug)]
pub struct Args {
    /// Geometry file (XYZ, Å; pseudo-atoms X for model surfaces such as muller-brown).
    pub molecule: PathBuf,
    #[command(flatten)]
    pub common: Common,
    /// Build the Hessian from central differences of gradients with this step (bohr).
    #[arg(long, value_name = "BOHR")]
    pub fd_step: Option<f64>,
    /// Imaginary frequencies with |ν| at or below this (cm-1) are not counted.
    #[arg(long, default_value_t = DEFAULT_IMAG_THRESHOLD_CM1)]
    pub imag_threshold: f64,
}

pub fn run(args: Args) -> i32 {
    crate::cli::evaluate::exit_status(execute(&args))
}

fn execute(a: &Args) -> Result<i32> {
    let src = match a.fd_step {
        None => HessianSource::Engine,
        Some(h) if h.is_finite() && h > 0.0 => HessianSource::FiniteDifference { step: h },
        Some(h) => {
            return Err(Error::invalid(format!(
                "--fd-step must be a positive length in bohr, got {h}"
            )))
        }
    };
    let s = Setup::new(&a.molecule, &a.common)?;
    let x0 = s.molecule.flat();
    let mut algo = HessianCalc::new(x0.clone(), s.frame, src);
    let (v, stats) = block_on(drive(&mut algo, &s.evaluator, &s.system))?;
    let modes = analyze(
        &v.hessian,
        &v.x,
        &s.molecule.masses(),
        s.frame,
        a.imag_threshold,
    )
    .map_err(|e| Error::Algorithm(format!("{}: {e}", a.molecule.display())))?;
    let gmax = max_abs(&crate::geom::project_vector(&v.gradient, &v.x, s.frame));
    let stationary = gmax <= Convergence::NORMAL.max_force;
    let reason = if stationary {
        format!("harmonic analysis at the input geometry (largest gradient component {gmax:.2e})")
    } else {
        format!(
            "harmonic analysis at the input geometry, which is NOT a stationary point (largest \
             gradient component {gmax:.2e} > {:.1e}); relax or refine it first for meaningful \
             frequencies",
            Convergence::NORMAL.max_force
        )
    };
    let o = Outcome {
        converged: true,
        reason: &reason,
        energy: v.energy,
        x: &v.x,
        gradient_evaluations: v.gradient_evaluations,
        hessian_evaluations: v.hessian_evaluations,
        iterations: 0,
        stats,
    };
    let mut rec = s.base_record("modes");
    record::add_outcome(&mut rec, &s, &o);
    rec.insert("stationary".into(), json!(stationary));
    rec.insert("max_gradient".into(), json!(gmax));
    record::add_modes(&mut rec, &s, &modes);
    let prefix = s.prefix(&a.common, "modes");
    let comment = format!(
        "cairn modes: E = {:.10} {}, {} imaginary",
        v.energy,
        s.energy_label(),
        modes.n_imaginary
    );
    let text = record::write_outputs(&s, &prefix, &v.x, &comment, &mut rec)?;
    let mut summary = record::outcome_text(&s, "modes", &o);
    summary.push_str(&record::modes_text(&s, &modes, a.imag_threshold));
    summary.push_str(&format!(
        "wrote         {}.xyz, {}.json\n",
        prefix.display(),
        prefix.display()
    ));
    Ok(record::finish(a.common.json, &text, &summary, true))
}
