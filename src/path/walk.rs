//! Walking uphill from a minimum to a saddle without knowing the product: min-mode following
//! with the dimer method (G. Henkelman and H. Jónsson, J. Chem. Phys. 111, 7010 (1999)).
//!
//! Start: the Hessian at the minimum (one evaluation), projected onto the internal subspace;
//! the chosen mode K (1 = softest) gives the direction; the walk starts `first_step` along it.
//! Each iteration asks for the gradients at the dimer centre and at one end (R₁ = R₀ + δτ) as
//! one batch; the other end is extrapolated, g₂ = 2g₀ − g₁ (forward dimer). The dimer is
//! rotated once per iteration with a trial rotation and the cos 2φ / sin 2φ fit of the
//! curvature (J. Kästner and P. Sherwood, J. Chem. Phys. 128, 014106 (2008), eqs. 9–13;
//! A. Heyden, A. T. Bell and F. J. Keil, J. Chem. Phys. 123, 224101 (2005)). Translation
//! follows the modified force F† of the 1999 paper along τ: with positive curvature a fixed
//! uphill step along τ, with negative curvature a Newton step on |C|. Across τ the walk
//! minimises with a Barzilai–Borwein step (our choice: the 1999 paper drops the perpendicular
//! force while the curvature is positive, which on Müller–Brown lets the walk drift off the
//! valley floor); the whole step is capped at `max_step`.
//! Converged when the largest gradient component is below `gtol` and the curvature is negative.

use super::{gradients, max_abs};
use crate::algo::{AlgoError, Algorithm, Step};
use crate::eval::{Answer, Point, Quantity};
use crate::geom::{self, Frame};
use nalgebra::{DMatrix, DVector};
use serde::{Deserialize, Serialize};

/// Which direction to start the walk along.
#[derive(Debug, Clone, PartialEq)]
pub enum WalkStart {
    /// The K-th softest internal mode of the Hessian at the start (1 = softest).
    Mode(usize),
    /// A given direction (need not be normalised).
    Vector(DVector<f64>),
}

/// Settings of the uphill walk (atomic units; surface units on a model surface).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct WalkOptions {
    /// Dimer half length δ, bohr.
    pub dimer_length: f64,
    /// First displacement from the minimum along the mode, bohr.
    pub first_step: f64,
    /// Uphill step while the curvature is positive, bohr.
    pub uphill_step: f64,
    /// Largest step (norm), bohr.
    pub max_step: f64,
    /// Converged when the largest gradient component is below this, Eh/bohr.
    pub gtol: f64,
    /// Skip the trial rotation when |∇E(R₁) − ∇E(R₀)| across τ, divided by δ (the Hessian
    /// element coupling τ to the rest), is below this, Eh/bohr².
    pub rotation_tol: f64,
    /// Initial Barzilai–Borwein step scale across the mode, bohr²/Eh.
    pub bb_start: f64,
    pub max_iterations: usize,
    /// Start along −mode instead of +mode (the sign of a mode is fixed so that its largest
    /// component is positive).
    pub reverse: bool,
}

impl WalkOptions {
    pub fn molecule() -> Self {
        WalkOptions {
            dimer_length: 0.01,
            first_step: 0.1,
            uphill_step: 0.1,
            max_step: 0.2,
            gtol: 5e-4,
            rotation_tol: 1e-2,
            bb_start: 1.0,
            max_iterations: 300,
            reverse: false,
        }
    }
    pub fn surface() -> Self {
        WalkOptions {
            dimer_length: 1e-3,
            first_step: 0.01,
            uphill_step: 0.02,
            max_step: 0.05,
            gtol: 1e-2,
            rotation_tol: 5.0,
            bb_start: 1e-3,
            max_iterations: 1000,
            reverse: false,
        }
    }
    pub fn for_frame(frame: Frame) -> Self {
        match frame {
            Frame::Molecule => Self::molecule(),
            Frame::Surface => Self::surface(),
        }
    }
}

/// One point of the walk.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct WalkPoint {
    pub x: DVector<f64>,
    pub energy: f64,
    pub curvature: f64,
}

