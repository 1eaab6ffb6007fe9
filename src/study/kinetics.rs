//! The `rates` stage: thermochemistry of the reactant, the saddle and the product, barriers in
//! enthalpy and Gibbs energy, transition-state-theory rate constants and half-lives, written to
//! `DIR/<reaction>/kinetics.json` ([`KineticsRecord`]).
//!
//! Inputs: the saddle (refine), and both ends of the step: the relaxed reactant/product when the
//! reaction has `relax-ends`, else the minimised IRC ends from `verify` (the same ends and
//! energies the verdict's barriers use). Hessians: one engine Hessian at each of the three
//! points through the level's evaluator; the saddle's is a store hit when `modes` ran at the
//! same level. Frequencies from `algo::freq::analyze`; thermochemistry from `thermo::rrho`;
//! rates from `thermo::rate::eyring`.
//!
//! Stated fallbacks (each written into the record's `notes`): imaginary wavenumbers smaller
//! than the noise threshold (50 cm⁻¹, common practice) at a minimum, or besides the reaction
//! mode at the saddle, are used as real wavenumbers of the same magnitude. A larger imaginary
//! wavenumber at a minimum, or a saddle without exactly one, is an error for this stage only.
//!
//! The step is unimolecular as the runner sees it (the reactant file is one species, a
//! complex counts as one), so the standard state cancels from ΔG‡ and ΔG; it is recorded.

use super::model::{RatesSpec, Reaction, Stage};
use super::raw::{LowFrequency, Tunnelling};
use super::record::{RateSummary, Verdict};
use super::run::{Ctx, Out};
use crate::algo::freq;
use crate::algo::hessian::{HessianCalc, HessianSource};
use crate::driver::{self, Evaluator, Stats, System};
use crate::error::{Error, Result};
use crate::geom::Frame;
use crate::molecule::Molecule;
use crate::thermo::rate;
use crate::thermo::rrho::{self, Kind, Qrrho, Settings};
use crate::units::KCALMOL_PER_HARTREE;
use nalgebra::DVector;
use serde::{Deserialize, Serialize};

/// Version of `kinetics.json`.
pub const KINETICS_FORMAT: u32 = 1;

/// Imaginary wavenumbers below this (cm⁻¹) are numerical noise (common practice).
pub const NOISE_THRESHOLD_CM1: f64 = freq::DEFAULT_IMAG_THRESHOLD_CM1;

/// `DIR/<reaction>/kinetics.json`. Energies kcal/mol per mole of reaction, temperatures K,
/// rate constants s⁻¹ (first order), half-lives s; the unit is in every field name.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct KineticsRecord {
    pub format: u32,
    pub reaction: String,
    /// Level of theory of the Hessians (and of the stage's energies).
    pub level: String,
    /// The reaction's verdict when the rates were computed.
    pub verdict: Verdict,
    /// The model in words.
    pub model: String,
    /// `harmonic` or `quasi-rrho`.
    pub low_frequency_treatment: String,
    /// e.g. `1 bar (ideal gas)`.
    pub standard_state: String,
    /// `none` or `wigner`.
    pub tunnelling: String,
    /// Always 1 here: the reactant as given is one species.
    pub molecularity: u32,
    /// Unit of every rate constant.
    pub rate_constant_unit: String,
    /// The saddle's imaginary wavenumber, cm⁻¹, as a positive number.
    pub imaginary_frequency_cm1: f64,
    /// Electronic energies (no zero-point energy).
    pub barrier_forward_electronic_kcal_mol: f64,
    pub barrier_reverse_electronic_kcal_mol: f64,
    pub reaction_energy_electronic_kcal_mol: f64,
    /// With zero-point energies (0 K enthalpies).
    pub barrier_forward_zpe_kcal_mol: f64,
    pub barrier_reverse_zpe_kcal_mol: f64,
    pub reaction_energy_zpe_kcal_mol: f64,
    pub temperatures: Vec<KineticsAt>,
    pub species: Vec<SpeciesThermo>,
    /// Fallbacks used, caveats.
    pub notes: Vec<String>,
}

