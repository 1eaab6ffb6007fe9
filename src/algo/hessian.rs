//! Hessians: from the engine, or by central finite differences of gradients (all 2·n displaced
//! gradients asked for as one batch, so they run in parallel).
//!
//! H[:, i] = (g(x + h e_i) − g(x − h e_i)) / 2h, then symmetrised (common practice). On a model
//! surface only the x and y of each point are displaced (z is inert; its rows stay zero).

use super::common::{check_answer, first_non_finite};
use super::{AlgoError, Algorithm, Step};
use crate::eval::{Answer, Point, Quantity};
use crate::geom::Frame;
use nalgebra::{DMatrix, DVector};
use serde::{Deserialize, Serialize};

/// Where Hessians come from.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub enum HessianSource {
    /// Ask the engine (`Quantity::Hessian`).
    Engine,
    /// Central differences of gradients with this displacement (bohr; 0.005 is common).
    FiniteDifference { step: f64 },
}

impl HessianSource {
    /// Default finite-difference displacement, bohr (common practice).
    pub const DEFAULT_FD_STEP: f64 = 0.005;

    /// The coordinates displaced for a finite-difference Hessian.
    fn displaced(n: usize, frame: Frame) -> Vec<usize> {
        match frame {
            Frame::Molecule => (0..n).collect(),
            Frame::Surface => (0..n).filter(|k| k % 3 != 2).collect(),
        }
    }

    /// Points to evaluate for a Hessian at `x`.
    pub fn points(&self, x: &DVector<f64>, frame: Frame) -> Vec<Point> {
        match self {
            HessianSource::Engine => vec![Point::new(x.clone(), Quantity::Hessian)],
            HessianSource::FiniteDifference { step } => {
                let mut pts = Vec::new();
                for k in Self::displaced(x.len(), frame) {
                    for sign in [1.0, -1.0] {
                        let mut xp = x.clone();
                        xp[k] += sign * step;
                        pts.push(Point::new(xp, Quantity::Gradient));
                    }
                }
                pts
            }
        }
    }

    /// How many answers [`points`](Self::points) asks for.
    pub fn count(&self, n: usize, frame: Frame) -> usize {
        match self {
            HessianSource::Engine => 1,
            HessianSource::FiniteDifference { .. } => 2 * Self::displaced(n, frame).len(),
        }
    }

    /// Build the Hessian from the answers to [`points`](Self::points). Returns the symmetric
    /// Hessian and the (gradient, Hessian) evaluation counts.
    pub fn assemble(
        &self,
        n: usize,
        frame: Frame,
        answers: &[Answer],
    ) -> Result<(DMatrix<f64>, usize, usize), AlgoError> {
        if answers.len() != self.count(n, frame) {
            return Err(AlgoError(format!(
                "Hessian: expected {} answers, got {}",
                self.count(n, frame),
                answers.len()
            )));
        }
        let h = match self {
            HessianSource::Engine => {
                check_answer(&answers[0], Quantity::Hessian, n, "Hessian")?;
                let h = answers[0].hessian.clone().unwrap_or_default();
                (h.clone() + h.transpose()) * 0.5
            }
            HessianSource::FiniteDifference { step } => {
                let mut h = DMatrix::zeros(n, n);
                for (j, k) in Self::displaced(n, frame).into_iter().enumerate() {
                    let (ap, am) = (&answers[2 * j], &answers[2 * j + 1]);
                    let what = format!("finite-difference Hessian, coordinate {}", k + 1);
                    check_answer(ap, Quantity::Gradient, n, &what)?;
                    check_answer(am, Quantity::Gradient, n, &what)?;
                    if let (Some(gp), Some(gm)) = (&ap.gradient, &am.gradient) {
                        h.set_column(k, &((gp - gm) / (2.0 * step)));
                    }
                }
                (h.clone() + h.transpose()) * 0.5
            }
        };
        if let Some((i, j)) = first_non_finite(&h) {
            return Err(AlgoError(format!(
                "Hessian entry ({}, {}) is not a finite number; check the engine output",
                i + 1,
                j + 1
            )));
        }
        Ok(match self {
            HessianSource::Engine => (h, 0, 1),
            HessianSource::FiniteDifference { .. } => (h, answers.len(), 0),
        })
    }
}

/// A Hessian (with the energy and gradient at the same point) as an ask/tell algorithm: one
/// batch, the gradient at `x` together with the Hessian points.
#[derive(Debug, Clone, PartialEq)]
pub struct HessianCalc {
    x: DVector<f64>,
    frame: Frame,
    source: HessianSource,
    asked: bool,
}

/// Result of [`HessianCalc`].
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct HessianVerdict {
    pub x: DVector<f64>,
    pub energy: f64,
    pub gradient: DVector<f64>,
    pub hessian: DMatrix<f64>,
    pub gradient_evaluations: usize,
    pub hessian_evaluations: usize,
}

impl HessianCalc {
    pub fn new(x: DVector<f64>, frame: Frame, source: HessianSource) -> HessianCalc {
        HessianCalc {
            x,
            frame,
            source,
            asked: false,
        }
    }
}

impl Algorithm for HessianCalc {
    type Verdict = HessianVerdict;

    fn step(&mut self, answers: Vec<Answer>) -> Result<Step<HessianVerdict>, AlgoError> {
        let n = self.x.len();
        if !self.asked {
            if n == 0 || !n.is_multiple_of(3) || self.x.iter().any(|v| !v.is_finite()) {
                return Err(AlgoError(format!(
                    "Hessian: the geometry must have 3N finite coordinates (got {n})"
                )));
            }
            self.asked = true;
            let mut pts = vec![Point::new(self.x.clone(), Quantity::Gradient)];
            pts.extend(self.source.points(&self.x, self.frame));
            return Ok(Step::Evaluate(pts));
        }
        let Some((first, rest)) = answers.split_first() else {
            return Err(AlgoError("Hessian: no answers".into()));
        };
        check_answer(first, Quantity::Gradient, n, "Hessian, centre point")?;
        let (hessian, ng, nh) = self.source.assemble(n, self.frame, rest)?;
        Ok(Step::Done(HessianVerdict {
            x: self.x.clone(),
            energy: first.energy,
            gradient: first.gradient.clone().unwrap_or_default(),
            hessian,
            gradient_evaluations: ng + 1,
            hessian_evaluations: nh,
        }))
    }
}
