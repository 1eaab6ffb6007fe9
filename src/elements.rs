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
//! Rows cover H–Ba (Z = 1–56) and Hf–Bi (Z = 72–83); lanthanides and elements beyond Bi are
//! not in the table (reading them gives an "unknown element" error). For Tc, which has no
//! standard atomic weight, the mass number 98 is used. Where Cordero lists low- and high-spin
//! radii (Mn, Fe, Co) the low-spin value is used.
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

/// Sorted by atomic number; row 0 is the pseudo-atom X.
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
    e(19, "K", 39.0983, 38.9637064864, 2.03),
    e(20, "Ca", 40.078, 39.962590863, 1.76),
    e(21, "Sc", 44.955907, 44.95590828, 1.70),
    e(22, "Ti", 47.867, 47.94794198, 1.60),
    e(23, "V", 50.9415, 50.94395704, 1.53),
    e(24, "Cr", 51.9961, 51.94050623, 1.39),
    e(25, "Mn", 54.938043, 54.93804391, 1.39),
    e(26, "Fe", 55.845, 55.93493633, 1.32),
    e(27, "Co", 58.933194, 58.93319429, 1.26),
    e(28, "Ni", 58.6934, 57.93534241, 1.24),
    e(29, "Cu", 63.546, 62.92959772, 1.32),
    e(30, "Zn", 65.38, 63.92914201, 1.22),
    e(31, "Ga", 69.723, 68.9255735, 1.22),
    e(32, "Ge", 72.630, 73.921177761, 1.20),
    e(33, "As", 74.921595, 74.92159457, 1.19),
    e(34, "Se", 78.971, 79.9165218, 1.20),
    e(35, "Br", 79.904, 78.9183376, 1.20),
    e(36, "Kr", 83.798, 83.9114977282, 1.16),
    e(37, "Rb", 85.4678, 84.9117897379, 2.20),
    e(38, "Sr", 87.62, 87.9056125, 1.95),
    e(39, "Y", 88.905838, 88.9058403, 1.90),
    e(40, "Zr", 91.224, 89.9046977, 1.75),
    e(41, "Nb", 92.90637, 92.906373, 1.64),
    e(42, "Mo", 95.95, 97.90540482, 1.54),
    e(43, "Tc", 98.0, 97.9072124, 1.47),
    e(44, "Ru", 101.07, 101.9043441, 1.46),
    e(45, "Rh", 102.90549, 102.905498, 1.42),
    e(46, "Pd", 106.42, 105.9034804, 1.39),
    e(47, "Ag", 107.8682, 106.9050916, 1.45),
    e(48, "Cd", 112.414, 113.90336509, 1.44),
    e(49, "In", 114.818, 114.903878776, 1.42),
    e(50, "Sn", 118.710, 119.90220163, 1.39),
    e(51, "Sb", 121.760, 120.903812, 1.39),
    e(52, "Te", 127.60, 129.906222748, 1.38),
    e(53, "I", 126.90447, 126.9044719, 1.39),
    e(54, "Xe", 131.293, 131.9041550856, 1.40),
    e(55, "Cs", 132.90545196, 132.905451961, 2.44),
    e(56, "Ba", 137.327, 137.905247, 2.15),
    e(72, "Hf", 178.486, 179.946557, 1.75),
    e(73, "Ta", 180.94788, 180.9479958, 1.70),
    e(74, "W", 183.84, 183.95093092, 1.62),
    e(75, "Re", 186.207, 186.9557501, 1.51),
    e(76, "Os", 190.23, 191.961477, 1.44),
    e(77, "Ir", 192.217, 192.9629216, 1.41),
    e(78, "Pt", 195.084, 194.9647917, 1.36),
    e(79, "Au", 196.966570, 196.96656879, 1.36),
    e(80, "Hg", 200.592, 201.9706434, 1.32),
    e(81, "Tl", 204.38, 204.9744278, 1.45),
    e(82, "Pb", 207.2, 207.9766525, 1.46),
    e(83, "Bi", 208.98040, 208.9803991, 1.48),
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
        TABLE
            .iter()
            .find(|d| u32::from(d.z) == z)
            .map(|d| Element(d.z))
    }

    pub fn data(self) -> &'static ElementData {
        // Element values are only made through from_symbol/from_z, so the row exists.
        TABLE.iter().find(|d| d.z == self.0).unwrap_or(&TABLE[0])
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
        for w in TABLE.windows(2) {
            assert!(w[0].z < w[1].z, "{} before {}", w[0].symbol, w[1].symbol);
        }
        for d in TABLE.iter().filter(|d| d.z > 0) {
            // The most abundant isotope lies within 2.5 u of the standard atomic weight for every
            // element in the table (fact of the trade: isotope spreads are small).
            assert!(
                (d.isotope_mass - d.standard_weight).abs() < 2.5,
                "{}",
                d.symbol
            );
            // Mass number of the isotope is between Z and 3 Z (common practice sanity bound).
            let a = d.isotope_mass.round();
            assert!(
                a >= f64::from(d.z) && a <= 3.0 * f64::from(d.z),
                "{}",
                d.symbol
            );
            assert!(
                d.covalent_radius > 0.2 && d.covalent_radius < 2.5,
                "{}",
                d.symbol
            );
        }
        assert_eq!(Element::from_symbol("Pt").map(|e| e.z()), Some(78));
        assert_eq!(Element::from_symbol("Nd"), None);
    }

    // Cordero et al. (2008) radii for C (sp3), N, O: 0.76, 0.71, 0.66 Å (from memory).
    #[test]
    fn covalent_radii_sample() {
        assert_eq!(Element(6).covalent_radius(), 0.76);
        assert_eq!(Element(7).covalent_radius(), 0.71);
        assert_eq!(Element(8).covalent_radius(), 0.66);
    }

    // H2O molar mass from isotope masses: 18.010 564 68 u (reference-values.md §4.1 [C]).
    #[test]
    fn water_isotope_mass() {
        let m = 2.0 * Element(1).mass() + Element(8).mass();
        assert!((m - 18.010_564_68).abs() < 1e-7);
    }
}