/// Everything at one temperature.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct KineticsAt {
    pub temperature_k: f64,
    pub barrier_forward_enthalpy_kcal_mol: f64,
    pub barrier_reverse_enthalpy_kcal_mol: f64,
    pub reaction_enthalpy_kcal_mol: f64,
    pub barrier_forward_gibbs_kcal_mol: f64,
    pub barrier_reverse_gibbs_kcal_mol: f64,
    pub reaction_gibbs_kcal_mol: f64,
    /// Transmission coefficient κ (1 without tunnelling).
    pub tunnelling_kappa: f64,
    pub rate_constant_forward_per_s: f64,
    pub rate_constant_reverse_per_s: f64,
    pub half_life_forward_s: f64,
    pub half_life_reverse_s: f64,
}

/// One stationary point's data.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct SpeciesThermo {
    /// `reactant`, `saddle` or `product`.
    pub role: String,
    pub energy_hartree: f64,
    /// Vibrational wavenumbers as used, cm⁻¹ (the saddle's reaction mode negative).
    pub frequencies_cm1: Vec<f64>,
    pub point_group: String,
    pub symmetry_number: u32,
    pub zero_point_energy_kcal_mol: f64,
    /// Per temperature (same order as `temperatures`): H_corr and G_corr, kcal/mol, and S,
    /// J/(mol K).
    pub enthalpy_correction_kcal_mol: Vec<f64>,
    pub gibbs_correction_kcal_mol: Vec<f64>,
    pub entropy_j_mol_k: Vec<f64>,
}

/// What the stage hands to the summary (and to the task marker).
#[derive(Debug, Clone, Serialize, Deserialize)]
pub(super) struct KineticsOut {
    pub gibbs_temperature_k: f64,
    pub forward_gibbs_kcal: f64,
    pub reverse_gibbs_kcal: f64,
    pub reaction_gibbs_kcal: f64,
    pub rates: Vec<RateSummary>,
}

/// A stationary point for the stage: geometry (bohr) and electronic energy (Eh).
pub(super) type Point = (DVector<f64>, f64);

/// The three points and the verdict, gathered by the caller from earlier stages.
pub(super) struct RatesInput {
    pub reactant: Point,
    pub product: Point,
    pub saddle: Point,
    pub verdict: Verdict,
    /// The minimised IRC ends (reactant side, product side), used for an end whose relaxed
    /// geometry turns out not to be a minimum (e.g. held flat by symmetry).
    pub irc_ends: Option<[Point; 2]>,
}

