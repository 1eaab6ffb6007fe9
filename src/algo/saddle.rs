//! Saddle refinement: Newton–Raphson with the Hessian pseudo-inverse, or P-RFO.
//!
//! Both work in the internal subspace (translations and rotations projected out; on a model
//! surface the inert z) and diagonalise the projected Hessian H = Σ λ_i v_i v_iᵀ, F_i = v_iᵀg.
//!
//! - **Newton–Raphson**: s = −Σ F_i/λ_i v_i over modes with |λ_i| above `eigen_threshold`, zero
//!   along the rest (pseudo-inverse). No step limit unless `newton_max_step` is set. It goes to
//!   the nearest stationary point of any index; the verdict says which index it found.
//! - **P-RFO** (partitioned rational-function optimisation; A. Banerjee, N. Adams, J. Simons,
//!   R. Shepard, J. Phys. Chem. 89, 52 (1985); J. Baker, J. Comput. Chem. 7, 385 (1986)):
//!   maximise along the followed mode k, s_k = −F_k/(λ_k − λ_p) with
//!   λ_p = ½λ_k + ½√(λ_k² + 4F_k²); minimise along the others, s_i = −F_i/(λ_i − λ_n) with λ_n
//!   the lowest eigenvalue of the RFO matrix of the other modes. The whole step is scaled to the
//!   trust radius. The followed mode is the one with the largest overlap with the mode followed
//!   at the previous step (at the start: the lowest, the K-th lowest, or the one closest to a
//!   given vector). The trust radius follows the ratio ρ of actual to predicted energy change:
//!   doubled when 0.75 < ρ < 1.25 and the step used the radius, halved when ρ < 0.25 or ρ > 1.75.
//! - **Hessians**: exact at the start (engine or central finite differences of gradients, one
//!   batch), the Bofill update (J. M. Bofill, Int. J. Quantum Chem. 52, 1 (1994)) in between,
//!   recomputed every N steps (`recompute_every`) and/or when the overlap of the followed mode
//!   with the previous one drops below `recompute_below_overlap`, and (by default) once more at
//!   the converged point, so the verdict's Hessian and index are exact.
//! - **Converged** when max/RMS force and max/RMS step (the step it would take next) are below
//!   the thresholds *and* the Hessian there has exactly one negative eigenvalue (below
//!   −`negative_threshold`). A stationary point of another index is reported, not converged.

use super::common::{
    bofill_update, check_answer, first_non_finite, internal_basis, quadratic_change, rfo_shift,
    shifted_step, sym_eigen, Convergence, ConvergenceReport,
};
use super::hessian::HessianSource;
use super::{AlgoError, Algorithm, Step};
use crate::eval::{Answer, Point, Quantity};
use crate::geom::Frame;
use nalgebra::{DMatrix, DVector};
use serde::{Deserialize, Serialize};

/// Refinement method.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Method {
    Newton,
    Prfo,
}

/// Which Hessian mode P-RFO maximises along at the start.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub enum FollowMode {
    /// The mode of the lowest eigenvalue.
    Lowest,
    /// The k-th lowest mode, counting from 0 (0 = lowest).
    Index(usize),
    /// The mode with the largest overlap with this Cartesian vector (3N), e.g. a band tangent.
    Vector(DVector<f64>),
}

/// Options of the saddle refinement. Lengths in bohr (surface units on model surfaces).
#[derive(Debug, Clone, PartialEq)]
pub struct SaddleOptions {
    pub method: Method,
    pub follow: FollowMode,
    pub hessian: HessianSource,
    /// Recompute the exact Hessian every N steps (None: only at the start and on overlap
    /// collapse; Some(1): every step).
    pub recompute_every: Option<usize>,
    /// Recompute the exact Hessian when the followed mode's overlap with the previous one falls
    /// below this (default Some(0.5); None: never for this reason).
    pub recompute_below_overlap: Option<f64>,
    pub convergence: Convergence,
    /// Steps before giving up (default 100).
    pub max_iterations: usize,
    /// P-RFO initial trust radius (default 0.2 bohr).
    pub trust_radius: f64,
    /// Smallest trust radius (default 1e-3 bohr).
    pub min_trust: f64,
    /// Largest trust radius (default 0.3 bohr, as in Baker 1986).
    pub max_trust: f64,
    /// Newton: modes with |λ| at or below this are left out of the pseudo-inverse (default
    /// 1e-8). P-RFO uses it too, to ignore numerically zero modes when choosing the start mode.
    pub eigen_threshold: f64,
    /// Newton: cap on the step length (default None, plain Newton–Raphson).
    pub newton_max_step: Option<f64>,
    /// An eigenvalue below −this counts as negative (Eh/bohr², default 1e-5).
    pub negative_threshold: f64,
    /// Recompute the exact Hessian at the converged point if the current one is an update
    /// (default true).
    pub final_exact_hessian: bool,
}

