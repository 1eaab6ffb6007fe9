//! `cairn thermo INPUT`: ideal-gas RRHO thermochemistry from a geometry and vibrational
//! wavenumbers (no engine).

use crate::error::{Error, Result};
use crate::thermo::input::{self, ThermoInput};
use crate::thermo::rate;
use crate::thermo::rrho::{self, Qrrho, Settings, Thermo};
use crate::units::{CALORIE_J, KJMOL_PER_HARTREE};
use std::fmt::Write as _;
use std::path::PathBuf;

/// Ideal-gas rigid-rotor harmonic-oscillator thermochemistry (translation, rotation,
/// vibration, electronic spin) from a small YAML input: a geometry, vibrational wavenumbers in
/// cm-1 and the multiplicity. Prints every term with its unit.
///
/// Input keys: geometry (XYZ path or inline XYZ block), frequencies_cm1, multiplicity,
/// kind (minimum | transition_state), symmetry_number, masses (isotope | standard).
/// Exit status: 0 done, 1 error, 2 usage error.
#[derive(clap::Args, Debug)]
pub struct Args {
    /// The input file (YAML).
    pub input: PathBuf,
    /// Temperatures, K (several allowed: --temperature 273.15 298.15 373.15).
    #[arg(long, num_args = 1.., default_values_t = vec![298.15], allow_negative_numbers = true)]
    pub temperature: Vec<f64>,
    /// Pressure, bar (the standard state of the translational entropy).
    #[arg(long, default_value_t = 1.0, allow_negative_numbers = true)]
    pub pressure: f64,
    /// Rotational symmetry number, overriding the detected one and the input file.
    #[arg(long)]
    pub symmetry: Option<u32>,
    /// Quasi-RRHO entropy for low frequencies (Grimme 2012, ω0 = 100 cm-1, α = 4).
    #[arg(long)]
    pub qrrho: bool,
    /// Print a JSON record instead of text.
    #[arg(long)]
    pub json: bool,
}

pub fn run(args: Args) -> i32 {
    match execute(&args) {
        Ok(out) => {
            print!("{out}");
            0
        }
        Err(e) => {
            eprintln!("error: {e}");
            1
        }
    }
}

/// Compute and format (text or JSON).
pub fn execute(a: &Args) -> Result<String> {
    let inp = input::read(&a.input)?;
    let mut results = Vec::new();
    for &t in &a.temperature {
        let s = Settings {
            temperature_k: t,
            pressure_pa: a.pressure * 1e5,
            symmetry_number: a.symmetry.or(inp.symmetry_number),
            qrrho: a.qrrho.then(Qrrho::default),
            masses: inp.masses,
            kind: inp.kind,
            multiplicity: inp.multiplicity,
            ..Settings::default()
        };
        let th = rrho::thermo(&inp.molecule, &inp.frequencies_cm1, &s)
            .map_err(|e| Error::invalid(format!("{}: {e}", a.input.display())))?;
        results.push(th);
    }
    if a.json {
        let rec = serde_json::json!({
            "input": a.input.display().to_string(),
            "geometry": inp.geometry_source,
            "formula": inp.molecule.formula(),
            "model": model_line(a.qrrho),
            "units": {
                "energies": "Eh per molecule",
                "entropies": "J/(mol K)",
                "cp": "J/(mol K)",
                "moments": "u Å^2",
                "rotational_constants": "cm^-1",
                "temperatures": "K",
                "pressure": "Pa",
            },
            "results": results,
        });
        let mut s = serde_json::to_string_pretty(&rec)
            .map_err(|e| Error::invalid(format!("cannot write the JSON record: {e}")))?;
        s.push('\n');
        return Ok(s);
    }
    Ok(text(&inp, &results, a.qrrho))
}

fn model_line(qrrho: bool) -> String {
    if qrrho {
        "ideal gas, rigid rotor; vibrational entropy quasi-RRHO (Grimme, Chem. Eur. J. 18, 9955 \
         (2012): ω0 = 100 cm-1, α = 4, B_av = 1e-44 kg m²); enthalpy harmonic"
            .into()
    } else {
        "ideal gas, rigid rotor, harmonic oscillator (no low-frequency treatment)".into()
    }
}

fn e_line(out: &mut String, name: &str, eh: f64) {
    let kj = eh * KJMOL_PER_HARTREE;
    let _ = writeln!(
        out,
        "  {name:<22} {eh:>14.7} Eh  {kj:>12.4} kJ/mol  {:>11.4} kcal/mol",
        kj / CALORIE_J
    );
}