/// The walk's verdict.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct WalkResult {
    /// Saddle guess (the last dimer centre).
    pub x: DVector<f64>,
    pub energy: f64,
    /// Largest gradient component there, Eh/bohr.
    pub gradient_max: f64,
    /// Unit dimer direction: the mode to follow in refinement.
    pub mode: DVector<f64>,
    /// Curvature along `mode`, Eh/bohr².
    pub curvature: f64,
    /// Hessian eigenvalue of the chosen mode at the start, Eh/bohr² (None for a given vector).
    pub start_eigenvalue: Option<f64>,
    pub converged: bool,
    pub reason: String,
    pub iterations: usize,
    pub gradient_evaluations: usize,
    pub hessian_evaluations: usize,
    pub path: Vec<WalkPoint>,
}

#[derive(Debug, Clone)]
enum Phase {
    Start,
    Hessian,
    /// Waiting for [g(R₀), g(R₁)].
    Pair,
    /// Waiting for g at the trial-rotated end.
    Trial {
        theta: DVector<f64>,
        phi1: f64,
        c0: f64,
        dcdphi: f64,
    },
    Finished,
}

/// Min-mode following (dimer) from a minimum, as an ask/tell algorithm.
#[derive(Debug, Clone)]
pub struct Walk {
    opts: WalkOptions,
    frame: Frame,
    start: WalkStart,
    x: DVector<f64>,
    tau: DVector<f64>,
    g0: DVector<f64>,
    g1: DVector<f64>,
    e0: f64,
    curvature: f64,
    start_eigenvalue: Option<f64>,
    phase: Phase,
    iteration: usize,
    grads: usize,
    hessians: usize,
    uphill_sign: f64,
    prev: Option<(DVector<f64>, DVector<f64>)>,
    bb: f64,
    path: Vec<WalkPoint>,
}

/// Orthonormal basis (columns) of the internal subspace at `x`: the complement of
/// translations/rotations (molecules) or of z (surfaces).
pub fn internal_basis(x: &DVector<f64>, frame: Frame) -> DMatrix<f64> {
    let b = geom::external_basis(x, None, frame);
    let n = x.len();
    let mut cands: Vec<DVector<f64>> = (0..b.ncols()).map(|k| b.column(k).clone_owned()).collect();
    let nb = cands.len();
    for i in 0..n {
        let mut e = DVector::zeros(n);
        e[i] = 1.0;
        cands.push(e);
    }
    let all = geom::orthonormalize(cands, 1e-8, n);
    all.columns(nb, all.ncols() - nb).clone_owned()
}

impl Walk {
    pub fn new(
        x0: DVector<f64>,
        frame: Frame,
        start: WalkStart,
        opts: WalkOptions,
    ) -> Result<Self, AlgoError> {
        let n = x0.len();
        if n == 0 || !n.is_multiple_of(3) {
            return Err(AlgoError(format!(
                "walk: coordinates of length {n} are not 3N"
            )));
        }
        if let WalkStart::Vector(v) = &start {
            if v.len() != n || v.norm() == 0.0 {
                return Err(AlgoError(
                    "walk: the start direction must be a non-zero 3N vector".into(),
                ));
            }
        }
        if let WalkStart::Mode(0) = start {
            return Err(AlgoError(
                "walk: modes are counted from 1 (1 = softest)".into(),
            ));
        }
        Ok(Walk {
            opts,
            frame,
            start,
            tau: DVector::zeros(n),
            g0: DVector::zeros(n),
            g1: DVector::zeros(n),
            x: x0,
            e0: f64::NAN,
            curvature: f64::NAN,
            start_eigenvalue: None,
            phase: Phase::Start,
            iteration: 0,
            grads: 0,
            hessians: 0,
            uphill_sign: 1.0,
            prev: None,
            bb: opts.bb_start,
            path: Vec::new(),
        })
    }

    fn project(&self, v: &DVector<f64>) -> DVector<f64> {
        geom::project_vector(v, &self.x, self.frame)
    }

    fn pair_request(&self) -> Step<WalkResult> {
        let r1 = &self.x + &self.tau * self.opts.dimer_length;
        Step::Evaluate(vec![
            Point::new(self.x.clone(), Quantity::Gradient),
            Point::new(r1, Quantity::Gradient),
        ])
    }

    fn begin(&mut self, dir: DVector<f64>) -> Step<WalkResult> {
        let d = self.project(&dir);
        let nrm = d.norm();
        let mut tau = if nrm > 0.0 { d / nrm } else { dir.normalize() };
        if self.opts.reverse {
            tau = -tau;
        }
        self.tau = tau;
        self.x = &self.x + &self.tau * self.opts.first_step;
        self.phase = Phase::Pair;
        self.pair_request()
    }

