//! `cairn relax`: minimise the energy of one geometry.

use super::record::{self, parse_convergence, Common, Outcome, Setup};
use crate::algo::common::Convergence;
use crate::algo::minimize::{MinOptions, Minimizer};
use crate::driver::{block_on, drive};
use crate::error::Result;
use std::path::PathBuf;

/// Minimise the energy (quasi-Newton: RFO steps in a trust radius, BFGS Hessian updates,
/// translations and rotations projected out).
///
/// Writes PREFIX.xyz (the relaxed geometry) and PREFIX.json (the record; printed with --json).
/// Exit status: 0 converged, 1 error, 2 usage error, 3 not converged (record still written).
#[derive(clap::Args, Debug)]
pub struct Args {
    /// Geometry file (XYZ, Å; pseudo-atoms X for model surfaces such as muller-brown).
    pub molecule: PathBuf,
    #[command(flatten)]
    pub common: Common,
    /// Convergence thresholds: normal (4.5e-4 / 3.0e-4 Eh/bohr max/RMS force, 1.8e-3 /
    /// 1.2e-3 bohr max/RMS step), tight, very-tight.
    #[arg(long, default_value = "normal", value_parser = parse_convergence)]
    pub convergence: Convergence,
    /// Multiply every convergence threshold by this (below 1 tightens, above 1 loosens).
    #[arg(long, default_value_t = 1.0)]
    pub threshold_scale: f64,
    /// Largest number of steps.
    #[arg(long, default_value_t = 200)]
    pub max_steps: usize,
    /// Initial trust radius, bohr (default 0.3; 0.1 surface units on model surfaces).
    #[arg(long)]
    pub trust_radius: Option<f64>,
}

pub fn run(args: Args) -> i32 {
    crate::cli::evaluate::exit_status(execute(&args))
}

fn execute(a: &Args) -> Result<i32> {
    if !(a.threshold_scale.is_finite() && a.threshold_scale > 0.0) {
        return Err(crate::Error::invalid(format!(
            "--threshold-scale must be a positive number, got {}",
            a.threshold_scale
        )));
    }
    let s = Setup::new(&a.molecule, &a.common)?;
    let mut opts = if s.is_surface() {
        MinOptions::for_surface()
    } else {
        MinOptions::default()
    };
    opts.convergence = a.convergence.scaled(a.threshold_scale);
    opts.max_iterations = a.max_steps;
    if let Some(t) = a.trust_radius {
        opts.trust_radius = t;
        opts.max_trust = opts.max_trust.max(t);
    }
    let mut algo = Minimizer::new(s.molecule.flat(), s.frame, opts);
    let (v, stats) = block_on(drive(&mut algo, &s.evaluator, &s.system))?;
    let o = Outcome {
        converged: v.converged,
        reason: &v.reason,
        energy: v.energy,
        x: &v.x,
        gradient_evaluations: v.gradient_evaluations,
        hessian_evaluations: v.hessian_evaluations,
        iterations: v.iterations,
        stats,
    };
    let mut rec = s.base_record("relax");
    record::add_outcome(&mut rec, &s, &o);
    let prefix = s.prefix(&a.common, "relaxed");
    let comment = format!(
        "cairn relax: E = {:.10} {}, {}",
        v.energy,
        s.energy_label(),
        if v.converged {
            "converged"
        } else {
            "not converged"
        }
    );
    let text = record::write_outputs(&s, &prefix, &v.x, &comment, &mut rec)?;
    let mut summary = record::outcome_text(&s, "relax", &o);
    summary.push_str(&format!(
        "wrote         {}.xyz, {}.json\n",
        prefix.display(),
        prefix.display()
    ));
    Ok(record::finish(a.common.json, &text, &summary, v.converged))
}
