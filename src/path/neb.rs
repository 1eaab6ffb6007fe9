//! Nudged elastic band with the improved tangent and a climbing image.
//!
//! - Improved tangent and spring force: G. Henkelman and H. Jónsson, J. Chem. Phys. 113, 9978
//!   (2000), eqs. 8–12: the tangent points to the higher neighbour, energy-weighted at extrema;
//!   the spring force is k (|R_{i+1} − R_i| − |R_i − R_{i−1}|) τ.
//! - Climbing image: G. Henkelman, B. P. Uberuaga and H. Jónsson, J. Chem. Phys. 113, 9901
//!   (2000): the highest image feels −∇E + 2 (∇E·τ) τ and no spring.
//! - Optimiser: FIRE on all interior images at once ([`super::fire`]).
//!
//! Every iteration asks for the gradients of all moving images as one batch (the first also
//! asks for the two ends). The band converges when the largest component of the perpendicular
//! gradient on every non-climbing image is below `perp_tol` and, with climbing, the largest
//! component of the climbing image's full gradient is below `climb_tol`.

use super::fire::{Fire, FireOptions};
use super::{gradients, max_abs};
use crate::algo::{AlgoError, Algorithm, Step};
use crate::eval::{Answer, Point, Quantity};
use crate::geom::{self, Frame};
use nalgebra::DVector;
use serde::{Deserialize, Serialize};

/// Settings of a band. Forces and tolerances in Eh/bohr (surface units for model surfaces).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct NebOptions {
    /// Spring constant k, Eh/bohr².
    pub spring: f64,
    /// Use a climbing image.
    pub climbing: bool,
    /// Converged when the largest perpendicular gradient component is below this.
    pub perp_tol: f64,
    /// ... and the climbing image's largest gradient component is below this.
    pub climb_tol: f64,
    /// Climbing switches on once the largest perpendicular component is below this ...
    pub climb_start: f64,
    /// ... or after this many iterations, whichever comes first.
    pub climb_after: usize,
    /// Step budget (band iterations).
    pub max_iterations: usize,
    pub fire: FireOptions,
}

impl NebOptions {
    /// Defaults for molecules (atomic units).
    pub fn molecule() -> Self {
        NebOptions {
            spring: 0.02,
            climbing: true,
            perp_tol: 5e-3,
            climb_tol: 2.5e-3,
            climb_start: 2e-2,
            climb_after: 30,
            max_iterations: 500,
            fire: FireOptions {
                dt_start: 1.0,
                dt_max: 5.0,
                max_atom_step: 0.2,
            },
        }
    }

    /// Defaults for 2-D model surfaces (Müller–Brown scale: energies ~100, curvatures ~1000).
    pub fn surface() -> Self {
        NebOptions {
            spring: 100.0,
            climbing: true,
            perp_tol: 0.5,
            climb_tol: 0.1,
            climb_start: 5.0,
            climb_after: 50,
            max_iterations: 2000,
            fire: FireOptions {
                dt_start: 0.002,
                dt_max: 0.01,
                max_atom_step: 0.01,
            },
        }
    }

    pub fn for_frame(frame: Frame) -> Self {
        match frame {
            Frame::Molecule => Self::molecule(),
            Frame::Surface => Self::surface(),
        }
    }
}

/// Convergence figures of one band iteration.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct BandIteration {
    pub iteration: usize,
    /// Largest perpendicular gradient component over non-climbing images, Eh/bohr.
    pub max_perp: f64,
    /// Largest gradient component of the climbing image, when climbing.
    pub climb_grad: Option<f64>,
    /// Energy of the highest interior image, Eh.
    pub highest_energy: f64,
}

/// The band's verdict: plain data for the CLI and the study runner.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct BandResult {
    /// All images, ends included (flat coordinates).
    pub images: Vec<DVector<f64>>,
    /// Energy of every image, Eh.
    pub energies: Vec<f64>,
    /// Index (into `images`) of the highest interior image: the saddle guess.
    pub highest: usize,
    /// Unit tangent at the highest image: the mode to follow in refinement.
    pub tangent: DVector<f64>,
    /// Whether the highest image was the climbing image at the end.
    pub climbing: bool,
    pub converged: bool,
    /// Why the band stopped, in words.
    pub reason: String,
    pub iterations: usize,
    pub gradient_evaluations: usize,
    pub max_perp: f64,
    pub climb_grad: Option<f64>,
    pub history: Vec<BandIteration>,
}

