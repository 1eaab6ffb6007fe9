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
