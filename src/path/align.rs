//! Endpoints of a path: same atoms in the same order, and the product rotated and translated
//! onto the reactant (Kabsch, minimum RMSD).
//!
//! Kabsch: W. Kabsch, Acta Cryst. A 32, 922 (1976); reflections excluded by the sign of the
//! determinant (Acta Cryst. A 34, 827 (1978)). Unit weights: the RMSD minimised is the plain
//! Cartesian one.

use crate::error::{Error, Result};
use crate::geom::Frame;
use crate::molecule::Molecule;
use nalgebra::{DVector, Matrix3, Vector3};

/// Check that two geometries can be the ends of one path: same number of atoms, same element
/// at every position. `names` label the two files in the message.
pub fn check_same_atoms(a: &Molecule, b: &Molecule, names: (&str, &str)) -> Result<()> {
    if a.len() != b.len() {
        return Err(Error::invalid(format!(
            "{} has {} atoms but {} has {}: both ends of a path must hold the same atoms in the same order",
            names.0,
            a.len(),
            names.1,
            b.len()
        )));
    }
    for (i, (ea, eb)) in a.elements.iter().zip(&b.elements).enumerate() {
        if ea != eb {
            return Err(Error::invalid(format!(
                "atom {} is {} in {} but {} in {}: both ends of a path must list the same elements in the same order (reorder the atoms of one file)",
                i + 1,
                ea,
                names.0,
                eb,
                names.1
            )));
        }
    }
    Ok(())
}

fn centroid(x: &DVector<f64>) -> Vector3<f64> {
    let n = x.len() / 3;
    let mut c = Vector3::zeros();
    for i in 0..n {
        c += Vector3::new(x[3 * i], x[3 * i + 1], x[3 * i + 2]);
    }
    if n > 0 {
        c /= n as f64;
    }
    c
}

/// Rotate and translate `mobile` (flat 3N) onto `reference` with minimum RMSD (unit weights).
/// Returns the moved copy of `mobile`.
pub fn kabsch(reference: &DVector<f64>, mobile: &DVector<f64>) -> DVector<f64> {
    let n = reference.len() / 3;
    let cr = centroid(reference);
    let cm = centroid(mobile);
    let atom = |x: &DVector<f64>, i: usize, c: &Vector3<f64>| {
        Vector3::new(x[3 * i], x[3 * i + 1], x[3 * i + 2]) - c
    };
    // Covariance H = Σ m_i r_iᵀ (mobile × reference).
    let mut h = Matrix3::zeros();
    for i in 0..n {
        h += atom(mobile, i, &cm) * atom(reference, i, &cr).transpose();
    }
    let svd = h.svd(true, true);
    let (Some(u), Some(vt)) = (svd.u, svd.v_t) else {
        return translate(mobile, &(cr - cm));
    };
    let v = vt.transpose();
    let d = (v * u.transpose()).determinant().signum();
    let d = if d == 0.0 { 1.0 } else { d };
    let corr = Matrix3::from_diagonal(&Vector3::new(1.0, 1.0, d));
    let r = v * corr * u.transpose();
    let mut out = DVector::zeros(mobile.len());
    for i in 0..n {
        let p = r * atom(mobile, i, &cm) + cr;
        for k in 0..3 {
            out[3 * i + k] = p[k];
        }
    }
    out
}

fn translate(x: &DVector<f64>, t: &Vector3<f64>) -> DVector<f64> {
    let mut out = x.clone();
    for i in 0..x.len() / 3 {
        for k in 0..3 {
            out[3 * i + k] += t[k];
        }
    }
    out
}

/// Root-mean-square distance per atom between two flat geometries (no alignment).
pub fn rmsd(a: &DVector<f64>, b: &DVector<f64>) -> f64 {
    let n = (a.len() / 3).max(1);
    ((a - b).norm_squared() / n as f64).sqrt()
}

/// Endpoints ready for a path: flat coordinates, product aligned onto the reactant (real
/// molecules only; model-surface points are used as they are), and the frame.
#[derive(Debug, Clone)]
pub struct Endpoints {
    pub reactant: DVector<f64>,
    pub product: DVector<f64>,
    pub frame: Frame,
    /// RMSD between the ends after alignment (bohr, or surface units).
    pub rmsd: f64,
}

