//! Built-in model surfaces, evaluated in-process: no external program needed.
//!
//! - `muller-brown`: K. Müller and L. D. Brown, Theor. Chim. Acta 53, 75 (1979), footnote p. 79.
//!   One pseudo-atom X whose x and y are the surface coordinates; z is ignored (its gradient
//!   and Hessian entries are zero).

use crate::eval::{Answer, Quantity};
use nalgebra::{DMatrix, DVector};

/// Müller–Brown parameters (A, a, b, c, x0, y0), Müller & Brown 1979.
const MB: [[f64; 6]; 4] = [
    [-200.0, -1.0, 0.0, -10.0, 1.0, 0.0],
    [-100.0, -1.0, 0.0, -10.0, 0.0, 0.5],
    [-170.0, -6.5, 11.0, -6.5, -0.5, 1.5],
    [15.0, 0.7, 0.6, 0.7, -1.0, 1.0],
];

/// Müller–Brown energy, gradient (∂x, ∂y) and Hessian (xx, xy, yy) at (x, y).
pub fn muller_brown(x: f64, y: f64) -> (f64, [f64; 2], [f64; 3]) {
    let mut v = 0.0;
    let mut g = [0.0; 2];
    let mut h = [0.0; 3];
    for [aa, a, b, c, x0, y0] in MB {
        let dx = x - x0;
        let dy = y - y0;
        let ek = aa * (a * dx * dx + b * dx * dy + c * dy * dy).exp();
        let fx = 2.0 * a * dx + b * dy;
        let fy = b * dx + 2.0 * c * dy;
        v += ek;
        g[0] += ek * fx;
        g[1] += ek * fy;
        h[0] += ek * (fx * fx + 2.0 * a);
        h[1] += ek * (fx * fy + b);
        h[2] += ek * (fy * fy + 2.0 * c);
    }
    (v, g, h)
}