/// The nudged elastic band as an ask/tell algorithm.
#[derive(Debug, Clone)]
pub struct Neb {
    opts: NebOptions,
    frame: Frame,
    images: Vec<DVector<f64>>,
    energies: Vec<f64>,
    gradients: Vec<DVector<f64>>,
    fire: Fire,
    iteration: usize,
    climbing_on: bool,
    started: bool,
    evaluations: usize,
    history: Vec<BandIteration>,
}

/// Forces and figures of the band in its current state.
struct BandForces {
    /// NEB force on each interior image (concatenated).
    force: DVector<f64>,
    tangents: Vec<DVector<f64>>,
    max_perp: f64,
    climb: Option<(usize, f64)>,
    highest: usize,
}

impl Neb {
    /// A band through `images` (ends included, at least one interior image).
    pub fn new(
        images: Vec<DVector<f64>>,
        frame: Frame,
        opts: NebOptions,
    ) -> Result<Self, AlgoError> {
        if images.len() < 3 {
            return Err(AlgoError(format!(
                "a band needs at least one image between the ends, got {} geometries",
                images.len()
            )));
        }
        let n = images[0].len();
        if n == 0 || images.iter().any(|x| x.len() != n) {
            return Err(AlgoError("band images differ in size".into()));
        }
        let interior = images.len() - 2;
        Ok(Neb {
            opts,
            frame,
            energies: vec![f64::NAN; images.len()],
            gradients: vec![DVector::zeros(n); images.len()],
            images,
            fire: Fire::new(interior * n, opts.fire),
            iteration: 0,
            climbing_on: false,
            started: false,
            evaluations: 0,
            history: Vec::new(),
        })
    }

    pub fn images(&self) -> &[DVector<f64>] {
        &self.images
    }

    fn n(&self) -> usize {
        self.images[0].len()
    }

    /// Improved tangent at interior image i (Henkelman & Jónsson 2000, eqs. 8–11).
    fn tangent(&self, i: usize) -> DVector<f64> {
        let e = &self.energies;
        let tp = &self.images[i + 1] - &self.images[i];
        let tm = &self.images[i] - &self.images[i - 1];
        let (ep, e0, em) = (e[i + 1], e[i], e[i - 1]);
        let t = if ep > e0 && e0 > em {
            tp
        } else if ep < e0 && e0 < em {
            tm
        } else {
            let dmax = (ep - e0).abs().max((em - e0).abs());
            let dmin = (ep - e0).abs().min((em - e0).abs());
            if ep > em {
                tp * dmax + tm * dmin
            } else {
                tp * dmin + tm * dmax
            }
        };
        // Rigid rotation/translation between neighbours is not motion along the path: keep
        // the tangent in the internal subspace of this image.
        let t = geom::project_vector(&t, &self.images[i], self.frame);
        let nrm = t.norm();
        if nrm > 0.0 {
            t / nrm
        } else {
            let d = &self.images[i + 1] - &self.images[i - 1];
            let nd = d.norm().max(f64::MIN_POSITIVE);
            d / nd
        }
    }

    fn highest_interior(&self) -> usize {
        let mut best = 1;
        for i in 1..self.images.len() - 1 {
            if self.energies[i] > self.energies[best] {
                best = i;
            }
        }
        best
    }

    fn forces(&self) -> BandForces {
        let m = self.images.len();
        let n = self.n();
        let highest = self.highest_interior();
        let ci = (self.opts.climbing && self.climbing_on).then_some(highest);
        let mut force = DVector::zeros((m - 2) * n);
        let mut tangents = Vec::with_capacity(m - 2);
        let mut max_perp = 0.0_f64;
        let mut climb = None;
        for i in 1..m - 1 {
            let tau = self.tangent(i);
            let g = &self.gradients[i];
            let gpar = g.dot(&tau);
            let f = if ci == Some(i) {
                climb = Some((i, max_abs(g)));
                -g + &tau * (2.0 * gpar)
            } else {
                let gperp = g - &tau * gpar;
                max_perp = max_perp.max(max_abs(&gperp));
                let dp = (&self.images[i + 1] - &self.images[i]).norm();
                let dm = (&self.images[i] - &self.images[i - 1]).norm();
                -gperp + &tau * (self.opts.spring * (dp - dm))
            };
            let f = geom::project_vector(&f, &self.images[i], self.frame);
            force.rows_mut((i - 1) * n, n).copy_from(&f);
            tangents.push(tau);
        }
        BandForces {
            force,
            tangents,
            max_perp,
            climb,
            highest,
        }
    }

