//! Relaxed coordinate scans: drive a bond length, angle, dihedral (or, on a model surface, one
//! Cartesian component) through a range while everything else relaxes; 1-D or a 2-D grid.
//!
//! Constraint method: a harmonic restraint ½ k (q − q₀)² added to the engine's energy and
//! gradient before they reach the minimiser ([`crate::algo::minimize::Minimizer`], wrapped by
//! [`Restrained`]). A stiff restraint leaves a small offset q − q₀ ≈ F_q / k; the target is
//! then shifted by that offset and the point relaxed again (at most `max_corrections` times)
//! until the reached value is within `tol_length` / `tol_angle` of the nominal one. The
//! profile reports the engine energy (restraint removed) and the reached value. Each point
//! starts from the relaxed neighbour, moved linearly along the coordinate's gradient to the
//! new value; 2-D grids are walked row by row in alternating (snake) order, so every start is
//! a grid neighbour.
//!
//! Saddle guess: in 1-D the highest interior local maximum of the profile (with the
//! coordinate's gradient as the mode to follow); in 2-D the lowest grid point that is a
//! maximum along one axis and a minimum along the other.

use super::coords::Coord;
use crate::algo::minimize::{MinOptions, MinVerdict, Minimizer};
use crate::algo::{AlgoError, Algorithm, Step};
use crate::eval::{Answer, Point};
use crate::geom::Frame;
use nalgebra::DVector;
use serde::{Deserialize, Serialize};

/// A harmonic restraint ½ k (q − target)².
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Restraint {
    pub coord: Coord,
    pub target: f64,
    /// Eh/bohr² or Eh/rad².
    pub k: f64,
}

/// Energy and gradient of a set of restraints at x.
pub fn restraint_energy(rs: &[Restraint], x: &DVector<f64>) -> (f64, DVector<f64>) {
    let mut e = 0.0;
    let mut g = DVector::zeros(x.len());
    for r in rs {
        let (q, b) = r.coord.value_and_gradient(x);
        let d = r.coord.diff(q, r.target);
        e += 0.5 * r.k * d * d;
        g += b * (r.k * d);
    }
    (e, g)
}

/// A minimiser whose answers get the restraint energies and gradients added.
/// Its verdict's energy and gradient include the restraints.
#[derive(Debug, Clone)]
pub struct Restrained {
    inner: Minimizer,
    restraints: Vec<Restraint>,
    asked: Vec<Point>,
}

impl Restrained {
    pub fn new(
        x0: DVector<f64>,
        frame: Frame,
        restraints: Vec<Restraint>,
        opts: MinOptions,
    ) -> Self {
        Restrained {
            inner: Minimizer::new(x0, frame, opts),
            restraints,
            asked: Vec::new(),
        }
    }
}

impl Algorithm for Restrained {
    type Verdict = MinVerdict;

    fn step(&mut self, mut answers: Vec<Answer>) -> Result<Step<MinVerdict>, AlgoError> {
        for (a, p) in answers.iter_mut().zip(&self.asked) {
            let (e, g) = restraint_energy(&self.restraints, &p.coords);
            a.energy += e;
            if let Some(ag) = a.gradient.as_mut() {
                if ag.len() == g.len() {
                    *ag += &g;
                }
            }
            if a.hessian.is_some() {
                return Err(AlgoError(
                    "restrained minimisation: Hessians with restraints are not supported".into(),
                ));
            }
        }
        match self.inner.step(answers)? {
            Step::Evaluate(pts) => {
                self.asked = pts.clone();
                Ok(Step::Evaluate(pts))
            }
            Step::Done(v) => Ok(Step::Done(v)),
        }
    }
}

/// Settings of a scan.
#[derive(Debug, Clone, PartialEq)]
pub struct ScanOptions {
    /// Restraint constant for lengths, Eh/bohr².
    pub k_length: f64,
    /// Restraint constant for angles and dihedrals, Eh/rad².
    pub k_angle: f64,
    /// Accept a point when the reached length is this close to the nominal one, bohr.
    pub tol_length: f64,
    /// ... or the reached angle, rad.
    pub tol_angle: f64,
    pub max_corrections: usize,
    pub min: MinOptions,
}

