//! Internal coordinates used by scans: bond length, angle, dihedral, and a single Cartesian
//! component (for model surfaces). Values and their Cartesian gradients (Wilson B rows).
//!
//! Formulas: E. B. Wilson, J. C. Decius and P. C. Cross, *Molecular Vibrations* (1955), ch. 4
//! (bond, angle); the dihedral gradient of A. Blondel and M. Karplus, J. Comput. Chem. 17,
//! 1132 (1996), eq. 27 (from memory; checked here against finite differences).
//! Atom indices are 0-based here; the command line counts from 1.

use nalgebra::{DVector, Vector3};
use serde::{Deserialize, Serialize};
use std::f64::consts::PI;

/// A coordinate to drive. Lengths in bohr, angles in radians.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Coord {
    Bond(usize, usize),
    /// Angle i–j–k at vertex j.
    Angle(usize, usize, usize),
    /// Dihedral i–j–k–l (rotation about j–k), in (−π, π].
    Dihedral(usize, usize, usize, usize),
    /// Component `axis` (0 = x, 1 = y, 2 = z) of atom i.
    Cartesian(usize, usize),
}

fn atom(x: &DVector<f64>, i: usize) -> Vector3<f64> {
    Vector3::new(x[3 * i], x[3 * i + 1], x[3 * i + 2])
}

fn put(g: &mut DVector<f64>, i: usize, v: &Vector3<f64>) {
    for k in 0..3 {
        g[3 * i + k] += v[k];
    }
}

impl Coord {
    /// Atoms involved (0-based).
    pub fn atoms(&self) -> Vec<usize> {
        match *self {
            Coord::Bond(i, j) => vec![i, j],
            Coord::Angle(i, j, k) => vec![i, j, k],
            Coord::Dihedral(i, j, k, l) => vec![i, j, k, l],
            Coord::Cartesian(i, _) => vec![i],
        }
    }

    /// Check indices against the atom count and that no atom repeats. `Err` says why.
    pub fn check(&self, n_atoms: usize) -> Result<(), String> {
        let a = self.atoms();
        if let Some(bad) = a.iter().find(|&&i| i >= n_atoms) {
            return Err(format!(
                "atom {} does not exist: the geometry has {n_atoms} atoms (atoms count from 1)",
                bad + 1
            ));
        }
        for (p, i) in a.iter().enumerate() {
            if a[p + 1..].contains(i) {
                return Err(format!("atom {} is named twice", i + 1));
            }
        }
        if let Coord::Cartesian(_, axis) = self {
            if *axis > 2 {
                return Err(format!("axis {axis} is not x, y or z"));
            }
        }
        Ok(())
    }

    /// Whether the value is an angle (radians) rather than a length.
    pub fn is_angle(&self) -> bool {
        matches!(self, Coord::Angle(..) | Coord::Dihedral(..))
    }

    /// Whether values wrap around (dihedrals).
    pub fn is_periodic(&self) -> bool {
        matches!(self, Coord::Dihedral(..))
    }

    /// A short label, atoms counted from 1: "bond 1-2", "angle 1-2-3", "x of atom 1".
    pub fn label(&self) -> String {
        match *self {
            Coord::Bond(i, j) => format!("bond {}-{}", i + 1, j + 1),
            Coord::Angle(i, j, k) => format!("angle {}-{}-{}", i + 1, j + 1, k + 1),
            Coord::Dihedral(i, j, k, l) => {
                format!("dihedral {}-{}-{}-{}", i + 1, j + 1, k + 1, l + 1)
            }
            Coord::Cartesian(i, a) => format!("{} of atom {}", ["x", "y", "z"][a.min(2)], i + 1),
        }
    }

    /// Difference a − b, wrapped into (−π, π] for dihedrals.
    pub fn diff(&self, a: f64, b: f64) -> f64 {
        let d = a - b;
        if self.is_periodic() {
            let mut w = d.rem_euclid(2.0 * PI);
            if w > PI {
                w -= 2.0 * PI;
            }
            w
        } else {
            d
        }
    }

    /// Value at flat coordinates x.
    pub fn value(&self, x: &DVector<f64>) -> f64 {
        self.value_and_gradient(x).0
    }