impl Default for SaddleOptions {
    fn default() -> Self {
        SaddleOptions {
            method: Method::Prfo,
            follow: FollowMode::Lowest,
            hessian: HessianSource::Engine,
            recompute_every: None,
            recompute_below_overlap: Some(0.5),
            convergence: Convergence::default(),
            max_iterations: 100,
            trust_radius: 0.2,
            min_trust: 1e-3,
            max_trust: 0.3,
            eigen_threshold: 1e-8,
            newton_max_step: None,
            negative_threshold: 1e-5,
            final_exact_hessian: true,
        }
    }
}

/// The outcome of a saddle refinement.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct SaddleVerdict {
    pub x: DVector<f64>,
    pub energy: f64,
    /// Gradient at `x` (unprojected).
    pub gradient: DVector<f64>,
    /// The last Hessian (Cartesian); exact if `hessian_exact`.
    pub hessian: DMatrix<f64>,
    pub hessian_exact: bool,
    /// True only at a first-order saddle (stationary, exactly one negative eigenvalue).
    pub converged: bool,
    /// Force and step criteria met (a stationary point of some index).
    pub stationary: bool,
    pub reason: String,
    pub iterations: usize,
    pub gradient_evaluations: usize,
    pub hessian_evaluations: usize,
    /// Eigenvalues of the projected Hessian at `x`, ascending.
    pub eigenvalues: Vec<f64>,
    /// Number of eigenvalues below −negative_threshold at `x`.
    pub n_negative: usize,
    /// Number of negative eigenvalues of the start Hessian.
    pub initial_negative: usize,
    /// The followed mode at the end (Cartesian, unit length).
    pub followed_mode: DVector<f64>,
    /// Overlap of the followed mode with the previous one at the last step.
    pub last_overlap: f64,
    pub last_check: Option<ConvergenceReport>,
}

#[derive(Debug, Clone, PartialEq)]
enum Pending {
    Start,
    Initial,
    Refresh,
    Final,
    Trial {
        x: DVector<f64>,
        predicted: f64,
        step_norm: f64,
        with_hessian: bool,
    },
    Finished,
}

/// The saddle refinement as an ask/tell state machine. See the module documentation.
#[derive(Debug, Clone, PartialEq)]
pub struct SaddleSearch {
    opts: SaddleOptions,
    frame: Frame,
    x: DVector<f64>,
    energy: f64,
    gradient: DVector<f64>,
    hessian: DMatrix<f64>,
    hessian_exact: bool,
    /// Followed mode (Cartesian, unit) from the previous step, if any.
    followed: Option<DVector<f64>>,
    last_overlap: f64,
    /// True when a Hessian was recomputed at the current point because of an overlap collapse
    /// (so it is not asked again at the same point).
    refreshed_here: bool,
    trust: f64,
    pending: Pending,
    iterations: usize,
    gradient_evaluations: usize,
    hessian_evaluations: usize,
    initial_negative: usize,
    last_check: Option<ConvergenceReport>,
    stationary: bool,
}

/// What the analysis of the current point gives.
struct Analysis {
    d: DMatrix<f64>,
    lams: Vec<f64>,
    v: DMatrix<f64>,
    g_int: DVector<f64>,
    h_int: DMatrix<f64>,
}

impl SaddleOptions {
    /// Defaults scaled for the built-in 2-D model surfaces (Müller–Brown: features about 0.5
    /// surface units across): trust radius 0.1 (at most 0.1, at least 1e-4).
    pub fn for_surface() -> SaddleOptions {
        SaddleOptions {
            trust_radius: 0.1,
            max_trust: 0.1,
            min_trust: 1e-4,
            ..SaddleOptions::default()
        }
    }
}

