//! Transition-state-theory rate constants (Eyring–Polanyi), standard states, the Wigner
//! tunnelling factor and half-lives.
//!
//! k = κ (k_B T / h) (c°)^(1−m) exp(−ΔG‡ / RT)   (H. Eyring, J. Chem. Phys. 3, 107 (1935);
//! M. G. Evans, M. Polanyi, Trans. Faraday Soc. 31, 875 (1935); from memory).
//! Rate constants of order m are given in (mol/L)^(1−m) s⁻¹ whatever the standard state of
//! ΔG‡: a 1 bar standard state enters through c° = p°/(RT).

use super::rrho::STANDARD_PRESSURE_PA;
use crate::error::{Error, Result};
use crate::units::{BOLTZMANN, GAS_CONSTANT, KJMOL_PER_HARTREE, PLANCK, SECOND_RADIATION_CM_K};
use serde::{Deserialize, Serialize};

/// The standard state ΔG‡ refers to.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum StandardState {
    /// Ideal gas at p° = 1 bar (what gas-phase RRHO gives).
    OneBar,
    /// 1 mol/L (solution chemistry).
    OneMolar,
}

impl StandardState {
    pub fn label(self) -> &'static str {
        match self {
            StandardState::OneBar => "1 bar (ideal gas)",
            StandardState::OneMolar => "1 mol/L",
        }
    }
    /// c° in mol/L at temperature t (K).
    pub fn concentration_mol_per_l(self, t: f64) -> f64 {
        match self {
            StandardState::OneMolar => 1.0,
            StandardState::OneBar => STANDARD_PRESSURE_PA / (GAS_CONSTANT * t) / 1000.0,
        }
    }
}

/// k_B T / h, s⁻¹.
pub fn kbt_over_h(t: f64) -> f64 {
    BOLTZMANN * t / PLANCK
}

/// A rate constant with its unit.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct RateConstant {
    pub k: f64,
    /// "s^-1", "L mol^-1 s^-1", "L^2 mol^-2 s^-1".
    pub unit: String,
    pub molecularity: u32,
    pub standard_state: StandardState,
    pub kappa: f64,
    pub temperature_k: f64,
}

/// Eyring–Polanyi rate constant for a barrier ΔG‡ (Eh per molecule) at T (K), molecularity m
/// (1, 2 or 3), standard state of ΔG‡, and transmission coefficient κ.
pub fn eyring(
    dg_hartree: f64,
    t: f64,
    molecularity: u32,
    standard_state: StandardState,
    kappa: f64,
) -> Result<RateConstant> {
    if !(t.is_finite() && t > 0.0) {
        return Err(Error::invalid(format!(
            "temperature must be a positive number of kelvin, got {t} K"
        )));
    }
    if !(1..=3).contains(&molecularity) {
        return Err(Error::invalid(format!(
            "molecularity must be 1, 2 or 3, got {molecularity}"
        )));
    }
    if !(kappa.is_finite() && kappa > 0.0 && dg_hartree.is_finite()) {
        return Err(Error::invalid(format!(
            "barrier ({dg_hartree} Eh) and transmission coefficient ({kappa}) must be finite, κ > 0"
        )));
    }
    let dg_j_mol = dg_hartree * KJMOL_PER_HARTREE * 1000.0;
    let c0 = standard_state.concentration_mol_per_l(t);
    let m = molecularity as i32;
    let k = kappa * kbt_over_h(t) * c0.powi(1 - m) * (-dg_j_mol / (GAS_CONSTANT * t)).exp();
    let unit = match molecularity {
        1 => "s^-1",
        2 => "L mol^-1 s^-1",
        _ => "L^2 mol^-2 s^-1",
    };
    Ok(RateConstant {
        k,
        unit: unit.into(),
        molecularity,
        standard_state,
        kappa,
        temperature_k: t,
    })
}

/// ΔG‡(1 mol/L) − ΔG‡(1 bar) for molecularity m at T, Eh per molecule:
/// −(m−1) RT ln(RT c°/p°), with c° = 1 mol/L, p° = 1 bar.
pub fn standard_state_shift_hartree(t: f64, molecularity: u32) -> f64 {
    let c0 = 1000.0; // mol/m³
    let per_mol = -(f64::from(molecularity) - 1.0)
        * GAS_CONSTANT
        * t
        * (GAS_CONSTANT * t * c0 / STANDARD_PRESSURE_PA).ln();
    per_mol / (KJMOL_PER_HARTREE * 1000.0)
}

/// Wigner tunnelling factor κ = 1 + (1/24) (h c ν̃‡ / k_B T)² for an imaginary wavenumber
/// of magnitude `imag_cm1` (E. Wigner, Z. Phys. Chem. B 19, 203 (1932); from memory).
/// Meaningful only near 1; above about 2 a better tunnelling model is needed (common practice).
pub fn wigner(imag_cm1: f64, t: f64) -> f64 {
    let u = SECOND_RADIATION_CM_K * imag_cm1.abs() / t;
    1.0 + u * u / 24.0
}

/// First-order half-life ln 2 / k, s (k in s⁻¹).
pub fn half_life_first_order(k: f64) -> f64 {
    std::f64::consts::LN_2 / k
}

/// Second-order half-life 1/(k c0), s, for rate = k[A][B] with [A]0 = [B]0 = c0 (or
/// rate = k[A]² with [A]0 = c0); k in L mol⁻¹ s⁻¹, c0 in mol/L.
pub fn half_life_second_order(k: f64, c0_mol_per_l: f64) -> f64 {
    1.0 / (k * c0_mol_per_l)
}
