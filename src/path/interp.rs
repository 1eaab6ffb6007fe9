//! Initial paths between two aligned ends: linear Cartesian interpolation and the image
//! dependent pair potential (IDPP) of S. Smidstrup, A. Pedersen, K. Stokbro and H. Jónsson,
//! J. Chem. Phys. 140, 214106 (2014).
//!
//! IDPP: image k of M (ends are 0 and M−1) gets target pair distances
//! d_ij^k = d_ij^0 + k/(M−1) (d_ij^{M−1} − d_ij^0) and the objective
//! S_k(x) = Σ_{i<j} w(d_ij) (d_ij^k − d_ij)², w(d) = 1/d⁴ (paper, eq. 2). The band of linear
//! images is then relaxed as a nudged elastic band on these objectives (the paper's method),
//! without climbing, in-process (no engine is involved).

use super::fire::FireOptions;
use super::neb::{Neb, NebOptions};
use crate::algo::AlgoError;
use crate::geom::Frame;
use nalgebra::DVector;

/// How the first band is made.
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize, serde::Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Interpolation {
    Linear,
    Idpp,
}

/// `interior` images evenly spaced on the straight line between the ends; ends included.
pub fn linear(a: &DVector<f64>, b: &DVector<f64>, interior: usize) -> Vec<DVector<f64>> {
    let m = interior + 2;
    (0..m)
        .map(|k| {
            let t = k as f64 / (m - 1) as f64;
            a * (1.0 - t) + b * t
        })
        .collect()
}

fn pair_distances(x: &DVector<f64>) -> Vec<f64> {
    let n = x.len() / 3;
    let mut d = Vec::with_capacity(n * (n.saturating_sub(1)) / 2);
    for i in 0..n {
        for j in i + 1..n {
            d.push(dist(x, i, j));
        }
    }
    d
}

fn dist(x: &DVector<f64>, i: usize, j: usize) -> f64 {
    ((x[3 * i] - x[3 * j]).powi(2)
        + (x[3 * i + 1] - x[3 * j + 1]).powi(2)
        + (x[3 * i + 2] - x[3 * j + 2]).powi(2))
    .sqrt()
}

/// IDPP objective and gradient for one image with target pair distances `target`.
pub fn idpp_objective(x: &DVector<f64>, target: &[f64]) -> (f64, DVector<f64>) {
    let n = x.len() / 3;
    let mut s = 0.0;
    let mut g = DVector::zeros(x.len());
    let mut p = 0;
    for i in 0..n {
        for j in i + 1..n {
            let d = dist(x, i, j).max(1e-6);
            let t = target[p];
            p += 1;
            let r = t - d;
            let w = d.powi(-4);
            s += w * r * r;
            // dS/dd = −2 r / d⁴ − 4 r² / d⁵
            let dsdd = -2.0 * r * w - 4.0 * r * r * w / d;
            for k in 0..3 {
                let c = dsdd * (x[3 * i + k] - x[3 * j + k]) / d;
                g[3 * i + k] += c;
                g[3 * j + k] -= c;
            }
        }
    }
    (s, g)
}

/// Largest distance (bohr) of an atom of `x` from the line through its two farthest-apart atoms.
fn off_line(x: &DVector<f64>) -> f64 {
    let n = x.len() / 3;
    let (mut far, mut pair) = (0.0, (0, 0));
    for i in 0..n {
        for j in i + 1..n {
            let d = dist(x, i, j);
            if d > far {
                far = d;
                pair = (i, j);
            }
        }
    }
    if far < 1e-9 {
        return 0.0;
    }
    let at = |i: usize| nalgebra::Vector3::new(x[3 * i], x[3 * i + 1], x[3 * i + 2]);
    let o = at(pair.0);
    let u = (at(pair.1) - o) / far;
    (0..n)
        .map(|i| {
            let v = at(i) - o;
            (v - u * v.dot(&u)).norm()
        })
        .fold(0.0, f64::max)
}

