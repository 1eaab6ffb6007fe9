//! Pieces shared by the minimiser, the saddle refinement and the frequency analysis:
//! convergence tests, the internal (non-rigid) subspace, symmetric eigen-decomposition,
//! rational-function steps and Hessian updates. All pure functions.

use super::AlgoError;
use crate::eval::{Answer, Quantity};
use crate::geom::Frame;
use nalgebra::{DMatrix, DVector};
use serde::{Deserialize, Serialize};

/// Convergence thresholds on forces (gradient components, Eh/bohr) and steps (bohr).
///
/// Defaults: the widely used "normal" set, max force 4.5e-4, RMS force 3.0e-4 Eh/bohr, max
/// step 1.8e-3, RMS step 1.2e-3 bohr (common practice; reference-values.md §6). All four must
/// hold. The step is the one the method would take next from the current point.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct Convergence {
    pub max_force: f64,
    pub rms_force: f64,
    pub max_step: f64,
    pub rms_step: f64,
}

impl Default for Convergence {
    fn default() -> Self {
        Convergence::NORMAL
    }
}

impl Convergence {
    /// "Normal" set (common practice).
    pub const NORMAL: Convergence = Convergence {
        max_force: 4.5e-4,
        rms_force: 3.0e-4,
        max_step: 1.8e-3,
        rms_step: 1.2e-3,
    };
    /// "Tight" set (common practice).
    pub const TIGHT: Convergence = Convergence {
        max_force: 1.5e-5,
        rms_force: 1.0e-5,
        max_step: 6.0e-5,
        rms_step: 4.0e-5,
    };
    /// "Very tight" set (common practice).
    pub const VERY_TIGHT: Convergence = Convergence {
        max_force: 2e-6,
        rms_force: 1e-6,
        max_step: 6e-6,
        rms_step: 4e-6,
    };

    /// Multiply every threshold by `f` (f < 1 tightens, f > 1 loosens).
    pub fn scaled(self, f: f64) -> Convergence {
        Convergence {
            max_force: self.max_force * f,
            rms_force: self.rms_force * f,
            max_step: self.max_step * f,
            rms_step: self.rms_step * f,
        }
    }

    /// Look up a named set: "normal", "tight", "very-tight".
    pub fn named(name: &str) -> Option<Convergence> {
        match name {
            "normal" => Some(Self::NORMAL),
            "tight" => Some(Self::TIGHT),
            "very-tight" | "verytight" => Some(Self::VERY_TIGHT),
            _ => None,
        }
    }

    /// Measure a gradient and a step and say whether all four criteria hold.
    pub fn check(&self, gradient: &DVector<f64>, step: &DVector<f64>) -> ConvergenceReport {
        let r = ConvergenceReport {
            max_force: max_abs(gradient),
            rms_force: rms(gradient),
            max_step: max_abs(step),
            rms_step: rms(step),
            met: false,
        };
        ConvergenceReport {
            met: r.max_force <= self.max_force
                && r.rms_force <= self.rms_force
                && r.max_step <= self.max_step
                && r.rms_step <= self.rms_step,
            ..r
        }
    }
}

/// The measured values behind a convergence test.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct ConvergenceReport {
    pub max_force: f64,
    pub rms_force: f64,
    pub max_step: f64,
    pub rms_step: f64,
    pub met: bool,
}

impl ConvergenceReport {
    /// A one-line description, e.g. for a verdict reason.
    pub fn describe(&self) -> String {
        format!(
            "max force {:.2e}, RMS force {:.2e} Eh/bohr; max step {:.2e}, RMS step {:.2e} bohr",
            self.max_force, self.rms_force, self.max_step, self.rms_step
        )
    }
}

/// Largest absolute component (0 for an empty vector).
pub fn max_abs(v: &DVector<f64>) -> f64 {
    v.iter().fold(0.0_f64, |m, x| m.max(x.abs()))
}

/// Root mean square of the components (0 for an empty vector).
pub fn rms(v: &DVector<f64>) -> f64 {
    if v.is_empty() {
        0.0
    } else {
        (v.norm_squared() / v.len() as f64).sqrt()
    }
}

/// Orthonormal basis (columns) of the external subspace: [`crate::geom::external_basis`], which
/// is robust for linear molecules whose coordinates carry rounding noise (a candidate whose norm
/// is below 1e-6 of the largest candidate's is dropped, not normalised into a false direction).
pub fn external_basis(x: &DVector<f64>, masses: Option<&[f64]>, frame: Frame) -> DMatrix<f64> {
    crate::geom::external_basis(x, masses, frame)
}