/// Run the stage: Hessians, frequencies, thermochemistry, rates; write kinetics.json.
#[allow(clippy::too_many_arguments)]
pub(super) async fn run_rates(
    ctx: &Ctx,
    r: &Reaction,
    st: &Stage,
    spec: &RatesSpec,
    m: &Molecule,
    inp: RatesInput,
    e: &Evaluator,
    acc: &mut Stats,
) -> Result<Out> {
    if m.is_model_surface() {
        return Err(Error::invalid(
            "rates need real atoms; this reaction is on a model surface",
        ));
    }
    let system = System::of(m)?;
    let mut a_r = HessianCalc::new(
        inp.reactant.0.clone(),
        Frame::Molecule,
        HessianSource::Engine,
    );
    let mut a_s = HessianCalc::new(inp.saddle.0.clone(), Frame::Molecule, HessianSource::Engine);
    let mut a_p = HessianCalc::new(
        inp.product.0.clone(),
        Frame::Molecule,
        HessianSource::Engine,
    );
    let (hr, hs, hp) = tokio::join!(
        driver::drive(&mut a_r, e, &system),
        driver::drive(&mut a_s, e, &system),
        driver::drive(&mut a_p, e, &system)
    );
    let (vr, sr) = hr?;
    let (vs, ss) = hs?;
    let (vp, sp) = hp?;
    for s in [&sr, &ss, &sp] {
        super::stages::add(acc, s);
    }
    let masses = m.masses();
    let analyse = |h: &nalgebra::DMatrix<f64>, x: &DVector<f64>| {
        freq::analyze(h, x, &masses, Frame::Molecule, NOISE_THRESHOLD_CM1)
            .map(|md| md.frequencies_cm1)
            .map_err(|e| Error::Algorithm(format!("frequency analysis: {e}")))
    };
    let mut notes = Vec::new();
    // Nearly linear geometries (within 0.02 Å) are analysed and treated as linear, so the
    // frequency count and the rotational model agree.
    let line = |role: &str, p: &Point, notes: &mut Vec<String>| -> Point {
        match linearised(m, &p.0) {
            Some((x, moved)) => {
                if moved > 1e-6 {
                    notes.push(format!(
                        "{role}: every atom within {moved:.4} Å of a line: treated as linear (3N−5 vibrations)"
                    ));
                }
                (x, p.1)
            }
            None => p.clone(),
        }
    };
    let saddle = line("saddle", &inp.saddle, &mut notes);
    let (saddle_frequencies, imag) = clean_saddle(&analyse(&vs.hessian, &saddle.0)?, &mut notes)?;
    // Each end: its own Hessian; if it is not a minimum, the minimised IRC end on that side
    // (stated in the notes), when it is a different point and a minimum.
    let mut ends = Vec::new();
    for (k, (role, point, v)) in [
        ("reactant", &inp.reactant, &vr),
        ("product", &inp.product, &vp),
    ]
    .into_iter()
    .enumerate()
    {
        let mut own_notes = Vec::new();
        let lp = line(role, point, &mut own_notes);
        match clean_minimum(&analyse(&v.hessian, &lp.0)?, role, &mut own_notes) {
            Ok(f) => {
                notes.extend(own_notes);
                ends.push((lp, f));
            }
            Err(first) => {
                let alt = inp
                    .irc_ends
                    .as_ref()
                    .map(|e| e[k].clone())
                    .filter(|a| (&a.0 - &point.0).norm() > 1e-8);
                let Some(alt) = alt else { return Err(first) };
                let mut a = HessianCalc::new(alt.0.clone(), Frame::Molecule, HessianSource::Engine);
                let (va, sa) = driver::drive(&mut a, e, &system).await?;
                super::stages::add(acc, &sa);
                let mut alt_notes = Vec::new();
                let role_irc = format!("{role} (minimised IRC end)");
                let alt = line(&role_irc, &alt, &mut alt_notes);
                match clean_minimum(&analyse(&va.hessian, &alt.0)?, &role_irc, &mut alt_notes) {
                    Ok(f) => {
                        notes.push(format!(
                            "{first}; the minimised IRC end on the {role} side is a minimum and was used instead (its energy differs from the {role} energy of the verdict's barriers by {:.3} kcal/mol)",
                            (alt.1 - point.1) * KCALMOL_PER_HARTREE
                        ));
                        notes.extend(alt_notes);
                        ends.push((alt, f));
                    }
                    Err(_) => return Err(first),
                }
            }
        }
    }
    let (reactant, f_r) = ends.remove(0);
    let (product, f_p) = ends.remove(0);
    let out = compute(
        r,
        &st.level,
        spec,
        m,
        [
            (&reactant, &f_r[..]),
            (&saddle, &saddle_frequencies[..]),
            (&product, &f_p[..]),
        ],
        imag,
        inp.verdict,
        notes,
    )?;
    let text = serde_json::to_string_pretty(&out).unwrap_or_default();
    ctx.out
        .write(&format!("{}/kinetics.json", r.name), &(text + "\n"))?;
    let first = out
        .temperatures
        .first()
        .ok_or_else(|| Error::invalid("rates: no temperature"))?;
    Ok(Out::Kinetics(KineticsOut {
        gibbs_temperature_k: first.temperature_k,
        forward_gibbs_kcal: first.barrier_forward_gibbs_kcal_mol,
        reverse_gibbs_kcal: first.barrier_reverse_gibbs_kcal_mol,
        reaction_gibbs_kcal: first.reaction_gibbs_kcal_mol,
        rates: out
            .temperatures
            .iter()
            .map(|t| RateSummary {
                temperature_k: t.temperature_k,
                forward_per_s: t.rate_constant_forward_per_s,
                reverse_per_s: t.rate_constant_reverse_per_s,
                half_life_forward_s: t.half_life_forward_s,
                half_life_reverse_s: t.half_life_reverse_s,
            })
            .collect(),
    }))
}

