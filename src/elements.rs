//! The element table.
//!
//! Sources, per column:
//! - standard atomic weights: IUPAC/CIAAW, "Standard atomic weights of the elements 2021"
//!   (Pure Appl. Chem. 2022), abridged conventional values (from memory);
//! - mass of the most abundant isotope: the Atomic Mass Evaluation AME2020 (Wang, Huang, Kondev,
//!   Naimi, Chin. Phys. C 45, 030003 (2021)) (from memory);
//! - covalent radii: B. Cordero et al., "Covalent radii revisited", Dalton Trans. 2832 (2008),
//!   in Å (from memory; for C the sp3 value 0.76 is used).
//!
//! The pseudo-atom `X` (atomic number 0) stands for a point on a model surface: unit mass, no
//! electrons, no covalent radius.

use serde::{Deserialize, Serialize};

/// One row of the table.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ElementData {
    pub z: u8,
    pub symbol: &'static str,
    /// Standard atomic weight, u.
    pub standard_weight: f64,
    /// Mass of the most abundant isotope, u.
    pub isotope_mass: f64,
    /// Covalent radius, Å.
    pub covalent_radius: f64,
}

const fn e(z: u8, symbol: &'static str, w: f64, m: f64, r: f64) -> ElementData {
    ElementData {
        z,
        symbol,
        standard_weight: w,
        isotope_mass: m,
        covalent_radius: r,
    }
}

/// Index 0 is the pseudo-atom X.
pub static TABLE: &[ElementData] = &[
    e(0, "X", 1.0, 1.0, 0.0),
    e(1, "H", 1.008, 1.007_825_032_23, 0.31),
    e(2, "He", 4.002_602, 4.002_603_254_13, 0.28),
    e(3, "Li", 6.94, 7.016_003_436_6, 1.28),
    e(4, "Be", 9.012_183_1, 9.012_183_065, 0.96),
    e(5, "B", 10.81, 11.009_305_36, 0.84),
    e(6, "C", 12.011, 12.0, 0.76),
    e(7, "N", 14.007, 14.003_074_004_43, 0.71),
    e(8, "O", 15.999, 15.994_914_619_57, 0.66),
    e(9, "F", 18.998_403_163, 18.998_403_162_73, 0.57),
    e(10, "Ne", 20.1797, 19.992_440_176_2, 0.58),
    e(11, "Na", 22.989_769_28, 22.989_769_282_0, 1.66),
    e(12, "Mg", 24.305, 23.985_041_697, 1.41),
    e(13, "Al", 26.981_538_4, 26.981_538_41, 1.21),
    e(14, "Si", 28.085, 27.976_926_534_65, 1.11),
    e(15, "P", 30.973_761_998, 30.973_761_998_42, 1.07),
    e(16, "S", 32.06, 31.972_071_174_4, 1.05),
    e(17, "Cl", 35.45, 34.968_852_682, 1.02),
    e(18, "Ar", 39.948, 39.962_383_123_7, 1.06),
];

/// An element (or the pseudo-atom X), by atomic number.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord, Serialize, Deserialize)]
#[serde(transparent)]
pub struct Element(pub u8);

impl Element {
    pub const X: Element = Element(0);

    /// Look an element up by symbol, case-insensitively ("c", "C", "CL", "Cl").
    pub fn from_symbol(s: &str) -> Option<Element> {
        let s = s.trim();
        TABLE
            .iter()
            .find(|d| d.symbol.eq_ignore_ascii_case(s))
            .map(|d| Element(d.z))
    }

    pub fn from_z(z: u32) -> Option<Element> {
        TABLE.iter().find(|d| u32::from(d.z) == z).map(|d| Element(d.z))
    }

    pub fn data(self) -> &'static ElementData {
        // Element values are only made through from_symbol/from_z, so the row exists.
        TABLE
            .iter()
            .find(|d| d.z == self.0)
            .unwrap_or(&TABLE[0])
    }

    pub fn symbol(self) -> &'static str {
        self.data().symbol
    }
    pub fn z(self) -> u32 {
        u32::from(self.0)
    }
    /// Mass of the most abundant isotope, u (the mass used for frequencies and IRC).
    pub fn mass(self) -> f64 {
        self.data().isotope_mass
    }
    pub fn standard_weight(self) -> f64 {
        self.data().standard_weight
    }
    /// Covalent radius in Å.
    pub fn covalent_radius(self) -> f64 {
        self.data().covalent_radius
    }
    pub fn is_pseudo(self) -> bool {
        self.0 == 0
    }
}

impl std::fmt::Display for Element {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(self.symbol())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn lookups() {
        assert_eq!(Element::from_symbol("c"), Some(Element(6)));
        assert_eq!(Element::from_symbol("CL").map(|e| e.z()), Some(17));
        assert_eq!(Element::from_symbol("Xx"), None);
        assert_eq!(Element::from_symbol("X"), Some(Element::X));
        assert_eq!(Element::from_z(8).map(|e| e.symbol()), Some("O"));
    }

    #[test]
    fn table_is_ordered_and_consistent() {
        for (i, d) in TABLE.iter().enumerate() {
            assert_eq!(usize::from(d.z), i, "row {i} out of order");
            if d.z > 0 {
                // isotope mass and standard weight differ by less than 1.1 u for light elements
                assert!((d.isotope_mass - d.standard_weight).abs() < 1.5, "{}", d.symbol);
            }
        }
    }

    // H2O molar mass from isotope masses: 18.010 564 68 u (reference-values.md §4.1 [C]).
    #[test]
    fn water_isotope_mass() {
        let m = 2.0 * Element(1).mass() + Element(8).mass();
        assert!((m - 18.010_564_68).abs() < 1e-7);
    }
}