/// Orthonormal basis (columns) of the internal subspace: the complement of translations and
/// rotations (unit-mass Cartesian frame) for a molecule, the x and y of each point for a model
/// surface. 3N − 6 columns for a bent molecule, 3N − 5 linear, 0 for a single atom.
pub fn internal_basis(x: &DVector<f64>, frame: Frame) -> DMatrix<f64> {
    complement_basis(&external_basis(x, None, frame))
}

/// Orthonormal basis of the complement of the (orthonormal) columns of `b`.
pub fn complement_basis(b: &DMatrix<f64>) -> DMatrix<f64> {
    let n = b.nrows();
    let p = DMatrix::identity(n, n) - b * b.transpose();
    let (vals, vecs) = sym_eigen(&p);
    let cols: Vec<DVector<f64>> = vals
        .iter()
        .enumerate()
        .filter(|(_, v)| **v > 0.5)
        .map(|(i, _)| vecs.column(i).into_owned())
        .collect();
    if cols.is_empty() {
        DMatrix::zeros(n, 0)
    } else {
        DMatrix::from_columns(&cols)
    }
}

/// Eigen-decomposition of a symmetric matrix, eigenvalues ascending, eigenvectors as columns
/// in the same order. The matrix is symmetrised first.
pub fn sym_eigen(m: &DMatrix<f64>) -> (Vec<f64>, DMatrix<f64>) {
    let n = m.nrows();
    if n == 0 {
        return (vec![], DMatrix::zeros(0, 0));
    }
    let sym = (m + m.transpose()) * 0.5;
    let e = nalgebra::SymmetricEigen::new(sym);
    let mut idx: Vec<usize> = (0..n).collect();
    idx.sort_by(|&a, &b| e.eigenvalues[a].total_cmp(&e.eigenvalues[b]));
    let vals = idx.iter().map(|&i| e.eigenvalues[i]).collect();
    let cols: Vec<DVector<f64>> = idx
        .iter()
        .map(|&i| e.eigenvectors.column(i).into_owned())
        .collect();
    (vals, DMatrix::from_columns(&cols))
}

/// Lowest eigenvalue of the rational-function augmented matrix [[diag(λ), F], [Fᵀ, 0]]
/// (Banerjee, Adams, Simons & Shepard 1985). It lies below every λ_i.
pub fn rfo_shift(lams: &[f64], f: &[f64]) -> f64 {
    let n = lams.len();
    let mut a = DMatrix::zeros(n + 1, n + 1);
    for i in 0..n {
        a[(i, i)] = lams[i];
        a[(i, n)] = f[i];
        a[(n, i)] = f[i];
    }
    let (vals, _) = sym_eigen(&a);
    vals.first().copied().unwrap_or(0.0)
}

/// Shifted Newton step components s_i = −F_i / (λ_i − shift), zero where the denominator
/// vanishes (the component of F is then zero too, up to rounding).
pub fn shifted_step(lams: &[f64], f: &[f64], shift: f64) -> Vec<f64> {
    lams.iter()
        .zip(f)
        .map(|(l, fi)| {
            let d = l - shift;
            if d.abs() < 1e-12 {
                0.0
            } else {
                -fi / d
            }
        })
        .collect()
}

/// Quadratic model of the energy change for step `s`: gᵀs + ½ sᵀHs.
pub fn quadratic_change(g: &DVector<f64>, h: &DMatrix<f64>, s: &DVector<f64>) -> f64 {
    g.dot(s) + 0.5 * s.dot(&(h * s))
}

/// BFGS update of a Hessian approximation (skipped when the curvature condition yᵀs > 0 fails,
/// which would lose positive definiteness). Returns whether the update was applied.
pub fn bfgs_update(h: &mut DMatrix<f64>, s: &DVector<f64>, y: &DVector<f64>) -> bool {
    let ys = y.dot(s);
    let hs = &*h * s;
    let shs = s.dot(&hs);
    if ys <= 1e-10 * y.norm() * s.norm() || shs <= 0.0 {
        return false;
    }
    *h += y * y.transpose() / ys - &hs * hs.transpose() / shs;
    true
}

/// Bofill update (J. M. Bofill, Int. J. Quantum Chem. 52, 1 (1994)): a mix of the symmetric
/// rank-one (Murtagh–Sargent) and Powell-symmetric-Broyden updates with weight
/// φ = (ξᵀs)² / ((ξᵀξ)(sᵀs)), ξ = y − Hs. Keeps negative curvature, as a saddle search needs.
pub fn bofill_update(h: &mut DMatrix<f64>, s: &DVector<f64>, y: &DVector<f64>) -> bool {
    let ss = s.dot(s);
    if ss <= 0.0 {
        return false;
    }
    let xi = y - &*h * s;
    let xx = xi.dot(&xi);
    if xx <= 1e-30 {
        return false;
    }
    let xs = xi.dot(s);
    let phi = xs * xs / (xx * ss);
    let mut d = DMatrix::zeros(s.len(), s.len());
    if phi > 1e-12 && xs.abs() > 1e-14 {
        d += (&xi * xi.transpose()) * (phi / xs);
    }
    let psb =
        (&xi * s.transpose() + s * xi.transpose()) / ss - (s * s.transpose()) * (xs / (ss * ss));
    d += psb * (1.0 - phi);
    *h += d;
    true
}