/// A geometry within the thermochemistry's linearity tolerance of a line (0.02 Å), put exactly
/// on that line (the principal axis of least inertia through the centre of mass), with the
/// largest distance moved (Å); None when it is not linear. Frequencies and thermochemistry then
/// agree on 3N−5 vibrations.
pub fn linearised(m: &Molecule, x: &DVector<f64>) -> Option<(DVector<f64>, f64)> {
    use crate::thermo::symmetry::{inertia_tensor, is_linear, DEFAULT_SYMMETRY_TOL_ANGSTROM};
    use crate::units::ANGSTROM_PER_BOHR;
    use nalgebra::Vector3;
    let n = m.len();
    if n < 2 || x.len() != 3 * n {
        return None;
    }
    let masses = m.masses();
    let ang: Vec<[f64; 3]> = (0..n)
        .map(|i| [0, 1, 2].map(|k| x[3 * i + k] * ANGSTROM_PER_BOHR))
        .collect();
    if !is_linear(&ang, &masses, DEFAULT_SYMMETRY_TOL_ANGSTROM) {
        return None;
    }
    let mtot: f64 = masses.iter().sum();
    let com = ang.iter().zip(&masses).fold(Vector3::zeros(), |a, (c, w)| {
        a + Vector3::new(c[0], c[1], c[2]) * *w
    }) / mtot;
    let pts: Vec<Vector3<f64>> = ang
        .iter()
        .map(|c| Vector3::new(c[0], c[1], c[2]) - com)
        .collect();
    let eig = inertia_tensor(&pts, &masses).symmetric_eigen();
    let k = (0..3)
        .min_by(|&a, &b| eig.eigenvalues[a].total_cmp(&eig.eigenvalues[b]))
        .unwrap_or(0);
    let axis = eig.eigenvectors.column(k).into_owned();
    let mut out = x.clone();
    let mut moved = 0.0_f64;
    for (i, p) in pts.iter().enumerate() {
        let q = axis * p.dot(&axis);
        moved = moved.max((p - q).norm());
        let r = (q + com) / ANGSTROM_PER_BOHR;
        for c in 0..3 {
            out[3 * i + c] = r[c];
        }
    }
    Some((out, moved))
}

/// Wavenumbers of a minimum: noise-sized imaginary ones used as real (stated), larger ones an
/// error.
pub fn clean_minimum(f: &[f64], role: &str, notes: &mut Vec<String>) -> Result<Vec<f64>> {
    let big: Vec<f64> = f
        .iter()
        .copied()
        .filter(|x| *x < -NOISE_THRESHOLD_CM1)
        .collect();
    if !big.is_empty() {
        return Err(Error::Algorithm(format!(
            "the {role} has imaginary frequencies {} cm⁻¹ (above the {NOISE_THRESHOLD_CM1} cm⁻¹ noise threshold): it is a stationary point but not a minimum (often a geometry held flat or linear by symmetry); displace it along that mode and relax it again",
            fmt_list(&big)
        )));
    }
    Ok(flip_small(f, role, None, notes))
}

/// Wavenumbers of the saddle: exactly one above the noise threshold (kept negative); smaller
/// imaginary ones used as real (stated). Returns the wavenumbers and |ν‡|.
pub fn clean_saddle(f: &[f64], notes: &mut Vec<String>) -> Result<(Vec<f64>, f64)> {
    let big: Vec<usize> = (0..f.len())
        .filter(|&i| f[i] < -NOISE_THRESHOLD_CM1)
        .collect();
    if big.len() != 1 {
        return Err(Error::Algorithm(format!(
            "the saddle has {} imaginary frequencies above {NOISE_THRESHOLD_CM1} cm⁻¹, not 1; transition-state theory needs a first-order saddle",
            big.len()
        )));
    }
    let k = big[0];
    Ok((flip_small(f, "saddle", Some(k), notes), -f[k]))
}

fn flip_small(f: &[f64], role: &str, keep: Option<usize>, notes: &mut Vec<String>) -> Vec<f64> {
    let mut flipped = Vec::new();
    let out = f
        .iter()
        .enumerate()
        .map(|(i, &x)| {
            if x < 0.0 && Some(i) != keep {
                flipped.push(x);
                -x
            } else {
                x
            }
        })
        .collect();
    if !flipped.is_empty() {
        notes.push(format!(
            "{role}: imaginary frequencies {} cm⁻¹ are below the {NOISE_THRESHOLD_CM1} cm⁻¹ noise threshold and were used as real wavenumbers of the same magnitude",
            fmt_list(&flipped)
        ));
    }
    out
}

fn fmt_list(v: &[f64]) -> String {
    v.iter()
        .map(|x| format!("{:.1}i", x.abs()))
        .collect::<Vec<_>>()
        .join(", ")
}

