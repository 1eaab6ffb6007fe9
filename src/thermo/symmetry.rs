//! Point-group detection and the rotational symmetry number σ.
//!
//! σ is the number of proper rotations (identity included) that map the molecule onto itself
//! (common practice; e.g. C. J. Cramer, *Essentials of Computational Chemistry*, 2nd ed., §10.3,
//! from memory). We find those rotations directly: candidate axes are the principal axes of
//! inertia, the directions to atoms, to midpoints of same-element atom pairs, and the normals of
//! same-element atom pairs at the same distance from the centre of mass, and the differences of
//! such pairs (mirror normals); on each axis the
//! rotations by 2πk/n (n ≤ 8) and the improper operations −R are tried. The point-group label
//! follows from the counts of proper rotations, mirrors and improper operations.

use crate::elements::Element;
use nalgebra::{Matrix3, Rotation3, Unit, Vector3};
use serde::Serialize;

/// Default matching tolerance for symmetry detection, Å.
pub const DEFAULT_SYMMETRY_TOL_ANGSTROM: f64 = 0.02;

/// The result of detection.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct PointGroup {
    /// Schoenflies label, e.g. "C2v", "D∞h", "Td" ("?" when the counts fit no group we name).
    pub label: String,
    /// Rotational symmetry number σ.
    pub sigma: u32,
    /// Every atom on one line (within the tolerance).
    pub linear: bool,
}

/// Is the molecule linear: every atom within `tol` Å of the line through the centre of mass
/// along the axis of the smallest moment of inertia? One atom counts as not linear.
pub fn is_linear(coords_ang: &[[f64; 3]], masses: &[f64], tol: f64) -> bool {
    if coords_ang.len() < 2 {
        return false;
    }
    let pts = centred(coords_ang, masses);
    let axes = principal_axes(&pts, masses);
    // Smallest moment first (sorted ascending).
    let a = axes[0];
    pts.iter().all(|p| (p - a * p.dot(&a)).norm() <= tol)
}

/// Detect the point group of a geometry (Å, masses in u) with matching tolerance `tol` Å.
pub fn detect(
    elements: &[Element],
    coords_ang: &[[f64; 3]],
    masses: &[f64],
    tol: f64,
) -> PointGroup {
    let n = elements.len().min(coords_ang.len()).min(masses.len());
    let elements = &elements[..n];
    let masses = &masses[..n];
    if n <= 1 {
        return PointGroup {
            label: "Kh".into(),
            sigma: 1,
            linear: false,
        };
    }
    let pts = centred(&coords_ang[..n], masses);
    if is_linear(&coords_ang[..n], masses, tol) {
        let inv = maps_onto(&(-Matrix3::identity()), &pts, elements, tol);
        return PointGroup {
            label: if inv { "D∞h" } else { "C∞v" }.into(),
            sigma: if inv { 2 } else { 1 },
            linear: true,
        };
    }
    let axes = candidate_axes(&pts, elements, masses, tol);
    let mut proper: Vec<Matrix3<f64>> = vec![Matrix3::identity()];
    let mut improper: Vec<Matrix3<f64>> = Vec::new();
    let mut n_max = 1u32;
    if maps_onto(&(-Matrix3::identity()), &pts, elements, tol) {
        improper.push(-Matrix3::identity());
    }
    for ax in &axes {
        for order in 2..=8u32 {
            for k in 1..order {
                let angle = 2.0 * std::f64::consts::PI * f64::from(k) / f64::from(order);
                let r = Rotation3::from_axis_angle(&Unit::new_normalize(*ax), angle).into_inner();
                if !contains(&proper, &r) && maps_onto(&r, &pts, elements, tol) {
                    proper.push(r);
                    if k == 1 {
                        n_max = n_max.max(order);
                    }
                }
                let s = -r;
                if !contains(&improper, &s) && maps_onto(&s, &pts, elements, tol) {
                    improper.push(s);
                }
            }
        }
    }
    let sigma = u32::try_from(proper.len()).unwrap_or(u32::MAX);
    let mirrors = improper
        .iter()
        .filter(|m| (m.trace() - 1.0).abs() < 1e-6)
        .count() as u32;
    let has_inv = improper.iter().any(|m| (m.trace() + 3.0).abs() < 1e-6);
    let label = classify(sigma, n_max, mirrors, improper.len() as u32, has_inv);
    PointGroup {
        label,
        sigma,
        linear: false,
    }
}