impl SaddleSearch {
    pub fn new(x0: DVector<f64>, frame: Frame, opts: SaddleOptions) -> SaddleSearch {
        let n = x0.len();
        SaddleSearch {
            trust: opts.trust_radius,
            opts,
            frame,
            x: x0,
            energy: f64::NAN,
            gradient: DVector::zeros(n),
            hessian: DMatrix::zeros(n, n),
            hessian_exact: false,
            followed: None,
            last_overlap: 1.0,
            refreshed_here: false,
            pending: Pending::Start,
            iterations: 0,
            gradient_evaluations: 0,
            hessian_evaluations: 0,
            initial_negative: 0,
            last_check: None,
            stationary: false,
        }
    }

    fn analyse(&self) -> Analysis {
        let d = internal_basis(&self.x, self.frame);
        let g_int = d.transpose() * &self.gradient;
        let h_int = d.transpose() * &self.hessian * &d;
        let (lams, v) = sym_eigen(&h_int);
        Analysis {
            d,
            lams,
            v,
            g_int,
            h_int,
        }
    }

    fn count_negative(&self, lams: &[f64]) -> usize {
        lams.iter()
            .filter(|l| **l < -self.opts.negative_threshold)
            .count()
    }

    fn verdict(&mut self, converged: bool, mut reason: String) -> Step<SaddleVerdict> {
        let has_modes = self.x.len() > 3 || self.frame == Frame::Surface;
        if self.initial_negative != 1
            && has_modes
            && self.hessian_evaluations + self.gradient_evaluations > 1
        {
            reason.push_str(&format!(
                " (note: the start Hessian had {} negative eigenvalues, not 1)",
                self.initial_negative
            ));
        }
        self.pending = Pending::Finished;
        let a = self.analyse();
        let n_negative = self.count_negative(&a.lams);
        Step::Done(SaddleVerdict {
            x: self.x.clone(),
            energy: self.energy,
            gradient: self.gradient.clone(),
            hessian: self.hessian.clone(),
            hessian_exact: self.hessian_exact,
            converged,
            stationary: self.stationary,
            reason,
            iterations: self.iterations,
            gradient_evaluations: self.gradient_evaluations,
            hessian_evaluations: self.hessian_evaluations,
            eigenvalues: a.lams,
            n_negative,
            initial_negative: self.initial_negative,
            followed_mode: self
                .followed
                .clone()
                .unwrap_or_else(|| DVector::zeros(self.x.len())),
            last_overlap: self.last_overlap,
            last_check: self.last_check,
        })
    }

    /// Verdict at a stationary point with an exact (or final) Hessian.
    fn stationary_verdict(&mut self) -> Step<SaddleVerdict> {
        self.stationary = true;
        let a = self.analyse();
        let nneg = self.count_negative(&a.lams);
        let report = self.last_check.map(|r| r.describe()).unwrap_or_default();
        let exact = if self.hessian_exact {
            ""
        } else {
            " (updated Hessian, not recomputed)"
        };
        if nneg == 1 {
            self.verdict(
                true,
                format!(
                    "converged to a first-order saddle after {} steps: {report}{exact}",
                    self.iterations
                ),
            )
        } else {
            let what = match nneg {
                0 => "a minimum (no negative Hessian eigenvalue)".to_string(),
                k => format!("a saddle of order {k} ({k} negative Hessian eigenvalues)"),
            };
            self.verdict(
                false,
                format!(
                    "not converged: reached a stationary point that is {what}, not a \
                     first-order saddle{exact}; start from a better guess or follow another \
                     mode"
                ),
            )
        }
    }

    fn hessian_points(&self, x: &DVector<f64>) -> Vec<Point> {
        self.opts.hessian.points(x, self.frame)
    }

    fn take_hessian(&mut self, answers: &[Answer]) -> Result<(), AlgoError> {
        let (h, ng, nh) = self
            .opts
            .hessian
            .assemble(self.x.len(), self.frame, answers)?;
        self.hessian = h;
        self.hessian_exact = true;
        self.gradient_evaluations += ng;
        self.hessian_evaluations += nh;
        Ok(())
    }