/// The thermochemistry and rates from three points with their wavenumbers (reactant, saddle,
/// product; the saddle's reaction mode negative). Pure.
#[allow(clippy::too_many_arguments)]
pub(super) fn compute(
    r: &Reaction,
    level: &str,
    spec: &RatesSpec,
    m: &Molecule,
    points: [(&Point, &[f64]); 3],
    imag_cm1: f64,
    verdict: Verdict,
    mut notes: Vec<String>,
) -> Result<KineticsRecord> {
    let kcal = |eh: f64| eh * KCALMOL_PER_HARTREE;
    let roles = ["reactant", "saddle", "product"];
    let qrrho = match spec.low_frequency {
        LowFrequency::QuasiRrho => Some(Qrrho::default()),
        LowFrequency::Harmonic => None,
    };
    // thermo[point][temperature]
    let mut th = Vec::new();
    for (k, ((x, _), f)) in points.iter().enumerate() {
        let mol = m.with_flat(x);
        let mut per_t = Vec::new();
        for &t in &spec.temperatures_k {
            let s = Settings {
                temperature_k: t,
                qrrho,
                kind: if k == 1 {
                    Kind::TransitionState
                } else {
                    Kind::Minimum
                },
                multiplicity: r.multiplicity,
                ..Settings::default()
            };
            per_t.push(rrho::thermo(&mol, f, &s).map_err(|e| {
                Error::Algorithm(format!("thermochemistry of the {}: {e}", roles[k]))
            })?);
        }
        th.push(per_t);
    }
    let e: Vec<f64> = points.iter().map(|(p, _)| p.1).collect();
    let zpe: Vec<f64> = th.iter().map(|v| v[0].zpe_hartree).collect();
    let mut temps = Vec::new();
    for (j, &t) in spec.temperatures_k.iter().enumerate() {
        let h: Vec<f64> = (0..3).map(|k| e[k] + th[k][j].h_corr_hartree).collect();
        let g: Vec<f64> = (0..3).map(|k| e[k] + th[k][j].g_corr_hartree).collect();
        let kappa = match spec.tunnelling {
            Tunnelling::Off => 1.0,
            Tunnelling::Wigner => rate::wigner(imag_cm1, t),
        };
        let kf = rate::eyring(g[1] - g[0], t, 1, spec.standard_state, kappa)?;
        let kr = rate::eyring(g[1] - g[2], t, 1, spec.standard_state, kappa)?;
        temps.push(KineticsAt {
            temperature_k: t,
            barrier_forward_enthalpy_kcal_mol: kcal(h[1] - h[0]),
            barrier_reverse_enthalpy_kcal_mol: kcal(h[1] - h[2]),
            reaction_enthalpy_kcal_mol: kcal(h[2] - h[0]),
            barrier_forward_gibbs_kcal_mol: kcal(g[1] - g[0]),
            barrier_reverse_gibbs_kcal_mol: kcal(g[1] - g[2]),
            reaction_gibbs_kcal_mol: kcal(g[2] - g[0]),
            tunnelling_kappa: kappa,
            rate_constant_forward_per_s: kf.k,
            rate_constant_reverse_per_s: kr.k,
            half_life_forward_s: rate::half_life_first_order(kf.k),
            half_life_reverse_s: rate::half_life_first_order(kr.k),
        });
    }
    if spec.tunnelling == Tunnelling::Wigner && temps.iter().any(|t| t.tunnelling_kappa > 2.0) {
        notes.push(
            "Wigner κ above 2 at some temperature: the correction is meant for κ near 1; tunnelling is likely larger than this model says"
                .into(),
        );
    }
    notes.push(format!(
        "unimolecular step from the reactant as given (one species): the standard state ({}) cancels from ΔG‡ and ΔG",
        spec.standard_state.label()
    ));
    let species = (0..3)
        .map(|k| SpeciesThermo {
            role: roles[k].to_string(),
            energy_hartree: e[k],
            frequencies_cm1: points[k].1.to_vec(),
            point_group: th[k][0].point_group.label.clone(),
            symmetry_number: th[k][0].symmetry_number,
            zero_point_energy_kcal_mol: kcal(zpe[k]),
            enthalpy_correction_kcal_mol: th[k].iter().map(|t| kcal(t.h_corr_hartree)).collect(),
            gibbs_correction_kcal_mol: th[k].iter().map(|t| kcal(t.g_corr_hartree)).collect(),
            entropy_j_mol_k: th[k].iter().map(|t| t.s_total).collect(),
        })
        .collect();
    let (lf, model) = match spec.low_frequency {
        LowFrequency::Harmonic => (
            "harmonic",
            "ideal gas, rigid rotor, harmonic oscillator (RRHO); transition-state theory (Eyring–Polanyi)",
        ),
        LowFrequency::QuasiRrho => (
            "quasi-rrho",
            "ideal gas, rigid rotor, harmonic oscillator with quasi-RRHO entropy for modes below about 100 cm⁻¹ (Grimme, Chem. Eur. J. 18, 9955 (2012)); transition-state theory (Eyring–Polanyi)",
        ),
    };
    Ok(KineticsRecord {
        format: KINETICS_FORMAT,
        reaction: r.name.clone(),
        level: level.to_string(),
        verdict,
        model: model.to_string(),
        low_frequency_treatment: lf.to_string(),
        standard_state: spec.standard_state.label().to_string(),
        tunnelling: match spec.tunnelling {
            Tunnelling::Off => "none",
            Tunnelling::Wigner => "wigner",
        }
        .to_string(),
        molecularity: 1,
        rate_constant_unit: "s^-1".into(),
        imaginary_frequency_cm1: imag_cm1,
        barrier_forward_electronic_kcal_mol: kcal(e[1] - e[0]),
        barrier_reverse_electronic_kcal_mol: kcal(e[1] - e[2]),
        reaction_energy_electronic_kcal_mol: kcal(e[2] - e[0]),
        barrier_forward_zpe_kcal_mol: kcal(e[1] + zpe[1] - e[0] - zpe[0]),
        barrier_reverse_zpe_kcal_mol: kcal(e[1] + zpe[1] - e[2] - zpe[2]),
        reaction_energy_zpe_kcal_mol: kcal(e[2] + zpe[2] - e[0] - zpe[0]),
        temperatures: temps,
        species,
        notes,
    })
}

