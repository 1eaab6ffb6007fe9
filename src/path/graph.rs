//! Connectivity: a bond graph from covalent radii and graph isomorphism with element labels.
//!
//! Two atoms are bonded when their distance is below `BOND_SCALE` × (r_i + r_j), with the
//! covalent radii of the element table (Cordero et al. 2008). A scale of 1.2–1.3 is common
//! practice; Cairn uses 1.25. Two geometries are "the same species" when their bond graphs are
//! isomorphic with element labels on the vertices (petgraph VF2). Model-surface points (atoms
//! X) have no bonds; for them "the same" means within `SURFACE_MATCH_DISTANCE`.

use crate::elements::Element;
use crate::molecule::Molecule;
use crate::units::BOHR_PER_ANGSTROM;
use nalgebra::DVector;
use petgraph::graph::UnGraph;
use serde::{Deserialize, Serialize};

/// Bond if d < BOND_SCALE (r_i + r_j) (common practice: 1.2–1.3).
pub const BOND_SCALE: f64 = 1.25;
/// Two model-surface points are the same minimum when closer than this (surface units).
pub const SURFACE_MATCH_DISTANCE: f64 = 0.05;

/// Bonds (i < j, 0-based) of a geometry with these elements and flat coordinates (bohr).
pub fn bonds(elements: &[Element], x: &DVector<f64>) -> Vec<(usize, usize)> {
    let n = elements.len().min(x.len() / 3);
    let mut out = Vec::new();
    for i in 0..n {
        for j in i + 1..n {
            if elements[i].is_pseudo() || elements[j].is_pseudo() {
                continue;
            }
            let r = BOND_SCALE
                * (elements[i].covalent_radius() + elements[j].covalent_radius())
                * BOHR_PER_ANGSTROM;
            let d2 = (0..3)
                .map(|k| (x[3 * i + k] - x[3 * j + k]).powi(2))
                .sum::<f64>();
            if d2 < r * r {
                out.push((i, j));
            }
        }
    }
    out
}

/// The bond graph: vertices are atoms labelled by element, edges are bonds.
pub fn bond_graph(elements: &[Element], x: &DVector<f64>) -> UnGraph<Element, ()> {
    let mut g = UnGraph::new_undirected();
    let nodes: Vec<_> = elements.iter().map(|e| g.add_node(*e)).collect();
    for (i, j) in bonds(elements, x) {
        g.add_edge(nodes[i], nodes[j], ());
    }
    g
}

/// Whether two geometries of the same elements have isomorphic bond graphs (element labels
/// must correspond; atom order may differ).
pub fn matches(elements: &[Element], a: &DVector<f64>, b: &DVector<f64>) -> bool {
    let ga = bond_graph(elements, a);
    let gb = bond_graph(elements, b);
    petgraph::algo::is_isomorphic_matching(&ga, &gb, |x, y| x == y, |_, _| true)
}

/// Whether two molecules are the same species: isomorphic labelled bond graphs for real
/// molecules (elements may be listed in any order), nearness for model-surface points.
pub fn same_species(a: &Molecule, b: &Molecule) -> bool {
    if a.len() != b.len() {
        return false;
    }
    if a.is_model_surface() || b.is_model_surface() {
        let (xa, xb) = (a.flat(), b.flat());
        return a.is_model_surface()
            && b.is_model_surface()
            && (xa - xb).norm() < SURFACE_MATCH_DISTANCE;
    }
    let ga = bond_graph(&a.elements, &a.flat());
    let gb = bond_graph(&b.elements, &b.flat());
    petgraph::algo::is_isomorphic_matching(&ga, &gb, |x, y| x == y, |_, _| true)
}

/// A bond that differs between two geometries (atoms 1-based, as chemists count them).
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct BondChange {
    pub i: usize,
    pub j: usize,
    pub formed: bool,
}

impl std::fmt::Display for BondChange {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(
            f,
            "{}-{} {}",
            self.i,
            self.j,
            if self.formed { "formed" } else { "broken" }
        )
    }
}

/// Bonds formed and broken going from `a` to `b` (same atom order).
pub fn bond_changes(elements: &[Element], a: &DVector<f64>, b: &DVector<f64>) -> Vec<BondChange> {
    let ba = bonds(elements, a);
    let bb = bonds(elements, b);
    let mut out: Vec<BondChange> = ba
        .iter()
        .filter(|p| !bb.contains(p))
        .map(|&(i, j)| BondChange {
            i: i + 1,
            j: j + 1,
            formed: false,
        })
        .collect();
    out.extend(
        bb.iter()
            .filter(|p| !ba.contains(p))
            .map(|&(i, j)| BondChange {
                i: i + 1,
                j: j + 1,
                formed: true,
            }),
    );
    out.sort_by_key(|c| (c.i, c.j));
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    fn el(s: &[&str]) -> Vec<Element> {
        s.iter().filter_map(|x| Element::from_symbol(x)).collect()
    }

    fn ang(v: &[f64]) -> DVector<f64> {
        DVector::from_iterator(v.len(), v.iter().map(|a| a * BOHR_PER_ANGSTROM))
    }

    // Formaldehyde H2C=O and trans-hydroxycarbene HC-OH, bond lengths roughly as in any
    // textbook (C=O 1.21 Å, C-H 1.10 Å, O-H 0.97 Å; from memory).
    fn formaldehyde() -> DVector<f64> {
        ang(&[
            0.0, 0.0, 0.0, 1.21, 0.0, 0.0, -0.58, 0.94, 0.0, -0.58, -0.94, 0.0,
        ])
    }
    fn hydroxycarbene() -> DVector<f64> {
        ang(&[
            0.0, 0.0, 0.0, 1.31, 0.0, 0.0, -0.45, -1.03, 0.0, 1.62, 0.92, 0.0,
        ])
    }

    #[test]
    fn bonds_and_changes_of_a_hydrogen_shift() {
        let e = el(&["C", "O", "H", "H"]);
        assert_eq!(bonds(&e, &formaldehyde()), vec![(0, 1), (0, 2), (0, 3)]);
        assert_eq!(bonds(&e, &hydroxycarbene()), vec![(0, 1), (0, 2), (1, 3)]);
        assert!(!matches(&e, &formaldehyde(), &hydroxycarbene()));
        let ch = bond_changes(&e, &formaldehyde(), &hydroxycarbene());
        let text: Vec<String> = ch.iter().map(|c| c.to_string()).collect();
        assert_eq!(text, vec!["1-4 broken", "2-4 formed"]);
    }

    #[test]
    fn isomorphism_ignores_atom_order_but_not_elements() {
        let e = el(&["C", "O", "H", "H"]);
        let a = Molecule::new(e.clone(), vec![[0.0; 3]; 4]).with_flat(&formaldehyde());
        // the same molecule with the atoms listed in another order
        let x = formaldehyde();
        let perm = [2, 0, 3, 1];
        let b = Molecule::new(
            perm.iter().map(|&p| e[p]).collect(),
            perm.iter()
                .map(|&p| [x[3 * p], x[3 * p + 1], x[3 * p + 2]])
                .collect(),
        );
        assert!(same_species(&a, &b));
        let c = a.with_flat(&hydroxycarbene());
        assert!(!same_species(&a, &c));
        // same graph shape, different labels: O and C swapped
        let mut d = a.clone();
        d.elements = el(&["O", "C", "H", "H"]);
        assert!(!same_species(&a, &d));
    }
}
