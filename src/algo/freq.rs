//! Harmonic frequency analysis: Cartesian Hessian → mass-weighted, translations and rotations
//! projected out (Eckart frame; 5 external modes for a linear molecule, 3 for an atom),
//! frequencies in cm⁻¹ (imaginary ones as negative numbers), Cartesian normal modes and reduced
//! masses.
//!
//! Procedure (common practice; E. B. Wilson, J. C. Decius, P. C. Cross, *Molecular Vibrations*,
//! 1955, from memory): H_mw = M^{-1/2} H M^{-1/2}; build the orthonormal external basis
//! {√m_i e_α, √m_i (e_α × r_i)} about the centre of mass; diagonalise H_mw in the orthonormal
//! complement of that basis; ν̃ = sign(λ) √|λ| · 5140.487 cm⁻¹ (λ in Eh/(bohr² u), CODATA 2018).
//! A normal mode's Cartesian displacement is M^{-1/2} l; its reduced mass is 1/|M^{-1/2} l|²
//! (l normalised), and the reported mode is that displacement normalised to 1.
//!
//! For a model surface (`Frame::Surface`) masses are 1, there is no rotation, the external
//! subspace is the z coordinate; the eigenvalues (surface units) are what matters and
//! `n_imaginary` counts the negative ones. Frequencies are still filled in by the same formula
//! (nominal values, as if the surface were in atomic units).

use super::common::{complement_basis, external_basis, first_non_finite, sym_eigen};
use super::AlgoError;
use crate::geom::Frame;
use crate::units::freq_factor_cm1;
use nalgebra::{DMatrix, DVector};
use serde::{Deserialize, Serialize};

/// The result of a harmonic analysis. All lists are sorted by frequency, lowest (most
/// imaginary) first.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Modes {
    /// Harmonic wavenumbers, cm⁻¹; imaginary ones as negative numbers.
    pub frequencies_cm1: Vec<f64>,
    /// Eigenvalues of the projected mass-weighted Hessian, Eh/(bohr² u) (surface units for
    /// model surfaces, where masses are 1).
    pub eigenvalues: Vec<f64>,
    /// Cartesian displacement vectors (3N each), normalised to 1.
    pub modes: Vec<DVector<f64>>,
    /// Reduced masses, u (1/|M^{-1/2} l|² with l the normalised mass-weighted mode).
    pub reduced_masses: Vec<f64>,
    /// Imaginary frequencies with |ν̃| above the threshold (molecules), or negative eigenvalues
    /// (model surfaces).
    pub n_imaginary: usize,
    /// Number of external (translation/rotation) degrees of freedom removed.
    pub n_external: usize,
    /// True when the molecule is linear (5 external degrees of freedom).
    pub linear: bool,
}

/// Default threshold (cm⁻¹) below which an imaginary frequency is taken as numerical noise
/// (common practice: spurious imaginaries below about 50i cm⁻¹).
pub const DEFAULT_IMAG_THRESHOLD_CM1: f64 = 50.0;