/// Images closer than this (bohr) to one straight line count as collinear.
const COLLINEAR_BOHR: f64 = 0.1;

/// A band whose every image lies on one line (two linear ends on a common axis, e.g.
/// HCN → HNC) cannot leave that line under IDPP or band forces: every force is along the
/// axis by symmetry, so atoms pass through each other. Bow the interior images off the line,
/// each atom by half its end-to-end travel times sin(πt), all towards one perpendicular
/// direction; IDPP then finds a path around. Images that are not collinear are left as they are.
fn bow_if_collinear(images: &mut [DVector<f64>], a: &DVector<f64>, b: &DVector<f64>) {
    let m = images.len();
    if m < 3 || images.iter().any(|x| off_line(x) > COLLINEAR_BOHR) {
        return;
    }
    // The common axis: the direction of the longest pair in the first end.
    let n = a.len() / 3;
    let at =
        |x: &DVector<f64>, i: usize| nalgebra::Vector3::new(x[3 * i], x[3 * i + 1], x[3 * i + 2]);
    let (mut far, mut axis) = (0.0, nalgebra::Vector3::x());
    for i in 0..n {
        for j in i + 1..n {
            let v = at(a, j) - at(a, i);
            if v.norm() > far {
                far = v.norm();
                axis = v / far;
            }
        }
    }
    // A perpendicular: cross with the Cartesian axis least parallel to the molecular one.
    let helper = [
        nalgebra::Vector3::x(),
        nalgebra::Vector3::y(),
        nalgebra::Vector3::z(),
    ]
    .into_iter()
    .min_by(|p, q| axis.dot(p).abs().total_cmp(&axis.dot(q).abs()))
    .unwrap_or_else(nalgebra::Vector3::z);
    let perp = axis.cross(&helper).normalize();
    for (k, x) in images.iter_mut().enumerate().take(m - 1).skip(1) {
        let t = k as f64 / (m - 1) as f64;
        let s = (std::f64::consts::PI * t).sin();
        for i in 0..n {
            let travel = (at(b, i) - at(a, i)).norm();
            for c in 0..3 {
                x[3 * i + c] += 0.5 * travel * s * perp[c];
            }
        }
    }
}

