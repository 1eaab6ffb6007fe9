//! `cairn saddle`: refine a transition-state guess to a first-order saddle point.

use super::record::{self, parse_convergence, Common, Outcome, Setup};
use crate::algo::common::Convergence;
use crate::algo::freq::{analyze, DEFAULT_IMAG_THRESHOLD_CM1};
use crate::algo::hessian::HessianSource;
use crate::algo::saddle::{FollowMode, Method, SaddleOptions, SaddleSearch};
use crate::driver::{block_on, drive};
use crate::error::{Error, Result};
use crate::molecule::Molecule;
use nalgebra::DVector;
use serde_json::json;
use std::path::PathBuf;

#[derive(clap::ValueEnum, Clone, Copy, Debug, PartialEq, Eq)]
pub enum MethodArg {
    /// Partitioned rational-function optimisation (maximise along one mode, minimise the rest).
    Prfo,
    /// Newton–Raphson with the Hessian pseudo-inverse (goes to the nearest stationary point).
    Newton,
}

/// Refine a transition-state guess to a first-order saddle point (P-RFO or Newton–Raphson).
///
/// The Hessian is exact at the start (from the engine, or with --fd-step by finite differences
/// of gradients), Bofill-updated between steps, and recomputed at the end, where the harmonic
/// frequencies are reported. Writes PREFIX.xyz and PREFIX.json (printed with --json).
/// Exit status: 0 converged to a first-order saddle, 1 error, 2 usage error, 3 not converged
/// (or a stationary point of another order; the record is still written).
#[derive(clap::Args, Debug)]
pub struct Args {
    /// Guess geometry (XYZ, Å; pseudo-atoms X for model surfaces such as muller-brown).
    pub guess: PathBuf,
    #[command(flatten)]
    pub common: Common,
    /// Refinement method.
    #[arg(long, value_enum, default_value_t = MethodArg::Prfo)]
    pub method: MethodArg,
    /// Hessian mode to climb along at the start, counting from 1 = lowest (P-RFO).
    #[arg(long, value_name = "K", default_value_t = 1, value_parser = clap::value_parser!(u64).range(1..))]
    pub follow_mode: u64,
    /// Follow the Hessian mode closest to this vector at the start (P-RFO): a file as written
    /// next to a saddle guess by `cairn band`, `scan` or `walk` (saddle_guess_mode.txt: lines
    /// starting with # are comments, then one line per atom `Symbol dx dy dz`, in the order of
    /// the guess). Overrides --follow-mode.
    #[arg(long, value_name = "FILE")]
    pub follow_file: Option<PathBuf>,
    /// Build Hessians from central differences of gradients with this step (bohr) instead of
    /// asking the engine (all displacements run as one batch; see --jobs).
    #[arg(long, value_name = "BOHR")]
    pub fd_step: Option<f64>,
    /// Recompute the exact Hessian every N steps (default: only at the start, when the
    /// followed mode changes character, and at the end).
    #[arg(long, value_name = "N")]
    pub recompute_every: Option<usize>,
    /// Convergence thresholds: normal (4.5e-4 / 3.0e-4 Eh/bohr max/RMS force, 1.8e-3 /
    /// 1.2e-3 bohr max/RMS step), tight, very-tight.
    #[arg(long, default_value = "normal", value_parser = parse_convergence)]
    pub convergence: Convergence,
    /// Multiply every convergence threshold by this (below 1 tightens, above 1 loosens).
    #[arg(long, default_value_t = 1.0)]
    pub threshold_scale: f64,
    /// Largest number of steps.
    #[arg(long, default_value_t = 100)]
    pub max_steps: usize,
    /// Initial trust radius, bohr (default 0.2, at most 0.3; 0.1 on model surfaces).
    #[arg(long)]
    pub trust_radius: Option<f64>,
    /// Imaginary frequencies with |ν| at or below this (cm-1) are not counted.
    #[arg(long, default_value_t = DEFAULT_IMAG_THRESHOLD_CM1)]
    pub imag_threshold: f64,
}

