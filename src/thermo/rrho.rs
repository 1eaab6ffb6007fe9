//! Ideal-gas rigid-rotor harmonic-oscillator (RRHO) thermochemistry, with an optional
//! quasi-RRHO treatment of low frequencies (S. Grimme, Chem. Eur. J. 18, 9955 (2012)).
//!
//! Formulas: see DEVELOPERS.md, "Thermochemistry and rates", and
//! /work/shared/notes/reference-values.md §4. Energies are kept in Hartree per molecule
//! (Cairn's internal unit); entropies and heat capacities in J/(mol K), the unit of the trade.

use super::symmetry::{self, inertia_tensor, PointGroup, DEFAULT_SYMMETRY_TOL_ANGSTROM};
use crate::error::{Error, Result};
use crate::molecule::Molecule;
use crate::units::{
    AMU_KG, ANGSTROM_PER_BOHR, BOLTZMANN, GAS_CONSTANT, KJMOL_PER_HARTREE, PLANCK,
    SECOND_RADIATION_CM_K, SPEED_OF_LIGHT,
};
use nalgebra::Vector3;
use serde::{Deserialize, Serialize};
use std::f64::consts::PI;

/// Standard pressure p° = 1 bar, Pa (IUPAC standard state; common practice).
pub const STANDARD_PRESSURE_PA: f64 = 1.0e5;

/// Which atomic masses to use.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Masses {
    /// Most abundant isotope (AME2020), the default.
    #[default]
    Isotope,
    /// Standard atomic weights (IUPAC).
    Standard,
}

/// Is the geometry a minimum or a transition state (which has exactly one imaginary frequency,
/// left out of the vibrational sums)?
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Kind {
    #[default]
    Minimum,
    TransitionState,
}

/// Grimme's quasi-RRHO parameters.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Qrrho {
    /// Switching wavenumber ω0, cm⁻¹ (Grimme 2012: 100).
    pub omega0_cm1: f64,
    /// Damping exponent α (Grimme 2012: 4).
    pub alpha: f64,
    /// Average molecular moment of inertia B_av that caps the free-rotor moment, kg m²
    /// (Grimme 2012: 1e-44).
    pub b_av_kg_m2: f64,
}

impl Default for Qrrho {
    fn default() -> Self {
        Qrrho {
            omega0_cm1: 100.0,
            alpha: 4.0,
            b_av_kg_m2: 1.0e-44,
        }
    }
}

/// Settings for one evaluation.
#[derive(Debug, Clone, PartialEq)]
pub struct Settings {
    pub temperature_k: f64,
    pub pressure_pa: f64,
    /// Override of the detected symmetry number.
    pub symmetry_number: Option<u32>,
    pub qrrho: Option<Qrrho>,
    pub masses: Masses,
    pub kind: Kind,
    /// Spin multiplicity 2S+1.
    pub multiplicity: u32,
    /// Tolerance for linearity and symmetry detection, Å.
    pub symmetry_tol_angstrom: f64,
}

impl Default for Settings {
    fn default() -> Self {
        Settings {
            temperature_k: 298.15,
            pressure_pa: STANDARD_PRESSURE_PA,
            symmetry_number: None,
            qrrho: None,
            masses: Masses::Isotope,
            kind: Kind::Minimum,
            multiplicity: 1,
            symmetry_tol_angstrom: DEFAULT_SYMMETRY_TOL_ANGSTROM,
        }
    }
}

/// One vibrational mode's contribution.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ModeTerm {
    pub wavenumber_cm1: f64,
    /// Vibrational temperature Θ_v = h c ν̃ / k_B, K.
    pub theta_k: f64,
    /// Harmonic-oscillator entropy, J/(mol K).
    pub s_harmonic: f64,
    /// Free-rotor entropy (qRRHO only), J/(mol K).
    pub s_free_rotor: Option<f64>,
    /// qRRHO weight of the harmonic term (1 without qRRHO).
    pub weight: f64,
    /// Entropy used, J/(mol K).
    pub s_used: f64,
}