impl KineticsRecord {
    /// Parse, refusing formats newer than this Cairn understands; errors name the file.
    pub fn from_json(text: &str, file: &str) -> Result<KineticsRecord> {
        crate::study::record::parse_versioned(text, file, KINETICS_FORMAT)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn noise_sized_imaginary_modes_are_used_as_real_and_said_so() {
        let mut notes = Vec::new();
        let f = clean_minimum(&[-20.0, 300.0, 1600.0], "reactant", &mut notes).unwrap();
        assert_eq!(f, vec![20.0, 300.0, 1600.0]);
        assert!(notes[0].contains("20.0i"), "{notes:?}");
        let err = clean_minimum(&[-120.0, 300.0], "product", &mut notes).unwrap_err();
        assert!(err.to_string().contains("not a minimum"), "{err}");
        let (f, imag) = clean_saddle(&[-1200.0, -10.0, 500.0], &mut notes).unwrap();
        assert_eq!(f, vec![-1200.0, 10.0, 500.0]);
        assert_eq!(imag, 1200.0);
        assert!(clean_saddle(&[-1200.0, -300.0, 500.0], &mut notes).is_err());
        assert!(clean_saddle(&[1200.0, 300.0, 500.0], &mut notes).is_err());
    }

    #[test]
    fn nearly_linear_geometries_are_put_on_their_line() {
        use crate::elements::Element;
        let b = crate::units::BOHR_PER_ANGSTROM;
        let el = |s: &str| Element::from_symbol(s).unwrap();
        // HOC+-like: H bent 0.01 Å off the O–C line (within the 0.02 Å tolerance).
        let m = Molecule::new(
            vec![el("H"), el("O"), el("C")],
            vec![
                [0.01 * b, 0.0, -0.98 * b],
                [0.0, 0.0, 0.0],
                [0.0, 0.0, 1.16 * b],
            ],
        );
        let (x, moved) = linearised(&m, &m.flat()).unwrap();
        assert!(moved > 1e-3 && moved < 0.02, "{moved}");
        let xs: Vec<f64> = (0..3).map(|i| x[3 * i]).collect();
        let ys: Vec<f64> = (0..3).map(|i| x[3 * i + 1]).collect();
        // On one line: the cross product of the two bond vectors vanishes.
        let v = |i: usize, j: usize| {
            nalgebra::Vector3::new(
                x[3 * j] - x[3 * i],
                x[3 * j + 1] - x[3 * i + 1],
                x[3 * j + 2] - x[3 * i + 2],
            )
        };
        assert!(v(0, 1).cross(&v(1, 2)).norm() < 1e-9, "{xs:?} {ys:?}");
        // Bent by 0.1 Å: not linear, left alone.
        let bent = Molecule::new(
            vec![el("H"), el("O"), el("C")],
            vec![
                [0.1 * b, 0.0, -0.98 * b],
                [0.0, 0.0, 0.0],
                [0.0, 0.0, 1.16 * b],
            ],
        );
        assert!(linearised(&bent, &bent.flat()).is_none());
    }
}