/// Read a mode file (`# comment` lines, then `Symbol dx dy dz` per atom) for `molecule`.
pub fn read_mode(path: &std::path::Path, molecule: &Molecule) -> Result<DVector<f64>> {
    let name = path.display().to_string();
    let text = std::fs::read_to_string(path)
        .map_err(|e| Error::io(format!("cannot read the mode file {name}"), e))?;
    let mut v = Vec::with_capacity(3 * molecule.len());
    let mut atom = 0;
    for (ln, line) in text.lines().enumerate() {
        let t = line.trim();
        if t.is_empty() || t.starts_with('#') {
            continue;
        }
        let f: Vec<&str> = t.split_whitespace().collect();
        let Some(expected) = molecule.elements.get(atom) else {
            return Err(Error::parse(
                &name,
                ln + 1,
                format!(
                    "more atom lines than the {} atoms of the guess",
                    molecule.len()
                ),
            ));
        };
        if f.len() < 4 {
            return Err(Error::parse(&name, ln + 1, "expected `Symbol dx dy dz`"));
        }
        if !f[0].eq_ignore_ascii_case(expected.symbol()) {
            return Err(Error::parse(
                &name,
                ln + 1,
                format!(
                    "atom {} is {} in the guess but {} here; the mode must follow the guess's atom order",
                    atom + 1,
                    expected.symbol(),
                    f[0]
                ),
            ));
        }
        for c in &f[1..4] {
            match c.parse::<f64>() {
                Ok(x) if x.is_finite() => v.push(x),
                _ => {
                    return Err(Error::parse(
                        &name,
                        ln + 1,
                        format!("'{c}' is not a finite number"),
                    ))
                }
            }
        }
        atom += 1;
    }
    if atom != molecule.len() {
        return Err(Error::parse(
            &name,
            text.lines().count().max(1),
            format!(
                "{atom} atom lines, but the guess has {} atoms",
                molecule.len()
            ),
        ));
    }
    let v = DVector::from_vec(v);
    if v.norm() == 0.0 {
        return Err(Error::invalid(format!("{name}: the mode is all zeros")));
    }
    Ok(v)
}

pub fn run(args: Args) -> i32 {
    crate::cli::evaluate::exit_status(execute(&args))
}

fn execute(a: &Args) -> Result<i32> {
    if !(a.threshold_scale.is_finite() && a.threshold_scale > 0.0) {
        return Err(Error::invalid(format!(
            "--threshold-scale must be a positive number, got {}",
            a.threshold_scale
        )));
    }
    if let Some(h) = a.fd_step {
        if !(h.is_finite() && h > 0.0) {
            return Err(Error::invalid(format!(
                "--fd-step must be a positive length in bohr, got {h}"
            )));
        }
    }
    let s = Setup::new(&a.guess, &a.common)?;
    let mut opts = if s.is_surface() {
        SaddleOptions::for_surface()
    } else {
        SaddleOptions::default()
    };
    opts.method = match a.method {
        MethodArg::Prfo => Method::Prfo,
        MethodArg::Newton => Method::Newton,
    };
    let k = usize::try_from(a.follow_mode)
        .unwrap_or(1)
        .saturating_sub(1);
    opts.follow = if k == 0 {
        FollowMode::Lowest
    } else {
        FollowMode::Index(k)
    };
    if let Some(f) = &a.follow_file {
        opts.follow = FollowMode::Vector(read_mode(f, &s.molecule)?);
    }
    if let Some(h) = a.fd_step {
        opts.hessian = HessianSource::FiniteDifference { step: h };
    }
    opts.recompute_every = a.recompute_every.filter(|n| *n > 0);
    opts.convergence = a.convergence.scaled(a.threshold_scale);
    opts.max_iterations = a.max_steps;
    if let Some(t) = a.trust_radius {
        opts.trust_radius = t;
        opts.max_trust = opts.max_trust.max(t);
    }
    let mut algo = SaddleSearch::new(s.molecule.flat(), s.frame, opts);
    let (v, stats) = block_on(drive(&mut algo, &s.evaluator, &s.system))
        .map_err(|e| Error::Algorithm(format!("{}: saddle refinement: {e}", a.guess.display())))?;
    let modes = analyze(
        &v.hessian,
        &v.x,
        &s.molecule.masses(),
        s.frame,
        a.imag_threshold,
    )
    .map_err(|e| Error::Algorithm(format!("{}: {e}", a.guess.display())))?;
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
    let mut rec = s.base_record("saddle");
    record::add_outcome(&mut rec, &s, &o);
    rec.insert(
        "method".into(),
        json!(match a.method {
            MethodArg::Prfo => "prfo",
            MethodArg::Newton => "newton",
        }),
    );
    rec.insert("stationary".into(), json!(v.stationary));
    rec.insert("hessian_exact".into(), json!(v.hessian_exact));
    rec.insert("n_negative_eigenvalues".into(), json!(v.n_negative));
    rec.insert(
        "initial_negative_eigenvalues".into(),
        json!(v.initial_negative),
    );
    record::add_modes(&mut rec, &s, &modes);
    let prefix = s.prefix(&a.common, "saddle");
    let comment = format!(
        "cairn saddle: E = {:.10} {}, {}, {} imaginary",
        v.energy,
        s.energy_label(),
        if v.converged {
            "first-order saddle"
        } else {
            "not converged"
        },
        modes.n_imaginary
    );
    let text = record::write_outputs(&s, &prefix, &v.x, &comment, &mut rec)?;
    let mut summary = record::outcome_text(&s, "saddle", &o);
    if !v.hessian_exact {
        summary.push_str("note          frequencies from an updated (not recomputed) Hessian\n");
    }
    summary.push_str(&record::modes_text(&s, &modes, a.imag_threshold));
    summary.push_str(&format!(
        "wrote         {}.xyz, {}.json\n",
        prefix.display(),
        prefix.display()
    ));
    Ok(record::finish(a.common.json, &text, &summary, v.converged))
}
