//! Minimiser: quasi-Newton with a trust radius.
//!
//! - Step: rational-function optimisation (RFO; A. Banerjee, N. Adams, J. Simons, R. Shepard,
//!   J. Phys. Chem. 89, 52 (1985)) in the internal subspace (translations and rotations
//!   projected out; for a model surface the inert z), scaled down to the trust radius.
//! - Hessian: BFGS update (common practice; R. Fletcher, *Practical Methods of Optimization*,
//!   1987, from memory), starting from a given matrix or from the identity rescaled after the
//!   first step by yᵀy / yᵀs (J. Nocedal, S. J. Wright, *Numerical Optimization*, eq. 6.20 in
//!   the 2nd edition, from memory), or from an engine Hessian if the options ask for one.
//! - Trust radius from the ratio ρ of actual to predicted energy change: doubled when ρ > 0.75
//!   and the step used the full radius, quartered when ρ < 0.25; a step that raises the energy
//!   is rejected and retried with a shorter one.
//! - Converged when max and RMS force and max and RMS step (the step it would take next) are all
//!   below the thresholds ([`Convergence`], "normal" set by default).
//!
//! Asks only for `Quantity::Gradient`, one point per step (plus one Hessian at the start if
//! `exact_initial_hessian` is set).

use super::common::{
    bfgs_update, check_answer, internal_basis, quadratic_change, rfo_shift, shifted_step,
    sym_eigen, Convergence, ConvergenceReport,
};
use super::{AlgoError, Algorithm, Step};
use crate::eval::{Answer, Point, Quantity};
use crate::geom::Frame;
use nalgebra::{DMatrix, DVector};
use serde::{Deserialize, Serialize};

/// Options of the minimiser. Lengths in bohr (surface units on model surfaces).
#[derive(Debug, Clone, PartialEq)]
pub struct MinOptions {
    pub convergence: Convergence,
    /// Steps before giving up (default 200).
    pub max_iterations: usize,
    /// Initial trust radius (default 0.3).
    pub trust_radius: f64,
    /// Smallest trust radius (default 1e-4); at this radius steps are accepted even uphill.
    pub min_trust: f64,
    /// Largest trust radius (default 1.0).
    pub max_trust: f64,
    /// Starting Hessian (Cartesian, Eh/bohr²). None: scaled identity.
    pub initial_hessian: Option<DMatrix<f64>>,
    /// Ask the engine for a Hessian at the start (default false: gradients only).
    pub exact_initial_hessian: bool,
    /// Remove translations and rotations from gradient and step (default true). Turn off when
    /// the energy is not invariant to rigid motion (e.g. Cartesian position restraints).
    pub project_external: bool,
}

impl Default for MinOptions {
    fn default() -> Self {
        MinOptions {
            convergence: Convergence::default(),
            max_iterations: 200,
            trust_radius: 0.3,
            min_trust: 1e-4,
            max_trust: 1.0,
            initial_hessian: None,
            exact_initial_hessian: false,
            project_external: true,
        }
    }
}

impl MinOptions {
    /// Defaults scaled for the built-in 2-D model surfaces: trust radius 0.1 (at most 0.3).
    pub fn for_surface() -> MinOptions {
        MinOptions {
            trust_radius: 0.1,
            max_trust: 0.3,
            ..MinOptions::default()
        }
    }
}

/// The outcome of a minimisation.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct MinVerdict {
    /// Final geometry (the lowest accepted point).
    pub x: DVector<f64>,
    pub energy: f64,
    /// Gradient at `x` (unprojected), Eh/bohr.
    pub gradient: DVector<f64>,
    pub converged: bool,
    /// Why it stopped, in words (starts with "converged" or "not converged").
    pub reason: String,
    /// Steps taken (accepted and rejected).
    pub iterations: usize,
    pub gradient_evaluations: usize,
    pub hessian_evaluations: usize,
    /// The last convergence measurement.
    pub last_check: Option<ConvergenceReport>,
}

#[derive(Debug, Clone, PartialEq)]
enum Pending {
    Start,
    Initial {
        with_hessian: bool,
    },
    Trial {
        x: DVector<f64>,
        s: DVector<f64>,
        predicted: f64,
    },
    Finished,
}

/// The minimiser as an ask/tell state machine. See the module documentation.
#[derive(Debug, Clone, PartialEq)]
pub struct Minimizer {
    opts: MinOptions,
    frame: Frame,
    x: DVector<f64>,
    energy: f64,
    gradient: DVector<f64>,
    hessian: DMatrix<f64>,
    /// True while the Hessian is the unscaled identity guess.
    identity_guess: bool,
    trust: f64,
    pending: Pending,
    iterations: usize,
    gradient_evaluations: usize,
    hessian_evaluations: usize,
    last_check: Option<ConvergenceReport>,
}

impl Minimizer {
    pub fn new(x0: DVector<f64>, frame: Frame, opts: MinOptions) -> Minimizer {
        let n = x0.len();
        let (hessian, identity_guess) = match &opts.initial_hessian {
            Some(h) if h.nrows() == n && h.ncols() == n => (h.clone(), false),
            _ => (DMatrix::identity(n, n), true),
        };
        Minimizer {
            trust: opts.trust_radius,
            opts,
            frame,
            x: x0,
            energy: f64::NAN,
            gradient: DVector::zeros(n),
            hessian,
            identity_guess,
            pending: Pending::Start,
            iterations: 0,
            gradient_evaluations: 0,
            hessian_evaluations: 0,
            last_check: None,
        }
    }

    fn basis(&self) -> DMatrix<f64> {
        if self.opts.project_external {
            internal_basis(&self.x, self.frame)
        } else {
            match self.frame {
                Frame::Molecule => DMatrix::identity(self.x.len(), self.x.len()),
                Frame::Surface => internal_basis(&self.x, self.frame),
            }
        }
    }