    fn result(&self, converged: bool, reason: String) -> WalkResult {
        WalkResult {
            x: self.x.clone(),
            energy: self.e0,
            gradient_max: max_abs(&self.project(&self.g0)),
            mode: self.tau.clone(),
            curvature: self.curvature,
            start_eigenvalue: self.start_eigenvalue,
            converged,
            reason,
            iterations: self.iteration,
            gradient_evaluations: self.grads,
            hessian_evaluations: self.hessians,
            path: self.path.clone(),
        }
    }

    /// Translate the dimer with the modified force, using curvature `c` along `tau`.
    fn translate(&mut self) -> Step<WalkResult> {
        let g = self.project(&self.g0);
        let c = self.curvature;
        self.path.push(WalkPoint {
            x: self.x.clone(),
            energy: self.e0,
            curvature: c,
        });
        let gmax = max_abs(&g);
        if c < 0.0 && gmax < self.opts.gtol {
            self.phase = Phase::Finished;
            return Step::Done(self.result(
                true,
                format!(
                    "converged after {} iterations: largest gradient component {gmax:.2e} < {:.2e}, curvature {c:.3e} < 0",
                    self.iteration, self.opts.gtol
                ),
            ));
        }
        if self.iteration >= self.opts.max_iterations {
            self.phase = Phase::Finished;
            return Step::Done(self.result(
                false,
                format!(
                    "not converged within {} iterations: largest gradient component {gmax:.2e} (tolerance {:.2e}), curvature {c:.3e}; the last point is kept as a guess",
                    self.opts.max_iterations, self.opts.gtol
                ),
            ));
        }
        let gpar = g.dot(&self.tau);
        let fperp = -(&g - &self.tau * gpar);
        let along = if c >= 0.0 {
            // Uphill along τ by a fixed step; keep the previous direction when flat.
            if gpar.abs() > 1e-12 {
                self.uphill_sign = gpar.signum();
            }
            &self.tau * (self.uphill_sign * self.opts.uphill_step)
        } else {
            // F† = −g + 2 (g·τ) τ; along τ its component is g·τ: a Newton step on |C|.
            &self.tau * (gpar / c.abs())
        };
        // Across τ: minimise with a Barzilai–Borwein step on F†⊥ = −g⊥.
        if let Some((px, pf)) = &self.prev {
            let dx = &self.x - px;
            let dx = &dx - &self.tau * dx.dot(&self.tau);
            let df = &fperp - pf;
            let denom = -dx.dot(&df);
            if denom > 0.0 {
                self.bb = (dx.dot(&dx) / denom)
                    .clamp(self.opts.bb_start * 0.05, self.opts.bb_start * 20.0);
            }
        }
        self.prev = Some((self.x.clone(), fperp.clone()));
        let step = along + fperp * self.bb;
        let sn = step.norm();
        let step = if sn > self.opts.max_step {
            step * (self.opts.max_step / sn)
        } else {
            step
        };
        self.x += step;
        self.iteration += 1;
        self.phase = Phase::Pair;
        self.pair_request()
    }
}

impl Algorithm for Walk {
    type Verdict = WalkResult;

