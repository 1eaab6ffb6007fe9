//! Reaction paths: endpoint alignment, interpolation (linear, IDPP), nudged elastic band with
//! climbing image, relaxed coordinate scans, walking uphill from a minimum (dimer method),
//! intrinsic reaction coordinate (IRC), and bond-graph connectivity.
//!
//! Every method is a pure ask/tell algorithm ([`crate::algo::Algorithm`]) with a plain-data
//! verdict, so the command line and the study runner use the same types. Methods, references
//! and defaults are listed in DEVELOPERS.md, section "Paths".

pub mod align;
pub mod coords;
pub mod fire;
pub mod graph;
pub mod interp;
pub mod irc;
pub mod neb;
pub mod report;
pub mod scan;
pub mod walk;

use crate::algo::AlgoError;
use crate::eval::{Answer, Quantity};
use nalgebra::DVector;

/// Check a batch of gradient answers: count, sizes, finite numbers. `what` names the batch in
/// the error ("band iteration 12", ...). Returns (energy, gradient) pairs in order.
pub(crate) fn gradients(
    answers: Vec<Answer>,
    expected: usize,
    n_coords: usize,
    what: &str,
) -> Result<Vec<(f64, DVector<f64>)>, AlgoError> {
    if answers.len() != expected {
        return Err(AlgoError(format!(
            "{what}: expected {expected} answers, got {}",
            answers.len()
        )));
    }
    answers
        .into_iter()
        .enumerate()
        .map(|(k, a)| {
            a.validate(Quantity::Gradient, n_coords)
                .map_err(|e| AlgoError(format!("{what}, point {}: {e}", k + 1)))?;
            let g = a
                .gradient
                .ok_or_else(|| AlgoError(format!("{what}, point {}: no gradient", k + 1)))?;
            Ok((a.energy, g))
        })
        .collect()
}

/// Largest absolute component of a vector (0 for an empty one).
pub(crate) fn max_abs(v: &DVector<f64>) -> f64 {
    v.iter().fold(0.0_f64, |m, x| m.max(x.abs()))
}