    /// Value and Cartesian gradient (3N) at flat coordinates x.
    pub fn value_and_gradient(&self, x: &DVector<f64>) -> (f64, DVector<f64>) {
        let mut g = DVector::zeros(x.len());
        match *self {
            Coord::Cartesian(i, a) => {
                g[3 * i + a] = 1.0;
                (x[3 * i + a], g)
            }
            Coord::Bond(i, j) => {
                let d = atom(x, i) - atom(x, j);
                let r = d.norm();
                let u = if r > 0.0 { d / r } else { Vector3::zeros() };
                put(&mut g, i, &u);
                put(&mut g, j, &(-u));
                (r, g)
            }
            Coord::Angle(i, j, k) => {
                let a = atom(x, i) - atom(x, j);
                let b = atom(x, k) - atom(x, j);
                let (ra, rb) = (a.norm(), b.norm());
                if ra == 0.0 || rb == 0.0 {
                    return (0.0, g);
                }
                let (u, v) = (a / ra, b / rb);
                let cos = u.dot(&v).clamp(-1.0, 1.0);
                let theta = u.cross(&v).norm().atan2(u.dot(&v));
                let sin = theta.sin().max(1e-8);
                let gi = (u * cos - v) / (ra * sin);
                let gk = (v * cos - u) / (rb * sin);
                put(&mut g, i, &gi);
                put(&mut g, k, &gk);
                put(&mut g, j, &(-(gi + gk)));
                (theta, g)
            }
            Coord::Dihedral(i, j, k, l) => {
                let b1 = atom(x, j) - atom(x, i);
                let b2 = atom(x, k) - atom(x, j);
                let b3 = atom(x, l) - atom(x, k);
                let m = b1.cross(&b2);
                let n = b2.cross(&b3);
                let r2 = b2.norm();
                let phi = (r2 * b1.dot(&n)).atan2(m.dot(&n));
                let (mm, nn) = (m.norm_squared(), n.norm_squared());
                if mm < 1e-16 || nn < 1e-16 || r2 == 0.0 {
                    return (phi, g);
                }
                let gi = -m * (r2 / mm);
                let gl = n * (r2 / nn);
                let p = b1.dot(&b2) / (r2 * r2);
                let q = b3.dot(&b2) / (r2 * r2);
                let gj = -gi * (1.0 + p) + gl * q;
                let gk = -(gi + gj + gl);
                put(&mut g, i, &gi);
                put(&mut g, j, &gj);
                put(&mut g, k, &gk);
                put(&mut g, l, &gl);
                (phi, g)
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn geom() -> DVector<f64> {
        DVector::from_vec(vec![
            0.1, 0.2, -0.1, 2.0, 0.1, 0.3, 2.6, 1.9, 0.2, 4.1, 2.3, 1.4,
        ])
    }

    #[test]
    fn gradients_match_finite_differences() {
        let x = geom();
        for c in [
            Coord::Bond(0, 2),
            Coord::Angle(0, 1, 2),
            Coord::Angle(3, 1, 0),
            Coord::Dihedral(0, 1, 2, 3),
            Coord::Dihedral(3, 2, 1, 0),
            Coord::Cartesian(2, 1),
        ] {
            let (_, g) = c.value_and_gradient(&x);
            let h = 1e-6;
            for k in 0..12 {
                let mut xp = x.clone();
                xp[k] += h;
                let mut xm = x.clone();
                xm[k] -= h;
                let fd = c.diff(c.value(&xp), c.value(&xm)) / (2.0 * h);
                assert!(
                    (fd - g[k]).abs() < 1e-6,
                    "{c:?} component {k}: {fd} vs {}",
                    g[k]
                );
            }
        }
    }

    #[test]
    fn known_values() {
        // Right angle and a trans (180°) / cis (0°) dihedral, by construction.
        let x = DVector::from_vec(vec![
            1.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 2.0, 0.0, -1.0, 2.0, 0.0,
        ]);
        assert!((Coord::Bond(1, 2).value(&x) - 2.0).abs() < 1e-12);
        assert!((Coord::Angle(0, 1, 2).value(&x) - PI / 2.0).abs() < 1e-12);
        assert!((Coord::Dihedral(0, 1, 2, 3).value(&x).abs() - PI).abs() < 1e-12);
        let mut y = x.clone();
        y[9] = 1.0;
        assert!(Coord::Dihedral(0, 1, 2, 3).value(&y).abs() < 1e-12);
        // Wrapping: 179° − (−179°) = −2°.
        let d = Coord::Dihedral(0, 1, 2, 3).diff(179f64.to_radians(), (-179f64).to_radians());
        assert!((d + 2f64.to_radians()).abs() < 1e-12);
        assert!(Coord::Bond(0, 5).check(4).unwrap_err().contains("atom 6"));
        assert!(Coord::Angle(0, 1, 0)
            .check(4)
            .unwrap_err()
            .contains("twice"));
    }
}