    fn verdict(&mut self, converged: bool, reason: String) -> Step<MinVerdict> {
        self.pending = Pending::Finished;
        Step::Done(MinVerdict {
            x: self.x.clone(),
            energy: self.energy,
            gradient: self.gradient.clone(),
            converged,
            reason,
            iterations: self.iterations,
            gradient_evaluations: self.gradient_evaluations,
            hessian_evaluations: self.hessian_evaluations,
            last_check: self.last_check,
        })
    }

    /// From the current accepted point: test convergence, else propose the next trial point.
    fn propose(&mut self) -> Step<MinVerdict> {
        let d = self.basis();
        if d.ncols() == 0 {
            return self.verdict(
                true,
                "converged: nothing to optimise (no internal degrees of freedom, e.g. a single atom)"
                    .into(),
            );
        }
        let g_int = d.transpose() * &self.gradient;
        let h_int = d.transpose() * &self.hessian * &d;
        let (lams, v) = sym_eigen(&h_int);
        let f: Vec<f64> = (v.transpose() * &g_int).iter().copied().collect();
        let shift = rfo_shift(&lams, &f);
        let mut s_int = &v * DVector::from_vec(shifted_step(&lams, &f, shift));
        let norm = s_int.norm();
        if norm > self.trust {
            s_int *= self.trust / norm;
        }
        let predicted = quadratic_change(&g_int, &h_int, &s_int);
        let s = &d * &s_int;
        let gp = &d * &g_int;
        let report = self.opts.convergence.check(&gp, &s);
        self.last_check = Some(report);
        if report.met {
            return self.verdict(
                true,
                format!(
                    "converged after {} steps: {}",
                    self.iterations,
                    report.describe()
                ),
            );
        }
        if self.iterations >= self.opts.max_iterations {
            return self.verdict(
                false,
                format!(
                    "not converged: step limit {} reached ({}); restart from the last geometry \
                     or raise the step limit",
                    self.opts.max_iterations,
                    report.describe()
                ),
            );
        }
        self.iterations += 1;
        let xt = &self.x + &s;
        self.pending = Pending::Trial {
            x: xt.clone(),
            s,
            predicted,
        };
        Step::Evaluate(vec![Point::new(xt, Quantity::Gradient)])
    }
}

impl Algorithm for Minimizer {
    type Verdict = MinVerdict;

    fn step(&mut self, answers: Vec<Answer>) -> Result<Step<MinVerdict>, AlgoError> {
        let n = self.x.len();
        match std::mem::replace(&mut self.pending, Pending::Finished) {
            Pending::Start => {
                super::common::check_start(&self.x, "minimiser", "the start geometry")?;
                let mut pts = vec![Point::new(self.x.clone(), Quantity::Gradient)];
                if self.opts.exact_initial_hessian {
                    pts.push(Point::new(self.x.clone(), Quantity::Hessian));
                }
                self.pending = Pending::Initial {
                    with_hessian: self.opts.exact_initial_hessian,
                };
                Ok(Step::Evaluate(pts))
            }
            Pending::Initial { with_hessian } => {
                let want = 1 + usize::from(with_hessian);
                if answers.len() != want {
                    return Err(AlgoError(format!(
                        "minimiser: expected {want} answers, got {}",
                        answers.len()
                    )));
                }
                check_answer(&answers[0], Quantity::Gradient, n, "minimiser, start point")?;
                self.gradient_evaluations += 1;
                self.energy = answers[0].energy;
                self.gradient = answers[0].gradient.clone().unwrap_or_default();
                if with_hessian {
                    check_answer(
                        &answers[1],
                        Quantity::Hessian,
                        n,
                        "minimiser, start Hessian",
                    )?;
                    self.hessian_evaluations += 1;
                    if let Some(h) = &answers[1].hessian {
                        self.hessian = (h + h.transpose()) * 0.5;
                        self.identity_guess = false;
                    }
                }
                Ok(self.propose())
            }
            Pending::Trial { x, s, predicted } => {
                if answers.len() != 1 {
                    return Err(AlgoError(format!(
                        "minimiser: expected 1 answer, got {}",
                        answers.len()
                    )));
                }
                let what = format!("minimiser, step {}", self.iterations);
                check_answer(&answers[0], Quantity::Gradient, n, &what)?;
                self.gradient_evaluations += 1;
                let e_new = answers[0].energy;
                let g_new = answers[0].gradient.clone().unwrap_or_default();
                let y = &g_new - &self.gradient;
                if self.identity_guess {
                    let ys = y.dot(&s);
                    if ys > 0.0 {
                        self.hessian = DMatrix::identity(n, n) * (y.dot(&y) / ys);
                        self.identity_guess = false;
                    }
                }
                bfgs_update(&mut self.hessian, &s, &y);
                let actual = e_new - self.energy;
                let snorm = s.norm();
                let rho = if predicted.abs() > 0.0 {
                    actual / predicted
                } else {
                    1.0
                };
                let uphill = actual > 0.0 && self.trust > self.opts.min_trust;
                if uphill {
                    // Reject: stay, shorten.
                    self.trust = (0.25 * snorm).max(self.opts.min_trust);
                } else {
                    if rho > 0.75 && snorm > 0.8 * self.trust {
                        self.trust = (2.0 * self.trust).min(self.opts.max_trust);
                    } else if rho < 0.25 {
                        self.trust = (0.25 * self.trust).max(self.opts.min_trust);
                    }
                    self.x = x;
                    self.energy = e_new;
                    self.gradient = g_new;
                }
                Ok(self.propose())
            }
            Pending::Finished => Err(AlgoError(
                "minimiser: step called after the verdict was given".into(),
            )),
        }
    }
}
