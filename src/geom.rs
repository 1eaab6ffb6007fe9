//! Geometry helpers shared by the algorithms: centre of mass, the translation/rotation
//! ("external") subspace and projectors that remove it.
//!
//! For a model surface (all atoms X) the external subspace is the z axis of each point: the
//! surface lives in x and y, and no translation/rotation projection applies.

use nalgebra::{DMatrix, DVector};

/// Centre of mass of flat coordinates `x` (3N) with masses `m` (N).
pub fn center_of_mass(x: &DVector<f64>, m: &[f64]) -> [f64; 3] {
    let total: f64 = m.iter().sum();
    let mut c = [0.0; 3];
    for (i, mi) in m.iter().enumerate() {
        for k in 0..3 {
            c[k] += mi * x[3 * i + k];
        }
    }
    if total > 0.0 {
        for v in &mut c {
            *v /= total;
        }
    }
    c
}

/// How the external (zero-frequency) subspace is built.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Frame {
    /// Real molecule: 3 translations + 3 rotations (2 for a linear molecule, 0 for an atom).
    Molecule,
    /// 2-D model surface: the z coordinate of each point.
    Surface,
}

/// Orthonormal basis (as columns) of the external subspace at geometry `x`.
///
/// With `masses = Some(m)` the vectors are those of mass-weighted coordinates (√m e_α and
/// √m (e_α × r)), for use on a mass-weighted Hessian; with `None`, plain Cartesian ones.
/// Rotations are taken about the centre of mass (of the given masses, or unit masses).
/// Linear molecules give 5 vectors and single atoms 3: dependent vectors are dropped.
pub fn external_basis(x: &DVector<f64>, masses: Option<&[f64]>, frame: Frame) -> DMatrix<f64> {
    let n3 = x.len();
    let n = n3 / 3;
    let mut cands: Vec<DVector<f64>> = Vec::new();
    match frame {
        Frame::Surface => {
            for i in 0..n {
                let mut v = DVector::zeros(n3);
                v[3 * i + 2] = 1.0;
                cands.push(v);
            }
        }
        Frame::Molecule => {
            let unit = vec![1.0; n];
            // Masses of the wrong length (a caller's mistake) fall back to unit masses rather
            // than index out of bounds.
            let m: &[f64] = match masses {
                Some(m) if m.len() == n => m,
                _ => &unit,
            };
            let com = center_of_mass(x, m);
            for k in 0..3 {
                let mut v = DVector::zeros(n3);
                for i in 0..n {
                    v[3 * i + k] = m[i].sqrt();
                }
                cands.push(v);
            }
            for k in 0..3 {
                let mut v = DVector::zeros(n3);
                for i in 0..n {
                    let r = [
                        x[3 * i] - com[0],
                        x[3 * i + 1] - com[1],
                        x[3 * i + 2] - com[2],
                    ];
                    // e_k × r
                    let (a, b) = ((k + 1) % 3, (k + 2) % 3);
                    let s = m[i].sqrt();
                    v[3 * i + b] += s * r[a];
                    v[3 * i + a] -= s * r[b];
                }
                cands.push(v);
            }
        }
    }
    orthonormalize(cands, 1e-6, n3)
}

/// Modified Gram–Schmidt; drops vectors whose remaining norm is below `tol` times the largest
/// candidate's norm. (Comparing with the largest, not with the vector's own length, matters for
/// linear molecules carrying rounding noise: the rotation about the axis is then a vector of
/// length ~1e-16 that must be dropped, not normalised into a false direction.)
pub fn orthonormalize(cands: Vec<DVector<f64>>, tol: f64, dim: usize) -> DMatrix<f64> {
    let scale = cands.iter().map(|v| v.norm()).fold(0.0_f64, f64::max);
    let mut basis: Vec<DVector<f64>> = Vec::new();
    for mut v in cands {
        let norm0 = v.norm();
        if norm0 == 0.0 || norm0 <= tol * scale {
            continue;
        }
        for _ in 0..2 {
            for b in &basis {
                let d = b.dot(&v);
                v -= b * d;
            }
        }
        let nrm = v.norm();
        if nrm > tol * scale {
            basis.push(v / nrm);
        }
    }
    if basis.is_empty() {
        return DMatrix::zeros(dim, 0);
    }
    DMatrix::from_columns(&basis)
}

/// Projector P = 1 − B Bᵀ onto the complement of the columns of `b` (orthonormal).
pub fn complement_projector(b: &DMatrix<f64>) -> DMatrix<f64> {
    let n = b.nrows();
    DMatrix::identity(n, n) - b * b.transpose()
}

/// Remove the external components from a vector (Cartesian, unit-mass frame).
pub fn project_vector(v: &DVector<f64>, x: &DVector<f64>, frame: Frame) -> DVector<f64> {
    let b = external_basis(x, None, frame);
    v - &b * (b.transpose() * v)
}

/// Project a Cartesian Hessian: P H P with P removing the external subspace.
pub fn project_hessian(h: &DMatrix<f64>, x: &DVector<f64>, frame: Frame) -> DMatrix<f64> {
    let p = complement_projector(&external_basis(x, None, frame));
    &p * h * &p
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn counts_external_modes() {
        // bent triatomic: 6; linear: 5; atom: 3
        let bent = DVector::from_vec(vec![0.0, 0.0, 0.0, 1.8, 0.0, 0.0, -0.5, 1.7, 0.0]);
        assert_eq!(external_basis(&bent, None, Frame::Molecule).ncols(), 6);
        let lin = DVector::from_vec(vec![0.0, 0.0, 0.0, 0.0, 0.0, 2.0, 0.0, 0.0, 4.2]);
        assert_eq!(
            external_basis(&lin, Some(&[1.0, 12.0, 14.0]), Frame::Molecule).ncols(),
            5
        );
        let atom = DVector::from_vec(vec![0.3, 0.1, 0.2]);
        assert_eq!(external_basis(&atom, None, Frame::Molecule).ncols(), 3);
        let pt = DVector::from_vec(vec![0.3, 0.1, 0.0]);
        assert_eq!(external_basis(&pt, None, Frame::Surface).ncols(), 1);
    }

    #[test]
    fn noisy_linear_molecule_has_five_external_modes() {
        // HCN along z with rounding noise of 1e-17 bohr off the axis.
        let lin = DVector::from_vec(vec![
            1e-17, -2e-17, -2.0, 0.0, 0.0, 0.0, -1e-17, 1e-17, 2.18,
        ]);
        let b = external_basis(&lin, Some(&[1.008, 12.0, 14.003]), Frame::Molecule);
        assert_eq!(b.ncols(), 5);
        // and the basis is orthonormal
        let g = b.transpose() * &b;
        assert!((g - DMatrix::identity(5, 5)).norm() < 1e-10);
    }

    #[test]
    fn projection_removes_rigid_motion() {
        let x = DVector::from_vec(vec![0.0, 0.0, 0.0, 1.8, 0.0, 0.0, -0.5, 1.7, 0.3]);
        let t = DVector::from_vec(vec![1.0, 0.0, 0.0, 1.0, 0.0, 0.0, 1.0, 0.0, 0.0]);
        assert!(project_vector(&t, &x, Frame::Molecule).norm() < 1e-12);
        let internal = DVector::from_vec(vec![-1.0, 0.0, 0.0, 1.0, 0.0, 0.0, 0.0, 0.0, 0.0]);
        assert!(project_vector(&internal, &x, Frame::Molecule).norm() > 0.5);
    }
}