/// Evaluate Müller–Brown for one pseudo-atom (flat coordinates x, y, z).
pub fn muller_brown_answer(coords: &DVector<f64>, q: Quantity) -> Answer {
    let (v, g, h) = muller_brown(coords[0], coords[1]);
    let n = coords.len();
    let gradient = (q != Quantity::Energy).then(|| {
        let mut gv = DVector::zeros(n);
        gv[0] = g[0];
        gv[1] = g[1];
        gv
    });
    let hessian = (q == Quantity::Hessian).then(|| {
        let mut hm = DMatrix::zeros(n, n);
        hm[(0, 0)] = h[0];
        hm[(0, 1)] = h[1];
        hm[(1, 0)] = h[1];
        hm[(1, 1)] = h[2];
        hm
    });
    Answer {
        energy: v,
        gradient,
        hessian,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    // Stationary points and energies: ../shared/notes/reference-values.md §1.1 [C], which
    // reproduces the commonly tabulated values of Müller & Brown (1979).
    #[test]
    fn energies_at_published_stationary_points() {
        let pts = [
            (-0.558_223_635, 1.441_725_842, -146.699_517_210),
            (0.623_499_405, 0.028_037_759, -108.166_724_117),
            (-0.050_010_823, 0.466_694_105, -80.767_818_130),
            (-0.822_001_559, 0.624_312_803, -40.664_843_509),
            (0.212_486_582, 0.292_988_325, -72.248_940_112),
        ];
        for (x, y, e) in pts {
            let (v, g, _) = muller_brown(x, y);
            assert!((v - e).abs() < 1e-6, "V({x},{y}) = {v}, expected {e}");
            assert!(g[0].abs() < 1e-4 && g[1].abs() < 1e-4, "gradient {g:?}");
        }
        // S1 Hessian (H_xx, H_xy, H_yy) = (−229.257212, 612.612469, −31.364743).
        let (_, _, h) = muller_brown(-0.822_001_559, 0.624_312_803);
        assert!((h[0] + 229.257_212).abs() < 1e-4);
        assert!((h[1] - 612.612_469).abs() < 1e-4);
        assert!((h[2] + 31.364_743).abs() < 1e-4);
    }

    #[test]
    fn derivatives_match_finite_differences() {
        let (x, y, d) = (-0.3, 0.9, 1e-5);
        let (_, g, h) = muller_brown(x, y);
        let fx = (muller_brown(x + d, y).0 - muller_brown(x - d, y).0) / (2.0 * d);
        let fy = (muller_brown(x, y + d).0 - muller_brown(x, y - d).0) / (2.0 * d);
        assert!((fx - g[0]).abs() < 1e-4 && (fy - g[1]).abs() < 1e-4);
        let hxy = (muller_brown(x, y + d).1[0] - muller_brown(x, y - d).1[0]) / (2.0 * d);
        assert!((hxy - h[1]).abs() < 1e-3);
    }
}

/// Lennard-Jones argon: V = Σ_{i<j} 4ε[(σ/r)¹² − (σ/r)⁶], an analytic potential of real atoms.
///
/// Parameters for argon: ε/k_B = 119.8 K, σ = 3.405 Å (Michels, Wijker & Wijker, Physica 15,
/// 627 (1949), the set widely used for liquid argon; from memory). Converted to atomic units
/// with CODATA 2018 (src/units.rs). Energies in Eh, coordinates in bohr.
pub mod lj_argon {
    use crate::eval::{Answer, Quantity};
    use crate::units::{BOHR_PER_ANGSTROM, BOLTZMANN, HARTREE_J};
    use nalgebra::{DMatrix, DVector};

    /// ε in Eh.
    pub fn epsilon() -> f64 {
        119.8 * BOLTZMANN / HARTREE_J
    }
    /// σ in bohr.
    pub fn sigma() -> f64 {
        3.405 * BOHR_PER_ANGSTROM
    }

    /// Energy, gradient and Hessian (as asked) of N argon atoms at flat coordinates (bohr).
    pub fn answer(x: &DVector<f64>, q: Quantity) -> Answer {
        let (eps, sig) = (epsilon(), sigma());
        let n = x.len() / 3;
        let mut e = 0.0;
        let mut g = DVector::zeros(3 * n);
        let mut h = DMatrix::zeros(3 * n, 3 * n);
        for i in 0..n {
            for j in (i + 1)..n {
                let d = [
                    x[3 * i] - x[3 * j],
                    x[3 * i + 1] - x[3 * j + 1],
                    x[3 * i + 2] - x[3 * j + 2],
                ];
                let r2 = d[0] * d[0] + d[1] * d[1] + d[2] * d[2];
                let r = r2.sqrt();
                let s6 = (sig * sig / r2).powi(3);
                let s12 = s6 * s6;
                e += 4.0 * eps * (s12 - s6);
                // dV/dr and d²V/dr²
                let v1 = 4.0 * eps * (-12.0 * s12 + 6.0 * s6) / r;
                let v2 = 4.0 * eps * (156.0 * s12 - 42.0 * s6) / r2;
                for k in 0..3 {
                    let u = d[k] / r;
                    g[3 * i + k] += v1 * u;
                    g[3 * j + k] -= v1 * u;
                }
                if q == Quantity::Hessian {
                    for a in 0..3 {
                        for b in 0..3 {
                            let (ua, ub) = (d[a] / r, d[b] / r);
                            let delta = if a == b { 1.0 } else { 0.0 };
                            let block = (v2 - v1 / r) * ua * ub + v1 / r * delta;
                            h[(3 * i + a, 3 * i + b)] += block;
                            h[(3 * j + a, 3 * j + b)] += block;
                            h[(3 * i + a, 3 * j + b)] -= block;
                            h[(3 * j + a, 3 * i + b)] -= block;
                        }
                    }
                }
            }
        }
        Answer {
            energy: e,
            gradient: (q != Quantity::Energy).then_some(g),
            hessian: (q == Quantity::Hessian).then_some(h),
        }
    }

    #[cfg(test)]
    mod tests {
        use super::*;
        use crate::algo::minimize::{MinOptions, Minimizer};
        use crate::algo::run_sync;
        use crate::geom::Frame;

        #[test]
        fn dimer_minimum_is_at_two_to_the_sixth_sigma() {
            // Analytic fact of the LJ form: minimum at r = 2^(1/6) σ with depth ε.
            let r = 2f64.powf(1.0 / 6.0) * sigma();
            let x = DVector::from_vec(vec![0.0, 0.0, 0.0, 0.0, 0.0, r]);
            let a = answer(&x, Quantity::Gradient);
            assert!((a.energy + epsilon()).abs() < 1e-15);
            assert!(a.gradient.unwrap().norm() < 1e-12);
            // ε = 119.8 K × k_B = 3.7938e-4 Eh (CODATA 2018 conversion).
            assert!((epsilon() - 3.7938e-4).abs() < 1e-7);
        }

        #[test]
        fn derivatives_match_finite_differences() {
            let x = DVector::from_vec(vec![
                0.1, 0.2, -0.1, 7.1, 0.3, 0.2, 3.0, 6.4, -0.4, 1.0, 2.0, 6.5,
            ]);
            let a = answer(&x, Quantity::Hessian);
            let g = a.gradient.unwrap();
            let hm = a.hessian.unwrap();
            let d = 1e-5;
            for k in 0..x.len() {
                let mut xp = x.clone();
                xp[k] += d;
                let mut xm = x.clone();
                xm[k] -= d;
                let ap = answer(&xp, Quantity::Gradient);
                let am = answer(&xm, Quantity::Gradient);
                let fd = (ap.energy - am.energy) / (2.0 * d);
                assert!((fd - g[k]).abs() < 1e-9, "gradient {k}");
                let col = (ap.gradient.unwrap() - am.gradient.unwrap()) / (2.0 * d);
                for m in 0..x.len() {
                    assert!((col[m] - hm[(m, k)]).abs() < 1e-8, "hessian {m},{k}");
                }
            }
        }

        fn relax(x0: DVector<f64>) -> f64 {
            let opts = MinOptions {
                convergence: crate::algo::common::Convergence::default().scaled(1e-3),
                max_iterations: 500,
                ..MinOptions::default()
            };
            let mut m = Minimizer::new(x0, Frame::Molecule, opts);
            let (v, _) = run_sync(&mut m, |p| answer(&p.coords, p.quantity), 2000).unwrap();
            assert!(v.converged, "{}", v.reason);
            v.energy / epsilon()
        }

        #[test]
        fn seven_atom_cluster_relaxes_to_the_pentagonal_bipyramid() {
            // Global minimum of LJ7 (pentagonal bipyramid): −16.505384 ε (D. J. Wales and
            // J. P. K. Doye, J. Phys. Chem. A 101, 5111 (1997); from memory).
            let s = sigma();
            let d = 1.12 * s;
            let ring = d / (2.0 * (36f64).to_radians().sin());
            let h = (d * d - ring * ring).sqrt();
            let mut c = Vec::new();
            for k in 0..5 {
                let t = (72.0 * k as f64 + 3.0 * k as f64).to_radians(); // slightly distorted
                c.extend([ring * t.cos(), ring * t.sin(), 0.02 * s * k as f64]);
            }
            c.extend([0.0, 0.0, h]);
            c.extend([0.05 * s, 0.0, -h]);
            let e = relax(DVector::from_vec(c));
            assert!((e + 16.505_384).abs() < 1e-4, "E/ε = {e}");
        }

        #[test]
        fn thirteen_atom_cluster_relaxes_to_the_icosahedron() {
            // Global minimum of LJ13 (Mackay icosahedron): −44.326801 ε (Wales & Doye 1997;
            // from memory).
            let phi = (1.0 + 5f64.sqrt()) / 2.0;
            let scale = 1.09 * sigma() / 2.0; // icosahedron edge 2·scale ≈ 1.09 σ
            let mut c = vec![0.0, 0.0, 0.0];
            let verts = [
                (0.0, 1.0, phi),
                (0.0, -1.0, phi),
                (0.0, 1.0, -phi),
                (0.0, -1.0, -phi),
                (1.0, phi, 0.0),
                (-1.0, phi, 0.0),
                (1.0, -phi, 0.0),
                (-1.0, -phi, 0.0),
                (phi, 0.0, 1.0),
                (-phi, 0.0, 1.0),
                (phi, 0.0, -1.0),
                (-phi, 0.0, -1.0),
            ];
            for (k, (a, b, cc)) in verts.iter().enumerate() {
                let jitter = 0.01 * (k as f64 - 6.0) / 6.0;
                c.extend([scale * (a + jitter), scale * b, scale * (cc - jitter)]);
            }
            let e = relax(DVector::from_vec(c));
            assert!((e + 44.326_801).abs() < 1e-4, "E/ε = {e}");
        }
    }
}