fn fmt_list(v: &[f64], prec: usize) -> String {
    v.iter()
        .map(|x| format!("{x:.prec$}"))
        .collect::<Vec<_>>()
        .join(", ")
}

fn text(inp: &ThermoInput, results: &[Thermo], qrrho: bool) -> String {
    let mut o = String::new();
    let _ = writeln!(
        o,
        "Thermochemistry of {} ({} atoms; geometry {})",
        inp.molecule.formula(),
        inp.molecule.len(),
        inp.geometry_source
    );
    let _ = writeln!(o, "Model: {}", model_line(qrrho));
    for th in results {
        let _ = writeln!(o);
        let _ = writeln!(
            o,
            "T = {} K, p = {} bar ({} Pa)",
            th.temperature_k,
            th.pressure_pa / 1e5,
            th.pressure_pa
        );
        let _ = writeln!(
            o,
            "  mass {:.8} u ({} masses); {}; point group {}, symmetry number {} ({}); multiplicity {}",
            th.mass_u,
            match th.masses {
                rrho::Masses::Isotope => "most abundant isotope",
                rrho::Masses::Standard => "standard atomic weight",
            },
            if th.moments_u_angstrom2.is_empty() {
                "atom"
            } else if th.linear {
                "linear"
            } else {
                "non-linear"
            },
            th.point_group.label,
            th.symmetry_number,
            th.symmetry_source,
            th.multiplicity
        );
        if !th.moments_u_angstrom2.is_empty() {
            let _ = writeln!(
                o,
                "  moments of inertia     {} u Å²",
                fmt_list(&th.moments_u_angstrom2, 6)
            );
            let _ = writeln!(
                o,
                "  rotational constants   {} cm-1",
                fmt_list(&th.rotational_constants_cm1, 6)
            );
            let _ = writeln!(
                o,
                "  rotational temps       {} K",
                fmt_list(&th.rotational_temperatures_k, 6)
            );
        }
        if let Some(im) = th.imaginary_cm1 {
            let _ = writeln!(
                o,
                "  imaginary frequency    {im:.2}i cm-1 (left out; Wigner κ = {:.4} at this T)",
                rate::wigner(im, th.temperature_k)
            );
        }
        let _ = writeln!(o, "  q_trans {:.6e}   q_rot {:.6}", th.q_trans, th.q_rot);
        let _ = writeln!(o, "  vibrations (cm-1, Θ_v K, S J/(mol K)):");
        for m in &th.modes {
            let _ = write!(
                o,
                "    {:>10.2} {:>10.2}  S_harm {:>9.5}",
                m.wavenumber_cm1, m.theta_k, m.s_harmonic
            );
            if let Some(sr) = m.s_free_rotor {
                let _ = write!(
                    o,
                    "  S_rotor {sr:>9.5}  w {:.4}  S {:>9.5}",
                    m.weight, m.s_used
                );
            }
            let _ = writeln!(o);
        }
        let low = th.modes.iter().filter(|m| m.wavenumber_cm1 < 100.0).count();
        if low > 0 && th.qrrho.is_none() {
            let _ = writeln!(
                o,
                "  note: {low} mode(s) below 100 cm-1 treated as harmonic; --qrrho treats them as hindered rotors"
            );
        }
        let _ = writeln!(o, "  entropy, J/(mol K):");
        for (n, v) in [
            ("S_trans", th.s_trans),
            ("S_rot", th.s_rot),
            ("S_vib", th.s_vib),
            ("S_elec", th.s_elec),
            ("S_total", th.s_total),
            ("Cp", th.cp),
        ] {
            let _ = writeln!(o, "  {n:<22} {v:>14.4} J/(mol K)");
        }
        let _ = writeln!(o, "  energies:");
        e_line(&mut o, "ZPE", th.zpe_hartree);
        e_line(&mut o, "E_trans", th.e_trans_hartree);
        e_line(&mut o, "E_rot", th.e_rot_hartree);
        e_line(&mut o, "E_vib (above ZPE)", th.e_vib_hartree);
        e_line(&mut o, "pV = RT", th.pv_hartree);
        e_line(&mut o, "H(T) - H(0)", th.h_minus_h0_hartree);
        e_line(&mut o, "H_corr = ZPE + H-H(0)", th.h_corr_hartree);
        e_line(&mut o, "T*S", th.ts_hartree);
        e_line(&mut o, "G_corr = H_corr - TS", th.g_corr_hartree);
    }
    o
}
