//! What an algorithm asks an engine for, and what comes back. All in atomic units.

use nalgebra::{DMatrix, DVector};
use serde::{Deserialize, Serialize};

/// The quantity asked for at a geometry.
///
/// `Gradient` returns energy and gradient. `Hessian` returns energy and Hessian, and the
/// gradient when the engine happens to give it; an algorithm that needs both at one geometry asks
/// for both (two evaluations, stored under two keys).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Quantity {
    Energy,
    Gradient,
    Hessian,
}

impl Quantity {
    pub fn as_str(self) -> &'static str {
        match self {
            Quantity::Energy => "energy",
            Quantity::Gradient => "gradient",
            Quantity::Hessian => "hessian",
        }
    }
}

/// One request: coordinates (flat, 3N, bohr or surface units) and the quantity wanted.
#[derive(Debug, Clone, PartialEq)]
pub struct Point {
    pub coords: DVector<f64>,
    pub quantity: Quantity,
}

impl Point {
    pub fn new(coords: DVector<f64>, quantity: Quantity) -> Self {
        Point { coords, quantity }
    }
}

/// The answer to one [`Point`].
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Answer {
    /// Eh (or surface units).
    pub energy: f64,
    /// dE/dx, Eh/bohr, 3N.
    pub gradient: Option<DVector<f64>>,
    /// Cartesian second derivatives, Eh/bohr², 3N × 3N, atom-major.
    pub hessian: Option<DMatrix<f64>>,
}

impl Answer {
    /// Check that the answer holds what `q` asks for, with the right sizes and only finite
    /// numbers. Returns a description of the first problem.
    pub fn validate(&self, q: Quantity, n_coords: usize) -> Result<(), String> {
        if !self.energy.is_finite() {
            return Err(format!("energy is not a finite number ({})", self.energy));
        }
        if q == Quantity::Gradient {
            match &self.gradient {
                None => return Err("no gradient in the output".into()),
                Some(g) if g.len() != n_coords => {
                    return Err(format!(
                        "gradient has {} components, expected {n_coords}",
                        g.len()
                    ))
                }
                Some(g) if g.iter().any(|v| !v.is_finite()) => {
                    return Err("gradient contains a non-finite number".into())
                }
                _ => {}
            }
        }
        if q == Quantity::Hessian {
            match &self.hessian {
                None => return Err("no Hessian in the output".into()),
                Some(h) if h.nrows() != n_coords || h.ncols() != n_coords => {
                    return Err(format!(
                        "Hessian is {}x{}, expected {n_coords}x{n_coords}",
                        h.nrows(),
                        h.ncols()
                    ))
                }
                Some(h) if h.iter().any(|v| !v.is_finite()) => {
                    return Err("Hessian contains a non-finite number".into())
                }
                _ => {}
            }
        }
        Ok(())
    }
}