/// Harmonic analysis of a Cartesian Hessian (Eh/bohr², 3N × 3N, atom-major) at `coords` (bohr,
/// 3N) with atomic `masses` (u, N; ignored for model surfaces). `imag_threshold_cm1` ≥ 0: an
/// imaginary frequency counts in `n_imaginary` only if |ν̃| exceeds it.
pub fn analyze(
    hessian: &DMatrix<f64>,
    coords: &DVector<f64>,
    masses: &[f64],
    frame: Frame,
    imag_threshold_cm1: f64,
) -> Result<Modes, AlgoError> {
    let n3 = coords.len();
    if n3 == 0 || !n3.is_multiple_of(3) {
        return Err(AlgoError(format!(
            "frequency analysis: {n3} coordinates is not a positive multiple of 3"
        )));
    }
    if hessian.nrows() != n3 || hessian.ncols() != n3 {
        return Err(AlgoError(format!(
            "frequency analysis: the Hessian is {}x{} but the geometry has {n3} coordinates",
            hessian.nrows(),
            hessian.ncols()
        )));
    }
    if let Some((i, j)) = first_non_finite(hessian) {
        return Err(AlgoError(format!(
            "frequency analysis: Hessian entry ({}, {}) is {} (not a finite number); \
             recompute the Hessian (check the engine output)",
            i + 1,
            j + 1,
            hessian[(i, j)]
        )));
    }
    if coords.iter().any(|v| !v.is_finite()) {
        return Err(AlgoError(
            "frequency analysis: the geometry contains a non-finite coordinate".into(),
        ));
    }
    let n = n3 / 3;
    let unit = vec![1.0; n];
    let m: &[f64] = match frame {
        Frame::Surface => &unit,
        Frame::Molecule => {
            if masses.len() != n {
                return Err(AlgoError(format!(
                    "frequency analysis: {} masses given for {n} atoms",
                    masses.len()
                )));
            }
            if let Some(i) = masses.iter().position(|v| !(v.is_finite() && *v > 0.0)) {
                return Err(AlgoError(format!(
                    "frequency analysis: atom {} has mass {} u; masses must be positive \
                     (the pseudo-atom X has no mass and belongs on model surfaces only)",
                    i + 1,
                    masses[i]
                )));
            }
            masses
        }
    };
    let inv_sqrt: Vec<f64> = (0..n3).map(|k| 1.0 / m[k / 3].sqrt()).collect();
    let mut hmw = hessian.clone();
    for i in 0..n3 {
        for j in 0..n3 {
            hmw[(i, j)] *= inv_sqrt[i] * inv_sqrt[j];
        }
    }
    let ext = external_basis(coords, Some(m), frame);
    let n_external = ext.ncols();
    let linear = frame == Frame::Molecule && n > 1 && n_external == 5;
    let d = complement_basis(&ext);
    let hint = d.transpose() * &hmw * &d;
    let (vals, vecs) = sym_eigen(&hint);
    let factor = freq_factor_cm1();
    let scale = vals.iter().fold(1.0_f64, |a, v| a.max(v.abs()));
    let mut out = Modes {
        frequencies_cm1: Vec::with_capacity(vals.len()),
        eigenvalues: vals.clone(),
        modes: Vec::with_capacity(vals.len()),
        reduced_masses: Vec::with_capacity(vals.len()),
        n_imaginary: 0,
        n_external,
        linear,
    };
    for (k, lam) in vals.iter().enumerate() {
        let nu = lam.signum() * lam.abs().sqrt() * factor;
        let l = &d * vecs.column(k);
        let cart = DVector::from_iterator(n3, l.iter().zip(&inv_sqrt).map(|(a, b)| a * b));
        let norm2 = cart.norm_squared();
        let imaginary = match frame {
            Frame::Molecule => *lam < 0.0 && nu.abs() > imag_threshold_cm1,
            Frame::Surface => *lam < -1e-10 * scale,
        };
        if imaginary {
            out.n_imaginary += 1;
        }
        out.frequencies_cm1.push(nu);
        out.reduced_masses
            .push(if norm2 > 0.0 { 1.0 / norm2 } else { 0.0 });
        out.modes.push(if norm2 > 0.0 {
            cart / norm2.sqrt()
        } else {
            cart
        });
    }
    Ok(out)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn diatomic_harmonic_oscillator() {
        // One spring k along z between masses m1, m2: ν̃ = √(k/μ)·5140.487 cm⁻¹ (textbook).
        let (k, m1, m2) = (0.5, 1.007_825_032_23, 18.998_403_163);
        let x = DVector::from_vec(vec![0.0, 0.0, 0.0, 0.0, 0.0, 1.73]);
        let mut h = DMatrix::zeros(6, 6);
        h[(2, 2)] = k;
        h[(5, 5)] = k;
        h[(2, 5)] = -k;
        h[(5, 2)] = -k;
        let r = analyze(&h, &x, &[m1, m2], Frame::Molecule, 50.0).unwrap();
        assert!(r.linear);
        assert_eq!(r.frequencies_cm1.len(), 1);
        let mu = m1 * m2 / (m1 + m2);
        let expect = (k / mu).sqrt() * freq_factor_cm1();
        assert!((r.frequencies_cm1[0] - expect).abs() < 1e-6);
        // Reduced mass in the Cartesian-normalised convention (1/|M^{-1/2} l|², as PySCF):
        // m1 m2 (m1 + m2) / (m1² + m2²) for a diatomic.
        let mu_cart = m1 * m2 * (m1 + m2) / (m1 * m1 + m2 * m2);
        assert!((r.reduced_masses[0] - mu_cart).abs() < 1e-9);
    }

    #[test]
    fn bad_inputs_give_errors_not_panics() {
        let x = DVector::from_vec(vec![0.0, 0.0, 0.0, 0.0, 0.0, 1.4]);
        let mut h = DMatrix::identity(6, 6);
        h[(1, 2)] = f64::NAN;
        let e = analyze(&h, &x, &[1.0, 1.0], Frame::Molecule, 50.0).unwrap_err();
        assert!(e.0.contains("not a finite number"), "{e}");
        let e = analyze(
            &DMatrix::identity(3, 3),
            &x,
            &[1.0, 1.0],
            Frame::Molecule,
            50.0,
        )
        .unwrap_err();
        assert!(e.0.contains("3x3"), "{e}");
        let e = analyze(&DMatrix::identity(6, 6), &x, &[1.0], Frame::Molecule, 50.0).unwrap_err();
        assert!(e.0.contains("masses"), "{e}");
        // One atom: no vibrations, a clean empty result.
        let a = DVector::from_vec(vec![0.1, 0.2, 0.3]);
        let r = analyze(&DMatrix::zeros(3, 3), &a, &[12.0], Frame::Molecule, 50.0).unwrap();
        assert!(r.frequencies_cm1.is_empty() && r.n_imaginary == 0 && r.n_external == 3);
    }
}