/// IDPP band between aligned ends `a` and `b` with `interior` images; ends included.
/// Falls back to the linear path for fewer than two atoms (nothing to interpolate).
pub fn idpp(
    a: &DVector<f64>,
    b: &DVector<f64>,
    interior: usize,
) -> Result<Vec<DVector<f64>>, AlgoError> {
    let lin = linear(a, b, interior);
    if a.len() < 6 {
        return Ok(lin);
    }
    let m = interior + 2;
    let da = pair_distances(a);
    let db = pair_distances(b);
    let targets: Vec<Vec<f64>> = (0..m)
        .map(|k| {
            let t = k as f64 / (m - 1) as f64;
            da.iter().zip(&db).map(|(p, q)| p + t * (q - p)).collect()
        })
        .collect();
    let opts = NebOptions {
        spring: 0.1,
        climbing: false,
        perp_tol: 5e-4,
        climb_tol: 5e-4,
        climb_start: 0.0,
        climb_after: usize::MAX,
        max_iterations: 2000,
        fire: FireOptions {
            dt_start: 0.5,
            dt_max: 2.0,
            max_atom_step: 0.1,
        },
    };
    let mut start = lin;
    bow_if_collinear(&mut start, a, b);
    let mut neb = Neb::new(start, Frame::Molecule, opts)?;
    let v = neb.relax_with(|k, x| idpp_objective(x, &targets[k]));
    Ok(v.images)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn idpp_gradient_matches_finite_differences() {
        let x = DVector::from_vec(vec![0.0, 0.0, 0.1, 2.2, 0.3, 0.0, -0.4, 1.9, 0.2]);
        let target = [2.0, 2.1, 3.5];
        let (_, g) = idpp_objective(&x, &target);
        let h = 1e-6;
        for k in 0..9 {
            let mut xp = x.clone();
            xp[k] += h;
            let mut xm = x.clone();
            xm[k] -= h;
            let fd = (idpp_objective(&xp, &target).0 - idpp_objective(&xm, &target).0) / (2.0 * h);
            assert!((fd - g[k]).abs() < 1e-7, "component {k}: {fd} vs {}", g[k]);
        }
    }

    // HCN → HNC from the demo's end geometries (GFN2-xTB minima, both linear): the straight
    // line drives H through the C≡N bond; IDPP from the bowed start keeps C–N near its end
    // lengths (1.16–1.17 Å) and H at least ~1 Å from both heavy atoms (common practice: a
    // sensible start keeps bonded distances near their end values).
    #[test]
    fn idpp_leaves_the_line_for_linear_ends() {
        let a_ang = [
            0.26942730,
            1.05034437,
            -0.02803939,
            0.00655462,
            0.02555276,
            -0.00068214,
            -0.27598192,
            -1.07589713,
            0.02872154,
        ];
        let b_ang = [
            -0.26109747,
            -1.01787110,
            0.02717251,
            0.27441377,
            1.06978379,
            -0.02855834,
            -0.01331629,
            -0.05191269,
            0.00138583,
        ];
        let to_bohr = 1.0 / crate::units::ANGSTROM_PER_BOHR;
        let a = DVector::from_iterator(9, a_ang.iter().map(|v| v * to_bohr));
        let b0 = DVector::from_iterator(9, b_ang.iter().map(|v| v * to_bohr));
        let b = crate::path::align::kabsch(&a, &b0);
        let lin = linear(&a, &b, 8);
        assert!(lin.iter().all(|x| off_line(x) < COLLINEAR_BOHR));
        let path = idpp(&a, &b, 8).unwrap();
        let ang = |x: &DVector<f64>, i, j| dist(x, i, j) * crate::units::ANGSTROM_PER_BOHR;
        let cn_lin = lin.iter().map(|x| ang(x, 1, 2)).fold(f64::MAX, f64::min);
        assert!(cn_lin < 0.6, "the straight line squeezes C–N to {cn_lin} Å");
        for (k, x) in path.iter().enumerate() {
            let cn = ang(x, 1, 2);
            assert!((1.05..1.30).contains(&cn), "image {k}: C–N {cn} Å");
            let h_near = ang(x, 0, 1).min(ang(x, 0, 2));
            assert!(h_near > 0.9, "image {k}: H {h_near} Å from a heavy atom");
        }
        // The middle image is bent: H well off the C–N line.
        assert!(off_line(&path[5]) > 0.5, "{}", off_line(&path[5]));
        assert_eq!(path[0], a);
        assert_eq!(path[9], b);
    }

    // Rotation of a diatomic-like fragment: the linear path squeezes the bond through the
    // midpoint, IDPP keeps its length (the motivating case of Smidstrup et al. 2014, Fig. 1).
    #[test]
    fn idpp_keeps_bond_length_where_linear_collapses_it() {
        let a = DVector::from_vec(vec![0.0, 0.0, 0.0, 2.0, 0.0, 0.0, -1.0, 1.6, 0.0]);
        // the second atom swings 180° around the first; the third stays put
        let b = DVector::from_vec(vec![0.0, 0.0, 0.0, -2.0, 0.4, 0.0, -1.0, 1.6, 0.0]);
        let lin = linear(&a, &b, 5);
        let idp = idpp(&a, &b, 5).unwrap();
        let mid_lin = dist(&lin[3], 0, 1);
        let mid_idpp = dist(&idp[3], 0, 1);
        assert!(mid_lin < 0.3, "linear midpoint bond {mid_lin}");
        assert!(
            (mid_idpp - 2.0).abs() < 0.1,
            "IDPP midpoint bond {mid_idpp}"
        );
        // ends untouched
        assert_eq!(idp[0], a);
        assert_eq!(idp[6], b);
    }
}