    /// Choose the followed mode index in the current eigenbasis.
    fn choose_mode(&mut self, a: &Analysis) -> Result<usize, AlgoError> {
        let m = a.lams.len();
        let cart = |k: usize| -> DVector<f64> { &a.d * a.v.column(k) };
        let best_overlap = |r: &DVector<f64>| -> (usize, f64) {
            let rn = r.norm();
            let mut best = (0, -1.0);
            for k in 0..m {
                let o = if rn > 0.0 {
                    (cart(k).dot(r) / rn).abs()
                } else {
                    0.0
                };
                if o > best.1 {
                    best = (k, o);
                }
            }
            best
        };
        if let Some(prev) = &self.followed {
            let (k, o) = best_overlap(prev);
            self.last_overlap = o;
            return Ok(k);
        }
        let k = match &self.opts.follow {
            FollowMode::Lowest => 0,
            FollowMode::Index(k) => {
                if *k >= m {
                    return Err(AlgoError(format!(
                        "saddle refinement: mode {} asked for, but there are only {m} internal \
                         modes (counting from 0 = lowest)",
                        k
                    )));
                }
                *k
            }
            FollowMode::Vector(v) => {
                if v.len() != self.x.len() || v.iter().any(|c| !c.is_finite()) {
                    return Err(AlgoError(format!(
                        "saddle refinement: the mode to follow has {} components, expected {} \
                         finite numbers",
                        v.len(),
                        self.x.len()
                    )));
                }
                let vi = a.d.transpose() * v;
                if vi.norm() <= 1e-8 * v.norm().max(1e-300) {
                    return Err(AlgoError(
                        "saddle refinement: the mode to follow is a pure translation/rotation \
                         (nothing left after projecting them out); give an internal motion"
                            .into(),
                    ));
                }
                let (k, o) = best_overlap(&(&a.d * vi));
                self.last_overlap = o;
                k
            }
        };
        Ok(k)
    }

    /// From the current point (gradient and Hessian known): test convergence or step.
    fn advance(&mut self) -> Result<Step<SaddleVerdict>, AlgoError> {
        if let Some((i, j)) = first_non_finite(&self.hessian) {
            return Err(AlgoError(format!(
                "saddle refinement: Hessian entry ({}, {}) is not a finite number at step {}; \
                 check the engine output",
                i + 1,
                j + 1,
                self.iterations
            )));
        }
        let a = self.analyse();
        let m = a.lams.len();
        if m == 0 {
            return Ok(self.verdict(
                false,
                "not converged: no internal degrees of freedom (e.g. a single atom), so there \
                 is no saddle to find"
                    .into(),
            ));
        }
        let k = self.choose_mode(&a)?;
        if let Some(thr) = self.opts.recompute_below_overlap {
            if self.opts.method == Method::Prfo
                && self.last_overlap < thr
                && !self.hessian_exact
                && !self.refreshed_here
            {
                self.refreshed_here = true;
                self.pending = Pending::Refresh;
                return Ok(Step::Evaluate(self.hessian_points(&self.x)));
            }
        }
        self.followed = Some(&a.d * a.v.column(k));
        let f: Vec<f64> = (a.v.transpose() * &a.g_int).iter().copied().collect();
        let mut s_eig = vec![0.0; m];
        match self.opts.method {
            Method::Newton => {
                for i in 0..m {
                    if a.lams[i].abs() > self.opts.eigen_threshold {
                        s_eig[i] = -f[i] / a.lams[i];
                    }
                }
            }
            Method::Prfo => {
                let (lk, fk) = (a.lams[k], f[k]);
                let lp = 0.5 * lk + 0.5 * (lk * lk + 4.0 * fk * fk).sqrt();
                if (lk - lp).abs() > 1e-300 {
                    s_eig[k] = -fk / (lk - lp);
                }
                let others: Vec<usize> = (0..m).filter(|&i| i != k).collect();
                let lo: Vec<f64> = others.iter().map(|&i| a.lams[i]).collect();
                let fo: Vec<f64> = others.iter().map(|&i| f[i]).collect();
                let ln = rfo_shift(&lo, &fo);
                for (j, si) in shifted_step(&lo, &fo, ln).into_iter().enumerate() {
                    s_eig[others[j]] = si;
                }
            }
        }
        let mut s_int = &a.v * DVector::from_vec(s_eig);
        let limit = match self.opts.method {
            Method::Newton => self.opts.newton_max_step,
            Method::Prfo => Some(self.trust),
        };
        let norm = s_int.norm();
        if let Some(lim) = limit {
            if norm > lim {
                s_int *= lim / norm;
            }
        }
        let predicted = quadratic_change(&a.g_int, &a.h_int, &s_int);
        let s = &a.d * &s_int;
        let gp = &a.d * &a.g_int;
        let report = self.opts.convergence.check(&gp, &s);
        self.last_check = Some(report);
        if report.met {
            self.stationary = true;
            if self.opts.final_exact_hessian && !self.hessian_exact {
                self.pending = Pending::Final;
                return Ok(Step::Evaluate(self.hessian_points(&self.x)));
            }
            return Ok(self.stationary_verdict());
        }
        if self.iterations >= self.opts.max_iterations {
            let nneg = self.count_negative(&a.lams);
            return Ok(self.verdict(
                false,
                format!(
                    "not converged: step limit {} reached ({}; {nneg} negative Hessian \
                     eigenvalues); restart from the last geometry or raise the step limit",
                    self.opts.max_iterations,
                    report.describe()
                ),
            ));
        }
        self.iterations += 1;
        let xt = &self.x + &s;
        if xt.iter().any(|v| !v.is_finite()) {
            return Err(AlgoError(format!(
                "saddle refinement: step {} produced a non-finite geometry",
                self.iterations
            )));
        }
        let with_hessian = self
            .opts
            .recompute_every
            .is_some_and(|nv| nv > 0 && self.iterations.is_multiple_of(nv));
        let mut pts = vec![Point::new(xt.clone(), Quantity::Gradient)];
        if with_hessian {
            pts.extend(self.hessian_points(&xt));
        }
        self.pending = Pending::Trial {
            x: xt,
            predicted,
            step_norm: s.norm(),
            with_hessian,
        };
        Ok(Step::Evaluate(pts))
    }
}