fn classify(rot: u32, n: u32, mirrors: u32, impropers: u32, inv: bool) -> String {
    if rot == 1 {
        return if inv {
            "Ci"
        } else if mirrors > 0 {
            "Cs"
        } else {
            "C1"
        }
        .into();
    }
    match rot {
        12 => {
            return match mirrors {
                0 => "T",
                3 => "Th",
                6 => "Td",
                _ => "?",
            }
            .into()
        }
        24 => return if mirrors > 0 { "Oh" } else { "O" }.into(),
        60 => return if mirrors > 0 { "Ih" } else { "I" }.into(),
        _ => {}
    }
    if rot == n {
        if impropers == 0 {
            format!("C{n}")
        } else if mirrors == 1 {
            format!("C{n}h")
        } else if mirrors == n {
            format!("C{n}v")
        } else if mirrors == 0 {
            format!("S{}", 2 * n)
        } else {
            "?".into()
        }
    } else if rot == 2 * n {
        if impropers == 0 {
            format!("D{n}")
        } else if mirrors == n + 1 {
            format!("D{n}h")
        } else if mirrors == n {
            format!("D{n}d")
        } else {
            "?".into()
        }
    } else {
        "?".into()
    }
}

fn centred(coords: &[[f64; 3]], masses: &[f64]) -> Vec<Vector3<f64>> {
    let mtot: f64 = masses.iter().sum();
    let mut com = Vector3::zeros();
    for (c, m) in coords.iter().zip(masses) {
        com += Vector3::new(c[0], c[1], c[2]) * *m;
    }
    if mtot > 0.0 {
        com /= mtot;
    }
    coords
        .iter()
        .map(|c| Vector3::new(c[0], c[1], c[2]) - com)
        .collect()
}

/// Inertia tensor (u Å²) of centred points.
pub(crate) fn inertia_tensor(pts: &[Vector3<f64>], masses: &[f64]) -> Matrix3<f64> {
    let mut t = Matrix3::zeros();
    for (p, m) in pts.iter().zip(masses) {
        t += (Matrix3::identity() * p.dot(p) - p * p.transpose()) * *m;
    }
    t
}

/// Principal axes, sorted by ascending moment.
fn principal_axes(pts: &[Vector3<f64>], masses: &[f64]) -> Vec<Vector3<f64>> {
    let eig = inertia_tensor(pts, masses).symmetric_eigen();
    let mut idx = [0usize, 1, 2];
    idx.sort_by(|&a, &b| eig.eigenvalues[a].total_cmp(&eig.eigenvalues[b]));
    idx.iter()
        .map(|&i| eig.eigenvectors.column(i).into_owned())
        .collect()
}

fn candidate_axes(
    pts: &[Vector3<f64>],
    elements: &[Element],
    masses: &[f64],
    tol: f64,
) -> Vec<Vector3<f64>> {
    let mut axes: Vec<Vector3<f64>> = Vec::new();
    let push = |v: Vector3<f64>, axes: &mut Vec<Vector3<f64>>| {
        let nrm = v.norm();
        if nrm < 1e-6 {
            return;
        }
        let u = v / nrm;
        if !axes.iter().any(|a| a.dot(&u).abs() > 1.0 - 1e-8) {
            axes.push(u);
        }
    };
    for a in principal_axes(pts, masses) {
        push(a, &mut axes);
    }
    for p in pts {
        if p.norm() > tol {
            push(*p, &mut axes);
        }
    }
    for i in 0..pts.len() {
        for j in (i + 1)..pts.len() {
            if elements[i] != elements[j] || (pts[i].norm() - pts[j].norm()).abs() > 2.0 * tol {
                continue;
            }
            let mid = (pts[i] + pts[j]) * 0.5;
            if mid.norm() > tol {
                push(mid, &mut axes);
            }
            push(pts[i].cross(&pts[j]), &mut axes);
            push(pts[i] - pts[j], &mut axes);
        }
    }
    axes
}

fn contains(set: &[Matrix3<f64>], m: &Matrix3<f64>) -> bool {
    set.iter().any(|s| (s - m).norm() < 1e-6)
}

/// Does the operation `op` map every atom onto an atom of the same element within `tol`?
fn maps_onto(op: &Matrix3<f64>, pts: &[Vector3<f64>], elements: &[Element], tol: f64) -> bool {
    pts.iter().zip(elements).all(|(p, e)| {
        let q = op * p;
        pts.iter()
            .zip(elements)
            .any(|(r, f)| f == e && (q - r).norm() <= tol)
    })
}