    fn verdict(&self, bf: &BandForces, converged: bool, reason: String) -> BandResult {
        BandResult {
            images: self.images.clone(),
            energies: self.energies.clone(),
            highest: bf.highest,
            tangent: bf.tangents[bf.highest - 1].clone(),
            climbing: bf.climb.is_some(),
            converged,
            reason,
            iterations: self.iteration,
            gradient_evaluations: self.evaluations,
            max_perp: bf.max_perp,
            climb_grad: bf.climb.map(|c| c.1),
            history: self.history.clone(),
        }
    }

    /// With fresh energies and gradients: check convergence, or move the images one FIRE step.
    fn advance(&mut self) -> Option<BandResult> {
        let mut bf = self.forces();
        if self.opts.climbing
            && !self.climbing_on
            && (bf.max_perp < self.opts.climb_start || self.iteration >= self.opts.climb_after)
        {
            self.climbing_on = true;
            self.fire.reset_velocity();
            bf = self.forces();
        }
        self.history.push(BandIteration {
            iteration: self.iteration,
            max_perp: bf.max_perp,
            climb_grad: bf.climb.map(|c| c.1),
            highest_energy: self.energies[bf.highest],
        });
        let perp_ok = bf.max_perp < self.opts.perp_tol;
        let converged = if self.opts.climbing {
            perp_ok && bf.climb.is_some_and(|(_, g)| g < self.opts.climb_tol)
        } else {
            perp_ok
        };
        if converged {
            let reason = format!(
                "converged after {} iterations: largest perpendicular gradient {:.2e} < {:.2e}{}",
                self.iteration,
                bf.max_perp,
                self.opts.perp_tol,
                bf.climb
                    .map(|(_, g)| format!(
                        ", climbing image gradient {g:.2e} < {:.2e}",
                        self.opts.climb_tol
                    ))
                    .unwrap_or_default()
            );
            return Some(self.verdict(&bf, true, reason));
        }
        if self.iteration >= self.opts.max_iterations {
            let reason = format!(
                "not converged within the step budget of {} iterations: largest perpendicular gradient {:.2e} (tolerance {:.2e}){}; raise the budget or start from a better path",
                self.opts.max_iterations,
                bf.max_perp,
                self.opts.perp_tol,
                bf.climb
                    .map(|(_, g)| format!(
                        ", climbing image gradient {g:.2e} (tolerance {:.2e})",
                        self.opts.climb_tol
                    ))
                    .unwrap_or_default()
            );
            return Some(self.verdict(&bf, false, reason));
        }
        let dx = self.fire.step(&bf.force);
        let n = self.n();
        let m = self.images.len();
        for i in 1..m - 1 {
            let d = dx.rows((i - 1) * n, n).clone_owned();
            self.images[i] += d;
        }
        self.iteration += 1;
        None
    }

    /// Relax the band with an in-process function `f(image index, coords) -> (E, ∇E)` (used by
    /// IDPP, whose target surface differs per image). Returns the verdict.
    pub fn relax_with(
        &mut self,
        mut f: impl FnMut(usize, &DVector<f64>) -> (f64, DVector<f64>),
    ) -> BandResult {
        for i in 0..self.images.len() {
            let (e, g) = f(i, &self.images[i]);
            self.energies[i] = e;
            self.gradients[i] = g;
        }
        loop {
            if let Some(v) = self.advance() {
                return v;
            }
            for i in 1..self.images.len() - 1 {
                let (e, g) = f(i, &self.images[i]);
                self.energies[i] = e;
                self.gradients[i] = g;
            }
        }
    }
}

impl Algorithm for Neb {
    type Verdict = BandResult;

    fn step(&mut self, answers: Vec<Answer>) -> Result<Step<BandResult>, AlgoError> {
        let m = self.images.len();
        let n = self.n();
        if !self.started {
            self.started = true;
            return Ok(Step::Evaluate(
                self.images
                    .iter()
                    .map(|x| Point::new(x.clone(), Quantity::Gradient))
                    .collect(),
            ));
        }
        let first = self.energies[0].is_nan();
        let what = format!("band iteration {}", self.iteration);
        if first {
            let eg = gradients(answers, m, n, &what)?;
            self.evaluations += m;
            for (i, (e, g)) in eg.into_iter().enumerate() {
                self.energies[i] = e;
                self.gradients[i] = g;
            }
        } else {
            let eg = gradients(answers, m - 2, n, &what)?;
            self.evaluations += m - 2;
            for (k, (e, g)) in eg.into_iter().enumerate() {
                self.energies[k + 1] = e;
                self.gradients[k + 1] = g;
            }
        }
        if let Some(v) = self.advance() {
            return Ok(Step::Done(v));
        }
        Ok(Step::Evaluate(
            self.images[1..m - 1]
                .iter()
                .map(|x| Point::new(x.clone(), Quantity::Gradient))
                .collect(),
        ))
    }
}