/// Check that an answer holds what was asked, with finite numbers of the right size.
pub fn check_answer(a: &Answer, q: Quantity, n: usize, what: &str) -> Result<(), AlgoError> {
    a.validate(q, n)
        .map_err(|e| AlgoError(format!("{what}: {e}; check the engine output")))
}

/// The first non-finite entry of a matrix, as (row, column).
pub fn first_non_finite(m: &DMatrix<f64>) -> Option<(usize, usize)> {
    for j in 0..m.ncols() {
        for i in 0..m.nrows() {
            if !m[(i, j)].is_finite() {
                return Some((i, j));
            }
        }
    }
    None
}

/// Check a start geometry: a positive multiple of 3 coordinates, all finite. `who` names the
/// algorithm, `what` the geometry (e.g. "the guess"), for the error message.
pub fn check_start(x: &DVector<f64>, who: &str, what: &str) -> Result<(), super::AlgoError> {
    let n = x.len();
    if n == 0 || !n.is_multiple_of(3) {
        return Err(super::AlgoError(format!(
            "{who}: {n} coordinates is not a positive multiple of 3"
        )));
    }
    if x.iter().any(|v| !v.is_finite()) {
        return Err(super::AlgoError(format!(
            "{who}: {what} contains a non-finite coordinate"
        )));
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn bofill_reproduces_a_quadratic_secant() {
        // After an update, H s = y must hold (secant condition), for any mix weight.
        let mut h = DMatrix::from_row_slice(2, 2, &[1.0, 0.2, 0.2, -0.5]);
        let s = DVector::from_vec(vec![0.3, -0.1]);
        let y = DVector::from_vec(vec![0.5, 0.4]);
        assert!(bofill_update(&mut h, &s, &y));
        assert!((&h * &s - &y).norm() < 1e-12);
        assert!((&h - h.transpose()).norm() < 1e-12);
        let mut b = DMatrix::identity(2, 2);
        let y2 = DVector::from_vec(vec![0.6, 0.1]);
        assert!(bfgs_update(&mut b, &s, &y2));
        assert!((&b * &s - &y2).norm() < 1e-12);
    }

    #[test]
    fn rfo_shift_lies_below_all_eigenvalues() {
        let l = [-2.0, 1.0, 3.0];
        let f = [0.5, -1.0, 0.2];
        let nu = rfo_shift(&l, &f);
        assert!(nu < -2.0);
        // ν solves the secular equation ν = Σ F_i² / (ν − λ_i).
        let rhs: f64 = l.iter().zip(&f).map(|(li, fi)| fi * fi / (nu - li)).sum();
        assert!((nu - rhs).abs() < 1e-10);
    }

    #[test]
    fn internal_basis_dimensions() {
        let bent = DVector::from_vec(vec![0.0, 0.0, 0.0, 1.8, 0.0, 0.0, -0.5, 1.7, 0.0]);
        assert_eq!(internal_basis(&bent, Frame::Molecule).ncols(), 3);
        let lin = DVector::from_vec(vec![0.0, 0.0, 0.0, 0.0, 0.0, 2.0, 0.0, 0.0, 4.2]);
        assert_eq!(internal_basis(&lin, Frame::Molecule).ncols(), 4);
        let atom = DVector::from_vec(vec![0.1, 0.2, 0.3]);
        assert_eq!(internal_basis(&atom, Frame::Molecule).ncols(), 0);
        let pt = DVector::from_vec(vec![0.1, 0.2, 0.0]);
        assert_eq!(internal_basis(&pt, Frame::Surface).ncols(), 2);
        // A linear molecule on z whose x, y carry rounding noise still has 5 external modes.
        let noisy = DVector::from_vec(vec![
            1e-16, -2e-16, 0.0, 3e-17, 1e-16, 1.75, -6e-17, 0.0, -1.75,
        ]);
        assert_eq!(
            external_basis(&noisy, Some(&[16.0, 1.0, 1.0]), Frame::Molecule).ncols(),
            5
        );
        assert_eq!(internal_basis(&noisy, Frame::Molecule).ncols(), 4);
    }
}