impl ScanOptions {
    pub fn molecule() -> Self {
        ScanOptions {
            k_length: 1.0,
            k_angle: 0.5,
            tol_length: 2e-3,
            tol_angle: 2e-3,
            max_corrections: 3,
            min: MinOptions::default(),
        }
    }
    pub fn surface() -> Self {
        ScanOptions {
            k_length: 2e4,
            k_angle: 2e4,
            tol_length: 1e-4,
            tol_angle: 1e-4,
            max_corrections: 3,
            min: MinOptions::for_surface(),
        }
    }
    pub fn for_frame(frame: Frame) -> Self {
        match frame {
            Frame::Molecule => Self::molecule(),
            Frame::Surface => Self::surface(),
        }
    }
}

/// One driven coordinate and its values (bohr or rad).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ScanAxis {
    pub coord: Coord,
    pub values: Vec<f64>,
}

impl ScanAxis {
    /// `points` evenly spaced values from `from` to `to` (both included).
    pub fn range(coord: Coord, from: f64, to: f64, points: usize) -> ScanAxis {
        let values = if points <= 1 {
            vec![from]
        } else {
            (0..points)
                .map(|k| from + (to - from) * k as f64 / (points - 1) as f64)
                .collect()
        };
        ScanAxis { coord, values }
    }
}

/// One relaxed point.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ScanPoint {
    /// Grid indices (one per axis).
    pub index: Vec<usize>,
    /// Nominal values (bohr or rad).
    pub target: Vec<f64>,
    /// Values reached after relaxation.
    pub reached: Vec<f64>,
    /// Engine energy (restraints removed), Eh.
    pub energy: f64,
    pub x: DVector<f64>,
    pub converged: bool,
    pub reason: String,
}

/// The scan's verdict.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ScanResult {
    pub axes: Vec<ScanAxis>,
    /// Row-major over the grid (the last axis runs fastest).
    pub points: Vec<ScanPoint>,
    /// Index into `points` of the saddle guess, if the profile has one.
    pub saddle_guess: Option<usize>,
    /// Unit mode to follow at the saddle guess (1-D: the driven coordinate's gradient).
    pub guess_mode: Option<DVector<f64>>,
    /// Why there is no guess, or how it was chosen.
    pub guess_note: String,
    pub all_converged: bool,
    pub gradient_evaluations: usize,
}

/// A relaxed scan as an ask/tell algorithm.
#[derive(Debug, Clone)]
pub struct Scan {
    frame: Frame,
    axes: Vec<ScanAxis>,
    opts: ScanOptions,
    /// Grid points in the order they are relaxed.
    order: Vec<Vec<usize>>,
    cur: usize,
    corrections: usize,
    targets: Vec<f64>,
    start: DVector<f64>,
    inner: Option<Restrained>,
    results: Vec<Option<ScanPoint>>,
    grads: usize,
}

fn flat_index(axes: &[ScanAxis], idx: &[usize]) -> usize {
    match idx {
        [i] => *i,
        [i, j] => i * axes[1].values.len() + j,
        _ => 0,
    }
}

