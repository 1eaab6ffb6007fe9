//! Physical constants and unit conversions, all from CODATA 2018.
//!
//! Source: E. Tiesinga, P. J. Mohr, D. B. Newell, B. N. Taylor, "CODATA recommended values of
//! the fundamental physical constants: 2018", Rev. Mod. Phys. 93, 025010 (2021).
//!
//! Internal units in Cairn are atomic units: energies in Hartree (Eh), lengths in Bohr,
//! masses in unified atomic mass units (amu, u) for nuclear masses. Conversions happen only
//! at the edges (reading/writing files, printing), and every printed number carries its unit.

/// Planck constant h, J s (exact).
pub const PLANCK: f64 = 6.626_070_15e-34;
/// Boltzmann constant k_B, J/K (exact).
pub const BOLTZMANN: f64 = 1.380_649e-23;
/// Avogadro constant N_A, 1/mol (exact).
pub const AVOGADRO: f64 = 6.022_140_76e23;
/// Speed of light in vacuum c, m/s (exact).
pub const SPEED_OF_LIGHT: f64 = 299_792_458.0;
/// Elementary charge e, C (exact).
pub const ELEMENTARY_CHARGE: f64 = 1.602_176_634e-19;
/// Molar gas constant R = N_A k_B, J/(mol K) (exact product).
pub const GAS_CONSTANT: f64 = AVOGADRO * BOLTZMANN;
/// Hartree energy E_h, J.
pub const HARTREE_J: f64 = 4.359_744_722_207_1e-18;
/// Hartree energy in eV.
pub const HARTREE_EV: f64 = 27.211_386_245_988;
/// Bohr radius a_0 in Å.
pub const BOHR_ANGSTROM: f64 = 0.529_177_210_903;
/// Atomic mass constant m_u, kg.
pub const AMU_KG: f64 = 1.660_539_066_60e-27;
/// Electron mass m_e, kg.
pub const ELECTRON_MASS_KG: f64 = 9.109_383_701_5e-31;
/// Hartree–inverse-metre relationship, 1/m (CODATA 2018: 2.194 746 313 6320(43) × 10^7 m^-1).
pub const HARTREE_INV_M: f64 = 2.194_746_313_632_0e7;
/// Thermochemical calorie, J (exact by definition).
pub const CALORIE_J: f64 = 4.184;

/// Å per bohr.
pub const ANGSTROM_PER_BOHR: f64 = BOHR_ANGSTROM;
/// bohr per Å.
pub const BOHR_PER_ANGSTROM: f64 = 1.0 / BOHR_ANGSTROM;
/// kJ/mol per Eh.
pub const KJMOL_PER_HARTREE: f64 = HARTREE_J * AVOGADRO / 1000.0;
/// kcal/mol per Eh (thermochemical calorie).
pub const KCALMOL_PER_HARTREE: f64 = KJMOL_PER_HARTREE / CALORIE_J;
/// eV per Eh.
pub const EV_PER_HARTREE: f64 = HARTREE_EV;
/// cm⁻¹ per Eh.
pub const CM1_PER_HARTREE: f64 = HARTREE_INV_M / 100.0;
/// Electron masses per amu (m_u / m_e).
pub const ME_PER_AMU: f64 = AMU_KG / ELECTRON_MASS_KG;
/// Second radiation constant h c / k_B in cm K.
pub const SECOND_RADIATION_CM_K: f64 = PLANCK * SPEED_OF_LIGHT * 100.0 / BOLTZMANN;

/// Factor that turns sqrt(eigenvalue of a mass-weighted Hessian in Eh/(bohr² amu)) into cm⁻¹.
///
/// ν̃ = sqrt(λ · E_h / (a_0² m_u)) / (2π c). About 5140.487 cm⁻¹ (see
/// ../shared/notes/reference-values.md §5, computed there from CODATA 2018).
pub fn freq_factor_cm1() -> f64 {
    let a0_m = BOHR_ANGSTROM * 1e-10;
    let omega = (HARTREE_J / (a0_m * a0_m * AMU_KG)).sqrt();
    omega / (2.0 * std::f64::consts::PI * SPEED_OF_LIGHT * 100.0)
}