/// Every term of the thermochemistry at one temperature and pressure.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Thermo {
    pub temperature_k: f64,
    pub pressure_pa: f64,
    pub masses: Masses,
    pub mass_u: f64,
    pub linear: bool,
    pub point_group: PointGroup,
    pub symmetry_number: u32,
    /// "detected" or "given".
    pub symmetry_source: String,
    pub multiplicity: u32,
    /// Principal moments of inertia, u Å², ascending (empty for an atom, one for a linear molecule).
    pub moments_u_angstrom2: Vec<f64>,
    /// Rotational constants, cm⁻¹ (same order).
    pub rotational_constants_cm1: Vec<f64>,
    /// Rotational temperatures, K (same order).
    pub rotational_temperatures_k: Vec<f64>,
    /// The imaginary wavenumber of a transition state, cm⁻¹ (as a positive number), left out.
    pub imaginary_cm1: Option<f64>,
    pub modes: Vec<ModeTerm>,
    pub qrrho: Option<Qrrho>,
    pub q_trans: f64,
    pub q_rot: f64,
    /// Entropies, J/(mol K).
    pub s_trans: f64,
    pub s_rot: f64,
    pub s_vib: f64,
    pub s_elec: f64,
    pub s_total: f64,
    /// Constant-pressure heat capacity, J/(mol K) (harmonic).
    pub cp: f64,
    /// Energies, Eh per molecule.
    pub zpe_hartree: f64,
    pub e_trans_hartree: f64,
    pub e_rot_hartree: f64,
    /// Thermal vibrational energy above the ZPE.
    pub e_vib_hartree: f64,
    /// pV = RT.
    pub pv_hartree: f64,
    /// H(T) − H(0), without the ZPE.
    pub h_minus_h0_hartree: f64,
    /// H_corr = ZPE + H(T) − H(0): add to the electronic energy to get H.
    pub h_corr_hartree: f64,
    /// T·S.
    pub ts_hartree: f64,
    /// G_corr = H_corr − T S: add to the electronic energy to get G.
    pub g_corr_hartree: f64,
}

fn j_per_mol_to_hartree(x: f64) -> f64 {
    x / (KJMOL_PER_HARTREE * 1000.0)
}

/// Principal moments of inertia (u Å², ascending) of a geometry in Å.
pub fn moments_of_inertia(coords_ang: &[[f64; 3]], masses: &[f64]) -> [f64; 3] {
    let mtot: f64 = masses.iter().sum();
    let mut com = Vector3::zeros();
    for (c, m) in coords_ang.iter().zip(masses) {
        com += Vector3::new(c[0], c[1], c[2]) * *m;
    }
    if mtot > 0.0 {
        com /= mtot;
    }
    let pts: Vec<Vector3<f64>> = coords_ang
        .iter()
        .map(|c| Vector3::new(c[0], c[1], c[2]) - com)
        .collect();
    let e = inertia_tensor(&pts, masses).symmetric_eigen().eigenvalues;
    let mut v = [e[0], e[1], e[2]];
    v.sort_by(f64::total_cmp);
    v
}

/// Rotational temperature Θ = h² / (8π² I k_B), K, for I in u Å².
pub fn rotational_temperature_k(i_u_a2: f64) -> f64 {
    PLANCK * PLANCK / (8.0 * PI * PI * i_u_a2 * AMU_KG * 1e-20 * BOLTZMANN)
}

/// Rotational constant B = h / (8π² c I), cm⁻¹, for I in u Å².
pub fn rotational_constant_cm1(i_u_a2: f64) -> f64 {
    PLANCK / (8.0 * PI * PI * SPEED_OF_LIGHT * 100.0 * i_u_a2 * AMU_KG * 1e-20)
}

/// Translational partition function per molecule (V = k_B T / p) and Sackur–Tetrode entropy,
/// J/(mol K), for a mass in u.
pub fn translational(mass_u: f64, t: f64, p_pa: f64) -> (f64, f64) {
    let m = mass_u * AMU_KG;
    let q = (2.0 * PI * m * BOLTZMANN * t / (PLANCK * PLANCK)).powf(1.5) * BOLTZMANN * t / p_pa;
    (q, GAS_CONSTANT * (q.ln() + 2.5))
}

/// Harmonic-oscillator entropy of one mode, J/(mol K).
pub fn s_harmonic(wavenumber_cm1: f64, t: f64) -> f64 {
    let u = SECOND_RADIATION_CM_K * wavenumber_cm1 / t;
    GAS_CONSTANT * (u / u.exp_m1() - (-(-u).exp()).ln_1p())
}

/// Free-rotor entropy of Grimme's qRRHO for a mode of this wavenumber, J/(mol K).
pub fn s_free_rotor(wavenumber_cm1: f64, t: f64, q: &Qrrho) -> f64 {
    let nu = SPEED_OF_LIGHT * 100.0 * wavenumber_cm1; // Hz
    let mu = PLANCK / (8.0 * PI * PI * nu);
    let mu_eff = mu * q.b_av_kg_m2 / (mu + q.b_av_kg_m2);
    let arg = (8.0 * PI * PI * PI * mu_eff * BOLTZMANN * t / (PLANCK * PLANCK)).sqrt();
    GAS_CONSTANT * (0.5 + arg.ln())
}