    fn step(&mut self, answers: Vec<Answer>) -> Result<Step<WalkResult>, AlgoError> {
        let n = self.x.len();
        match std::mem::replace(&mut self.phase, Phase::Finished) {
            Phase::Start => match self.start.clone() {
                WalkStart::Vector(v) => Ok(self.begin(v)),
                WalkStart::Mode(_) => {
                    self.phase = Phase::Hessian;
                    Ok(Step::Evaluate(vec![Point::new(
                        self.x.clone(),
                        Quantity::Hessian,
                    )]))
                }
            },
            Phase::Hessian => {
                let a = answers
                    .into_iter()
                    .next()
                    .ok_or_else(|| AlgoError("walk: no answer for the starting Hessian".into()))?;
                a.validate(Quantity::Hessian, n)
                    .map_err(|e| AlgoError(format!("walk, starting Hessian: {e}")))?;
                let h = a
                    .hessian
                    .ok_or_else(|| AlgoError("walk, starting Hessian: missing".into()))?;
                self.hessians += 1;
                let q = internal_basis(&self.x, self.frame);
                let hint = q.transpose() * &h * &q;
                let hint = (&hint + hint.transpose()) * 0.5;
                let eig = hint.symmetric_eigen();
                let mut order: Vec<usize> = (0..eig.eigenvalues.len()).collect();
                order.sort_by(|&i, &j| eig.eigenvalues[i].total_cmp(&eig.eigenvalues[j]));
                let k = match self.start {
                    WalkStart::Mode(k) => k,
                    WalkStart::Vector(_) => 1,
                };
                let Some(&idx) = order.get(k - 1) else {
                    return Err(AlgoError(format!(
                        "walk: mode {k} asked for, but there are only {} internal modes",
                        order.len()
                    )));
                };
                self.start_eigenvalue = Some(eig.eigenvalues[idx]);
                let mut v = &q * eig.eigenvectors.column(idx);
                // Fix the arbitrary sign: largest component positive.
                let imax = v.iamax();
                if v[imax] < 0.0 {
                    v = -v;
                }
                Ok(self.begin(v))
            }
            Phase::Pair => {
                let eg = gradients(answers, 2, n, &format!("walk iteration {}", self.iteration))?;
                self.grads += 2;
                let mut it = eg.into_iter();
                let (Some((e0, g0)), Some((_, g1))) = (it.next(), it.next()) else {
                    return Err(AlgoError("walk: answers missing".into()));
                };
                self.e0 = e0;
                self.g0 = g0;
                self.g1 = g1;
                let d = self.opts.dimer_length;
                let dg = &self.g1 - &self.g0;
                let c0 = dg.dot(&self.tau) / d;
                // Rotational force direction: −(dg ⊥ τ), projected off the external subspace.
                let perp = self.project(&(&dg - &self.tau * dg.dot(&self.tau)));
                let fr = perp.norm();
                self.curvature = c0;
                if fr / d < self.opts.rotation_tol {
                    return Ok(self.translate());
                }
                let theta = -perp / fr;
                let dcdphi = 2.0 * dg.dot(&theta) / d;
                let phi1 = (0.5 * (dcdphi.abs() / (2.0 * c0.abs().max(1e-12))).atan())
                    .clamp(1e-3, std::f64::consts::FRAC_PI_4);
                let t1 = &self.tau * phi1.cos() + &theta * phi1.sin();
                self.phase = Phase::Trial {
                    theta,
                    phi1,
                    c0,
                    dcdphi,
                };
                Ok(Step::Evaluate(vec![Point::new(
                    &self.x + t1 * d,
                    Quantity::Gradient,
                )]))
            }
            Phase::Trial {
                theta,
                phi1,
                c0,
                dcdphi,
            } => {
                let eg = gradients(
                    answers,
                    1,
                    n,
                    &format!("walk iteration {} (rotation)", self.iteration),
                )?;
                self.grads += 1;
                let (_, g1t) = eg
                    .into_iter()
                    .next()
                    .ok_or_else(|| AlgoError("walk: answer missing".into()))?;
                let d = self.opts.dimer_length;
                let t1 = &self.tau * phi1.cos() + &theta * phi1.sin();
                let c1 = (&g1t - &self.g0).dot(&t1) / d;
                // C(φ) = a0/2 + a1 cos 2φ + b1 sin 2φ (Kästner & Sherwood 2008, eqs. 9–13).
                let b1 = 0.5 * dcdphi;
                let denom = 1.0 - (2.0 * phi1).cos();
                let a1 = (c0 - c1 + b1 * (2.0 * phi1).sin()) / denom;
                let a0 = 2.0 * (c0 - a1);
                let mut phi = 0.5 * (b1 / a1).atan();
                let cf = |p: f64| 0.5 * a0 + a1 * (2.0 * p).cos() + b1 * (2.0 * p).sin();
                if cf(phi) > cf(phi + std::f64::consts::FRAC_PI_2) {
                    phi += std::f64::consts::FRAC_PI_2;
                }
                let cmin = cf(phi);
                if cmin.is_finite() && cmin < c0 {
                    let t = &self.tau * phi.cos() + &theta * phi.sin();
                    self.tau = self.project(&t).normalize();
                    self.curvature = cmin;
                } else if c1 < c0 {
                    self.tau = self.project(&t1).normalize();
                    self.curvature = c1;
                }
                Ok(self.translate())
            }
            Phase::Finished => Err(AlgoError("walk: step called after the verdict".into())),
        }
    }
}