/// Energy units Cairn reads and prints.
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize, serde::Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum EnergyUnit {
    Hartree,
    KcalMol,
    KjMol,
    Ev,
    Cm1,
}

impl EnergyUnit {
    /// How many of this unit make one Hartree.
    pub fn per_hartree(self) -> f64 {
        match self {
            EnergyUnit::Hartree => 1.0,
            EnergyUnit::KcalMol => KCALMOL_PER_HARTREE,
            EnergyUnit::KjMol => KJMOL_PER_HARTREE,
            EnergyUnit::Ev => EV_PER_HARTREE,
            EnergyUnit::Cm1 => CM1_PER_HARTREE,
        }
    }
    pub fn label(self) -> &'static str {
        match self {
            EnergyUnit::Hartree => "Eh",
            EnergyUnit::KcalMol => "kcal/mol",
            EnergyUnit::KjMol => "kJ/mol",
            EnergyUnit::Ev => "eV",
            EnergyUnit::Cm1 => "cm-1",
        }
    }
    /// Convert a value in this unit to Hartree.
    pub fn to_hartree(self, v: f64) -> f64 {
        v / self.per_hartree()
    }
    /// Convert a value in Hartree to this unit.
    pub fn from_hartree(self, v: f64) -> f64 {
        v * self.per_hartree()
    }
}

/// Length units Cairn reads and prints.
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize, serde::Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum LengthUnit {
    Bohr,
    Angstrom,
}

impl LengthUnit {
    pub fn per_bohr(self) -> f64 {
        match self {
            LengthUnit::Bohr => 1.0,
            LengthUnit::Angstrom => ANGSTROM_PER_BOHR,
        }
    }
    pub fn label(self) -> &'static str {
        match self {
            LengthUnit::Bohr => "bohr",
            LengthUnit::Angstrom => "Å",
        }
    }
    pub fn to_bohr(self, v: f64) -> f64 {
        v / self.per_bohr()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn rel(a: f64, b: f64) -> f64 {
        ((a - b) / b).abs()
    }

    // Check values: ../shared/notes/reference-values.md §2, derived from CODATA 2018 [S]
    // with 30-digit decimal arithmetic there.
    #[test]
    fn derived_factors_match_codata_2018() {
        assert!(rel(KJMOL_PER_HARTREE, 2_625.499_639_479_8) < 1e-12);
        assert!(rel(KCALMOL_PER_HARTREE, 627.509_474_063_1) < 1e-12);
        assert!(rel(CM1_PER_HARTREE, 219_474.631_363_20) < 1e-12);
        assert!(rel(BOHR_PER_ANGSTROM, 1.889_726_124_626) < 1e-12);
        assert!(rel(ME_PER_AMU, 1_822.888_486_217) < 1e-10);
        assert!(rel(SECOND_RADIATION_CM_K, 1.438_776_877_50) < 1e-11);
        assert!(
            rel(
                EV_PER_HARTREE * KJMOL_PER_HARTREE.recip(),
                1.0 / 96.485_332_123_3
            ) < 1e-9
        );
        assert!(rel(GAS_CONSTANT, 8.314_462_618_153_24) < 1e-14);
    }

    #[test]
    fn frequency_factor_matches_reference() {
        // 5140.487144 cm⁻¹ per sqrt(Eh/(bohr² amu)): reference-values.md §5 [C].
        assert!((freq_factor_cm1() - 5_140.487_144).abs() < 1e-3);
    }

    #[test]
    fn unit_round_trips() {
        for u in [
            EnergyUnit::Hartree,
            EnergyUnit::KcalMol,
            EnergyUnit::KjMol,
            EnergyUnit::Ev,
            EnergyUnit::Cm1,
        ] {
            let x = -1.2345;
            assert!((u.to_hartree(u.from_hartree(x)) - x).abs() < 1e-14);
        }
        // 1 kcal/mol in cm⁻¹ = 349.75508807 (reference-values.md §2 [C]).
        let cm = EnergyUnit::Cm1.from_hartree(EnergyUnit::KcalMol.to_hartree(1.0));
        assert!((cm - 349.755_088_07).abs() < 1e-6);
    }
}