/// Grimme's damping weight w = 1 / (1 + (ω0/ω)^α).
pub fn qrrho_weight(wavenumber_cm1: f64, q: &Qrrho) -> f64 {
    1.0 / (1.0 + (q.omega0_cm1 / wavenumber_cm1).powf(q.alpha))
}

/// Thermochemistry of `mol` (coordinates in bohr) with vibrational wavenumbers `freqs_cm1`
/// (imaginary ones as negative numbers). Every rejection is an error that says what to do.
pub fn thermo(mol: &Molecule, freqs_cm1: &[f64], s: &Settings) -> Result<Thermo> {
    let t = s.temperature_k;
    if !(t.is_finite() && t > 0.0) {
        return Err(Error::invalid(format!(
            "temperature must be a positive number of kelvin, got {t} K"
        )));
    }
    let p = s.pressure_pa;
    if !(p.is_finite() && p > 0.0) {
        return Err(Error::invalid(format!(
            "pressure must be positive, got {} bar",
            p / 1e5
        )));
    }
    if s.multiplicity == 0 {
        return Err(Error::invalid(
            "multiplicity must be 2S+1 ≥ 1 (1 singlet, 2 doublet, ...)",
        ));
    }
    if mol.is_empty() || mol.is_model_surface() {
        return Err(Error::invalid(
            "thermochemistry needs a real molecule (no atoms, or only pseudo-atoms X, given)",
        ));
    }
    if let Some(q) = &s.qrrho {
        if !(q.omega0_cm1 > 0.0 && q.alpha > 0.0 && q.b_av_kg_m2 > 0.0) {
            return Err(Error::invalid("qRRHO parameters must be positive"));
        }
    }
    let masses: Vec<f64> = mol
        .elements
        .iter()
        .map(|e| match s.masses {
            Masses::Isotope => e.mass(),
            Masses::Standard => e.standard_weight(),
        })
        .collect();
    let coords: Vec<[f64; 3]> = mol
        .coords
        .iter()
        .map(|c| c.map(|x| x * ANGSTROM_PER_BOHR))
        .collect();
    let n = mol.len();
    let tol = s.symmetry_tol_angstrom;
    let pg = symmetry::detect(&mol.elements, &coords, &masses, tol);
    let linear = pg.linear;
    let expected = match n {
        1 => 0,
        _ if linear => 3 * n - 5,
        _ => 3 * n - 6,
    };
    if freqs_cm1.len() != expected {
        return Err(Error::invalid(format!(
            "{} frequencies given, but {n} atoms in a {} geometry need 3N−{} = {expected} \
             (linear means every atom within {tol} Å of one line); give all and only the \
             vibrational wavenumbers, without the zero translations and rotations",
            freqs_cm1.len(),
            if n == 1 {
                "monatomic"
            } else if linear {
                "linear"
            } else {
                "non-linear"
            },
            if linear { 5 } else { 6 },
        )));
    }
    if let Some(bad) = freqs_cm1.iter().find(|f| !f.is_finite()) {
        return Err(Error::invalid(format!(
            "frequency {bad} cm⁻¹ is not a number"
        )));
    }
    if let Some(z) = freqs_cm1.iter().find(|f| **f == 0.0) {
        return Err(Error::invalid(format!(
            "a frequency of {z} cm⁻¹ is not a vibration; leave translations and rotations out"
        )));
    }
    let imag: Vec<f64> = freqs_cm1.iter().copied().filter(|f| *f < 0.0).collect();
    let imaginary_cm1 = match (s.kind, imag.len()) {
        (Kind::Minimum, 0) => None,
        (Kind::Minimum, _) => {
            return Err(Error::invalid(format!(
                "imaginary frequencies {} cm⁻¹ (given as negative numbers) at a minimum: the \
                 geometry is not a minimum; relax it further, or mark it a transition state \
                 if it has exactly one",
                list(&imag)
            )))
        }
        (Kind::TransitionState, 1) => Some(-imag[0]),
        (Kind::TransitionState, k) => {
            return Err(Error::invalid(format!(
                "a transition state has exactly one imaginary frequency (a negative number); \
                 {k} given{}",
                if k > 0 {
                    format!(": {} cm⁻¹", list(&imag))
                } else {
                    String::new()
                }
            )))
        }
    };

    let mass_u: f64 = masses.iter().sum();
    let (q_trans, s_trans) = translational(mass_u, t, p);
    let r = GAS_CONSTANT;

    // Rotation.
    let (symmetry_number, symmetry_source) = match s.symmetry_number {
        Some(0) => return Err(Error::invalid("symmetry number must be ≥ 1")),
        Some(v) => (v, "given".to_string()),
        None => (pg.sigma, "detected".to_string()),
    };
    let sigma = f64::from(symmetry_number);
    let moments = moments_of_inertia(&coords, &masses);
    let used_moments: Vec<f64> = match n {
        1 => vec![],
        _ if linear => vec![moments[2]],
        _ => moments.to_vec(),
    };
    if used_moments.iter().any(|i| !i.is_finite() || *i <= 1e-8) {
        return Err(Error::invalid(
            "a moment of inertia is zero: the geometry has atoms on top of each other",
        ));
    }
    let thetas: Vec<f64> = used_moments
        .iter()
        .map(|i| rotational_temperature_k(*i))
        .collect();
    let (q_rot, s_rot, e_rot, cv_rot) = match thetas.len() {
        0 => (1.0, 0.0, 0.0, 0.0),
        1 => {
            let q = t / (sigma * thetas[0]);
            (q, r * (q.ln() + 1.0), r * t, r)
        }
        _ => {
            let q = PI.sqrt() / sigma * (t.powi(3) / (thetas[0] * thetas[1] * thetas[2])).sqrt();
            (q, r * (q.ln() + 1.5), 1.5 * r * t, 1.5 * r)
        }
    };

    // Vibration.
    let mut modes = Vec::new();
    let mut s_vib = 0.0;
    let mut e_vib = 0.0;
    let mut cv_vib = 0.0;
    let mut zpe_cm1 = 0.0;
    for &f in freqs_cm1.iter().filter(|f| **f > 0.0) {
        let theta = SECOND_RADIATION_CM_K * f;
        let u = theta / t;
        let sh = s_harmonic(f, t);
        let (sfr, w, sused) = match &s.qrrho {
            Some(q) => {
                let sr = s_free_rotor(f, t, q);
                let w = qrrho_weight(f, q);
                (Some(sr), w, w * sh + (1.0 - w) * sr)
            }
            None => (None, 1.0, sh),
        };
        s_vib += sused;
        e_vib += r * theta / u.exp_m1();
        let em = u.exp_m1();
        cv_vib += r * u * u * u.exp() / (em * em);
        zpe_cm1 += 0.5 * f;
        modes.push(ModeTerm {
            wavenumber_cm1: f,
            theta_k: theta,
            s_harmonic: sh,
            s_free_rotor: sfr,
            weight: w,
            s_used: sused,
        });
    }
    let s_elec = r * f64::from(s.multiplicity).ln();
    let s_total = s_trans + s_rot + s_vib + s_elec;
    let e_trans = 1.5 * r * t;
    let pv = r * t;
    let h_minus_h0 = e_trans + e_rot + e_vib + pv;
    let zpe_hartree = zpe_cm1 / crate::units::CM1_PER_HARTREE;
    let h_minus_h0_hartree = j_per_mol_to_hartree(h_minus_h0);
    let h_corr_hartree = zpe_hartree + h_minus_h0_hartree;
    let ts_hartree = j_per_mol_to_hartree(t * s_total);
    Ok(Thermo {
        temperature_k: t,
        pressure_pa: p,
        masses: s.masses,
        mass_u,
        linear,
        point_group: pg,
        symmetry_number,
        symmetry_source,
        multiplicity: s.multiplicity,
        rotational_constants_cm1: used_moments
            .iter()
            .map(|i| rotational_constant_cm1(*i))
            .collect(),
        moments_u_angstrom2: used_moments,
        rotational_temperatures_k: thetas,
        imaginary_cm1,
        modes,
        qrrho: s.qrrho,
        q_trans,
        q_rot,
        s_trans,
        s_rot,
        s_vib,
        s_elec,
        s_total,
        cp: 1.5 * r + cv_rot + cv_vib + r,
        zpe_hartree,
        e_trans_hartree: j_per_mol_to_hartree(e_trans),
        e_rot_hartree: j_per_mol_to_hartree(e_rot),
        e_vib_hartree: j_per_mol_to_hartree(e_vib),
        pv_hartree: j_per_mol_to_hartree(pv),
        h_minus_h0_hartree,
        h_corr_hartree,
        ts_hartree,
        g_corr_hartree: h_corr_hartree - ts_hartree,
    })
}

fn list(v: &[f64]) -> String {
    v.iter()
        .map(|x| format!("{x}"))
        .collect::<Vec<_>>()
        .join(", ")
}
