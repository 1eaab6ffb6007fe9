//! Molecules: elements, coordinates (bohr, internally), charge and multiplicity.

use crate::elements::Element;
use crate::error::{Error, Result};
use nalgebra::DVector;
use serde::{Deserialize, Serialize};

/// A molecule, or a point on a model surface (all atoms are the pseudo-atom X).
///
/// Coordinates are in bohr for real atoms. For a model surface they are the surface's own
/// coordinates, never converted.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Molecule {
    pub elements: Vec<Element>,
    /// N rows of x, y, z (bohr, or surface units).
    pub coords: Vec<[f64; 3]>,
    pub charge: i32,
    pub multiplicity: u32,
    /// The XYZ comment line this geometry came with (kept on write).
    #[serde(default)]
    pub comment: String,
}

impl Molecule {
    pub fn new(elements: Vec<Element>, coords: Vec<[f64; 3]>) -> Self {
        Molecule {
            elements,
            coords,
            charge: 0,
            multiplicity: 1,
            comment: String::new(),
        }
    }

    pub fn len(&self) -> usize {
        self.elements.len()
    }
    pub fn is_empty(&self) -> bool {
        self.elements.is_empty()
    }

    /// True when every atom is the pseudo-atom X: a point on a 2-D model surface.
    pub fn is_model_surface(&self) -> bool {
        !self.elements.is_empty() && self.elements.iter().all(|e| e.is_pseudo())
    }

    /// Coordinates as one flat vector (x1, y1, z1, x2, ...).
    pub fn flat(&self) -> DVector<f64> {
        DVector::from_iterator(
            3 * self.len(),
            self.coords.iter().flat_map(|c| c.iter().copied()),
        )
    }

    /// Replace the coordinates from a flat vector of length 3N.
    pub fn with_flat(&self, x: &DVector<f64>) -> Molecule {
        let mut m = self.clone();
        m.coords = (0..self.len())
            .map(|i| [x[3 * i], x[3 * i + 1], x[3 * i + 2]])
            .collect();
        m
    }

    /// Masses (u) of the most abundant isotopes, one per atom.
    pub fn masses(&self) -> Vec<f64> {
        self.elements.iter().map(|e| e.mass()).collect()
    }

    /// Number of electrons for the current charge (never negative for a valid molecule).
    pub fn electron_count(&self) -> i64 {
        self.elements.iter().map(|e| i64::from(e.z())).sum::<i64>() - i64::from(self.charge)
    }

    /// Check that charge and multiplicity are possible for these atoms.
    ///
    /// A multiplicity M needs M−1 unpaired electrons: M−1 must not exceed the electron count
    /// and must have the same parity. Model surfaces have no electrons and skip the check.
    pub fn check_charge_multiplicity(&self) -> Result<()> {
        if self.is_model_surface() {
            return Ok(());
        }
        let formula = self.formula();
        if self.multiplicity == 0 {
            return Err(Error::invalid(format!(
                "{formula}: multiplicity must be at least 1 (1 = singlet, 2 = doublet, ...), got 0"
            )));
        }
        let n = self.electron_count();
        if n < 0 {
            return Err(Error::invalid(format!(
                "{formula} with charge {} would have {n} electrons; lower the charge",
                self.charge
            )));
        }
        let unpaired = i64::from(self.multiplicity) - 1;
        if unpaired > n {
            return Err(Error::invalid(format!(
                "{formula} with charge {} has {n} electrons, too few for multiplicity {} ({} unpaired)",
                self.charge, self.multiplicity, unpaired
            )));
        }
        if (n - unpaired) % 2 != 0 {
            let suggestion = if n % 2 == 0 {
                "an even electron count needs an odd multiplicity (1 singlet, 3 triplet, ...)"
            } else {
                "an odd electron count needs an even multiplicity (2 doublet, 4 quartet, ...)"
            };
            return Err(Error::invalid(format!(
                "{formula} with charge {} has {n} electrons, which cannot form multiplicity {}: {suggestion}",
                self.charge, self.multiplicity
            )));
        }
        Ok(())
    }

    /// Hill-order formula, e.g. "CH4O", "H2O".
    pub fn formula(&self) -> String {
        let mut counts: std::collections::BTreeMap<&str, usize> = Default::default();
        for e in &self.elements {
            *counts.entry(e.symbol()).or_default() += 1;
        }
        let mut out = String::new();
        let mut push = |s: &str, n: usize| {
            out.push_str(s);
            if n > 1 {
                out.push_str(&n.to_string());
            }
        };
        let has_c = counts.contains_key("C");
        if has_c {
            if let Some(n) = counts.remove("C") {
                push("C", n);
            }
            if let Some(n) = counts.remove("H") {
                push("H", n);
            }
        }
        for (s, n) in counts {
            push(s, n);
        }
        out
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn water() -> Molecule {
        Molecule::new(
            vec![Element(8), Element(1), Element(1)],
            vec![[0.0; 3], [1.4, 0.0, 1.1], [-1.4, 0.0, 1.1]],
        )
    }

    #[test]
    fn water_doublet_is_rejected_with_reason() {
        let mut m = water();
        m.multiplicity = 2;
        let err = m.check_charge_multiplicity().unwrap_err().to_string();
        assert!(err.contains("10 electrons"), "{err}");
        assert!(err.contains("odd multiplicity"), "{err}");
        m.multiplicity = 1;
        m.check_charge_multiplicity().unwrap();
        m.multiplicity = 3;
        m.check_charge_multiplicity().unwrap();
        m.charge = 1;
        m.multiplicity = 2;
        m.check_charge_multiplicity().unwrap();
        m.charge = 11;
        assert!(m.check_charge_multiplicity().is_err());
        m.charge = 0;
        m.multiplicity = 0;
        assert!(m.check_charge_multiplicity().is_err());
        m.multiplicity = 13;
        assert!(m.check_charge_multiplicity().is_err());
    }

    #[test]
    fn formula_hill_order() {
        assert_eq!(water().formula(), "H2O");
        let m = Molecule::new(
            vec![Element(1), Element(6), Element(7)],
            vec![[0.0; 3], [0.0; 3], [0.0; 3]],
        );
        assert_eq!(m.formula(), "CHN");
    }
}