impl Scan {
    /// A 1-D (one axis) or 2-D (two axes) relaxed scan starting from geometry `x0`.
    pub fn new(
        x0: DVector<f64>,
        frame: Frame,
        axes: Vec<ScanAxis>,
        opts: ScanOptions,
    ) -> Result<Self, AlgoError> {
        if axes.is_empty() || axes.len() > 2 {
            return Err(AlgoError(format!(
                "a scan drives one or two coordinates, not {}",
                axes.len()
            )));
        }
        let n_atoms = x0.len() / 3;
        for a in &axes {
            a.coord
                .check(n_atoms)
                .map_err(|e| AlgoError(format!("{}: {e}", a.coord.label())))?;
            if a.values.is_empty() {
                return Err(AlgoError(format!("{}: no values to scan", a.coord.label())));
            }
        }
        let order: Vec<Vec<usize>> = if axes.len() == 1 {
            (0..axes[0].values.len()).map(|i| vec![i]).collect()
        } else {
            let (n1, n2) = (axes[0].values.len(), axes[1].values.len());
            let mut o = Vec::with_capacity(n1 * n2);
            for i in 0..n1 {
                for jj in 0..n2 {
                    let j = if i % 2 == 0 { jj } else { n2 - 1 - jj };
                    o.push(vec![i, j]);
                }
            }
            o
        };
        let total = order.len();
        Ok(Scan {
            frame,
            opts,
            order,
            cur: 0,
            corrections: 0,
            targets: Vec::new(),
            start: x0,
            inner: None,
            results: vec![None; total],
            grads: 0,
            axes,
        })
    }

    fn nominal(&self, idx: &[usize]) -> Vec<f64> {
        self.axes
            .iter()
            .zip(idx)
            .map(|(a, &i)| a.values[i])
            .collect()
    }

    fn k_of(&self, c: &Coord) -> f64 {
        if c.is_angle() {
            self.opts.k_angle
        } else {
            self.opts.k_length
        }
    }

    fn restraints(&self) -> Vec<Restraint> {
        self.axes
            .iter()
            .zip(&self.targets)
            .map(|(a, &t)| Restraint {
                coord: a.coord,
                target: t,
                k: self.k_of(&a.coord),
            })
            .collect()
    }

    /// Start relaxing the current grid point from `self.start`.
    fn begin_point(&mut self, first_try: bool) {
        let idx = self.order[self.cur].clone();
        if first_try {
            self.targets = self.nominal(&idx);
            self.corrections = 0;
            // Move linearly along each coordinate's gradient toward its value.
            for (a, &t) in self.axes.iter().zip(&self.targets) {
                let (q, b) = a.coord.value_and_gradient(&self.start);
                let bb = b.norm_squared();
                if bb > 0.0 {
                    let d = a.coord.diff(t, q);
                    self.start = &self.start + b * (d / bb);
                }
            }
        }
        let opts = ScanOptions {
            min: MinOptions {
                project_external: self
                    .axes
                    .iter()
                    .all(|a| !matches!(a.coord, Coord::Cartesian(..))),
                ..self.opts.min.clone()
            },
            ..self.opts.clone()
        };
        self.inner = Some(Restrained::new(
            self.start.clone(),
            self.frame,
            self.restraints(),
            opts.min,
        ));
    }

    fn finish(&self) -> ScanResult {
        let points: Vec<ScanPoint> = self.results.iter().flatten().cloned().collect();
        let all_converged = points.iter().all(|p| p.converged);
        let (guess, note) = self.saddle_guess(&points);
        let guess_mode = guess.and_then(|g| {
            (self.axes.len() == 1).then(|| {
                let (_, b) = self.axes[0].coord.value_and_gradient(&points[g].x);
                let n = b.norm();
                if n > 0.0 {
                    b / n
                } else {
                    b
                }
            })
        });
        ScanResult {
            axes: self.axes.clone(),
            points,
            saddle_guess: guess,
            guess_mode,
            guess_note: note,
            all_converged,
            gradient_evaluations: self.grads,
        }
    }