/// Smallest RMSD (bohr) at which two ends count as different geometries.
pub const MIN_END_RMSD: f64 = 1e-3;

/// Check and align the two ends of a path. `names` label the inputs in error messages.
pub fn prepare_endpoints(
    reactant: &Molecule,
    product: &Molecule,
    names: (&str, &str),
) -> Result<Endpoints> {
    check_same_atoms(reactant, product, names)?;
    if reactant.is_empty() {
        return Err(Error::invalid(format!("{} holds no atoms", names.0)));
    }
    let surface = reactant.is_model_surface();
    let frame = if surface {
        Frame::Surface
    } else {
        Frame::Molecule
    };
    let r = reactant.flat();
    let p = if surface {
        product.flat()
    } else {
        kabsch(&r, &product.flat())
    };
    let d = rmsd(&r, &p);
    if d < MIN_END_RMSD {
        return Err(Error::invalid(format!(
            "{} and {} are the same geometry (RMSD {:.2e} bohr after alignment): a path needs two different ends",
            names.0, names.1, d
        )));
    }
    Ok(Endpoints {
        reactant: r,
        product: p,
        frame,
        rmsd: d,
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::elements::Element;
    use nalgebra::Rotation3;

    fn water() -> Molecule {
        Molecule::new(
            vec![Element(8), Element(1), Element(1)],
            vec![[0.0, 0.0, 0.2], [0.0, 1.43, -0.9], [0.0, -1.43, -0.9]],
        )
    }

    #[test]
    fn kabsch_undoes_rotation_and_translation() {
        let a = water().flat();
        let rot = Rotation3::from_euler_angles(0.3, -1.1, 2.0);
        let mut b = a.clone();
        for i in 0..3 {
            let p = rot * Vector3::new(a[3 * i], a[3 * i + 1], a[3 * i + 2])
                + Vector3::new(5.0, -2.0, 1.0);
            for k in 0..3 {
                b[3 * i + k] = p[k];
            }
        }
        assert!(rmsd(&a, &b) > 1.0);
        let c = kabsch(&a, &b);
        assert!(rmsd(&a, &c) < 1e-10, "rmsd {}", rmsd(&a, &c));
    }

    #[test]
    fn kabsch_does_not_reflect() {
        // A chiral (non-planar) set and its mirror image cannot be superposed by a rotation.
        let a = DVector::from_vec(vec![
            0.0, 0.0, 0.0, 1.5, 0.0, 0.0, 0.0, 1.7, 0.0, 0.0, 0.0, 1.9,
        ]);
        let mut m = a.clone();
        for i in 0..4 {
            m[3 * i] = -m[3 * i];
        }
        let c = kabsch(&a, &m);
        assert!(rmsd(&a, &c) > 0.1);
        // The rotation keeps internal distances.
        let d = |x: &DVector<f64>, i: usize, j: usize| {
            ((x[3 * i] - x[3 * j]).powi(2)
                + (x[3 * i + 1] - x[3 * j + 1]).powi(2)
                + (x[3 * i + 2] - x[3 * j + 2]).powi(2))
            .sqrt()
        };
        assert!((d(&c, 1, 3) - d(&a, 1, 3)).abs() < 1e-12);
    }

    #[test]
    fn endpoint_errors_name_the_problem() {
        let a = water();
        let mut b = water();
        b.elements[2] = Element(9);
        let e = prepare_endpoints(&a, &b, ("r.xyz", "p.xyz"))
            .unwrap_err()
            .to_string();
        assert!(e.contains("atom 3 is H in r.xyz but F in p.xyz"), "{e}");
        let mut c = water();
        c.elements.pop();
        c.coords.pop();
        let e = prepare_endpoints(&a, &c, ("r.xyz", "p.xyz"))
            .unwrap_err()
            .to_string();
        assert!(e.contains("r.xyz has 3 atoms but p.xyz has 2"), "{e}");
        let e = prepare_endpoints(&a, &a, ("r.xyz", "p.xyz"))
            .unwrap_err()
            .to_string();
        assert!(e.contains("same geometry"), "{e}");
    }
}