impl Algorithm for SaddleSearch {
    type Verdict = SaddleVerdict;

    fn step(&mut self, answers: Vec<Answer>) -> Result<Step<SaddleVerdict>, AlgoError> {
        let n = self.x.len();
        match std::mem::replace(&mut self.pending, Pending::Finished) {
            Pending::Start => {
                super::common::check_start(&self.x, "saddle refinement", "the guess")?;
                let mut pts = vec![Point::new(self.x.clone(), Quantity::Gradient)];
                pts.extend(self.hessian_points(&self.x));
                self.pending = Pending::Initial;
                Ok(Step::Evaluate(pts))
            }
            Pending::Initial => {
                let Some((first, rest)) = answers.split_first() else {
                    return Err(AlgoError("saddle refinement: no answers".into()));
                };
                check_answer(first, Quantity::Gradient, n, "saddle refinement, guess")?;
                self.gradient_evaluations += 1;
                self.energy = first.energy;
                self.gradient = first.gradient.clone().unwrap_or_default();
                self.take_hessian(rest)?;
                let a = self.analyse();
                self.initial_negative = self.count_negative(&a.lams);
                self.advance()
            }
            Pending::Refresh => {
                self.take_hessian(&answers)?;
                self.advance()
            }
            Pending::Final => {
                self.take_hessian(&answers)?;
                Ok(self.stationary_verdict())
            }
            Pending::Trial {
                x,
                predicted,
                step_norm,
                with_hessian,
            } => {
                let Some((first, rest)) = answers.split_first() else {
                    return Err(AlgoError("saddle refinement: no answers".into()));
                };
                let what = format!("saddle refinement, step {}", self.iterations);
                check_answer(first, Quantity::Gradient, n, &what)?;
                self.gradient_evaluations += 1;
                let g_new = first.gradient.clone().unwrap_or_default();
                let s = &x - &self.x;
                let y = &g_new - &self.gradient;
                let actual = first.energy - self.energy;
                if self.opts.method == Method::Prfo && predicted.abs() > 1e-14 {
                    let rho = actual / predicted;
                    if rho > 0.75 && rho < 1.25 && step_norm > 0.8 * self.trust {
                        self.trust = (2.0 * self.trust).min(self.opts.max_trust);
                    } else if !(0.25..=1.75).contains(&rho) {
                        self.trust = (0.5 * self.trust).max(self.opts.min_trust);
                    }
                }
                self.x = x;
                self.energy = first.energy;
                self.gradient = g_new;
                self.refreshed_here = false;
                if with_hessian {
                    self.take_hessian(rest)?;
                } else {
                    bofill_update(&mut self.hessian, &s, &y);
                    self.hessian = (&self.hessian + self.hessian.transpose()) * 0.5;
                    self.hessian_exact = false;
                }
                self.advance()
            }
            Pending::Finished => Err(AlgoError(
                "saddle refinement: step called after the verdict was given".into(),
            )),
        }
    }
}