    fn saddle_guess(&self, pts: &[ScanPoint]) -> (Option<usize>, String) {
        let e: Vec<f64> = pts.iter().map(|p| p.energy).collect();
        if self.axes.len() == 1 {
            let best = (1..e.len().saturating_sub(1))
                .filter(|&i| e[i] > e[i - 1] && e[i] > e[i + 1])
                .max_by(|&a, &b| e[a].total_cmp(&e[b]));
            match best {
                Some(i) => (Some(i), "highest interior maximum of the profile".into()),
                None => (
                    None,
                    "the profile has no interior maximum: the barrier lies outside the range; widen it".into(),
                ),
            }
        } else {
            let (n1, n2) = (self.axes[0].values.len(), self.axes[1].values.len());
            let at = |i: usize, j: usize| e[i * n2 + j];
            let mut best: Option<usize> = None;
            for i in 1..n1.saturating_sub(1) {
                for j in 1..n2.saturating_sub(1) {
                    let c = at(i, j);
                    let max1 = c > at(i - 1, j) && c > at(i + 1, j);
                    let min1 = c < at(i - 1, j) && c < at(i + 1, j);
                    let max2 = c > at(i, j - 1) && c > at(i, j + 1);
                    let min2 = c < at(i, j - 1) && c < at(i, j + 1);
                    if (max1 && min2) || (min1 && max2) {
                        let k = i * n2 + j;
                        if best.is_none_or(|b| e[k] < e[b]) {
                            best = Some(k);
                        }
                    }
                }
            }
            match best {
                Some(k) => (Some(k), "lowest grid point that is a maximum along one axis and a minimum along the other".into()),
                None => (None, "no grid point is a maximum along one axis and a minimum along the other; widen or refine the grid".into()),
            }
        }
    }
}

impl Algorithm for Scan {
    type Verdict = ScanResult;

    fn step(&mut self, answers: Vec<Answer>) -> Result<Step<ScanResult>, AlgoError> {
        if self.inner.is_none() {
            self.begin_point(true);
        }
        let mut answers = answers;
        loop {
            let label = self.order[self.cur]
                .iter()
                .map(|i| (i + 1).to_string())
                .collect::<Vec<_>>()
                .join(",");
            let Some(inner) = self.inner.as_mut() else {
                return Err(AlgoError("scan: no minimisation running".into()));
            };
            self.grads += answers.len();
            let step = inner
                .step(std::mem::take(&mut answers))
                .map_err(|e| AlgoError(format!("scan point {label}: {}", e.0)))?;
            match step {
                Step::Evaluate(p) => return Ok(Step::Evaluate(p)),
                Step::Done(v) => {
                    let idx = self.order[self.cur].clone();
                    let nominal = self.nominal(&idx);
                    let reached: Vec<f64> = self.axes.iter().map(|a| a.coord.value(&v.x)).collect();
                    let off: Vec<f64> = self
                        .axes
                        .iter()
                        .zip(nominal.iter().zip(&reached))
                        .map(|(a, (n, r))| a.coord.diff(*n, *r))
                        .collect();
                    let within = self.axes.iter().zip(&off).all(|(a, d)| {
                        d.abs()
                            <= if a.coord.is_angle() {
                                self.opts.tol_angle
                            } else {
                                self.opts.tol_length
                            }
                    });
                    self.start = v.x.clone();
                    if !within && self.corrections < self.opts.max_corrections {
                        self.corrections += 1;
                        for (t, d) in self.targets.iter_mut().zip(&off) {
                            *t += d;
                        }
                        self.begin_point(false);
                        continue;
                    }
                    let (er, _) = restraint_energy(&self.restraints(), &v.x);
                    let mut reason = v.reason.clone();
                    if !within {
                        reason.push_str(&format!(
                            "; the restraint left the coordinate {:.2e} from its value after {} corrections",
                            off.iter().fold(0.0_f64, |m, d| m.max(d.abs())),
                            self.corrections
                        ));
                    }
                    let k = flat_index(&self.axes, &idx);
                    self.results[k] = Some(ScanPoint {
                        index: idx,
                        target: nominal,
                        reached,
                        energy: v.energy - er,
                        x: v.x,
                        converged: v.converged && within,
                        reason,
                    });
                    self.cur += 1;
                    if self.cur >= self.order.len() {
                        return Ok(Step::Done(self.finish()));
                    }
                    self.begin_point(true);
                }
            }
        }
    }
}
