//! report.md and summary.csv, and the number formats shared with the HTML page.

use super::{ReactionData, RunData, CAUTION};
use crate::study::record::Verdict;
use std::fmt::Write as _;

/// The per-reaction energy rows both reports show: label and value (kcal/mol, or surface units).
pub fn energy_rows(s: &crate::study::record::Summary) -> [(&'static str, Option<f64>); 3] {
    [
        ("forward barrier ΔE‡", s.barrier_forward_kcal_mol),
        ("reverse barrier ΔE‡", s.barrier_reverse_kcal_mol),
        ("reaction energy ΔE", s.reaction_energy_kcal_mol),
    ]
}

/// A value with a fixed number of decimals, or "—" when missing.
pub fn fixed(v: Option<f64>, decimals: usize) -> String {
    match v {
        Some(x) if x.is_finite() => format!("{x:.decimals$}"),
        _ => "—".into(),
    }
}

/// A rate constant or other wide-ranging number in scientific notation: `1.23e5`.
pub fn sci(v: Option<f64>) -> String {
    match v {
        Some(x) if x.is_finite() && x != 0.0 => {
            let e = x.abs().log10().floor() as i32;
            let m = x / 10f64.powi(e);
            // Rounding may give 10.0.
            let (m, e) = if (m.abs() * 100.0).round() >= 1000.0 {
                (m / 10.0, e + 1)
            } else {
                (m, e)
            };
            format!("{m:.2}e{e}")
        }
        Some(0.0) => "0".into(),
        Some(x) if x.is_infinite() => "∞".into(),
        _ => "—".into(),
    }
}

/// A duration in seconds in words with a fitting unit: "3.2 ms", "45 s", "2.1 h", "3.4 years".
pub fn duration(seconds: Option<f64>) -> String {
    let s = match seconds {
        Some(s) if s.is_finite() && s >= 0.0 => s,
        Some(s) if s.is_infinite() => return "forever".into(),
        _ => return "—".into(),
    };
    const MIN: f64 = 60.0;
    const HOUR: f64 = 3600.0;
    const DAY: f64 = 86_400.0;
    const YEAR: f64 = 365.25 * DAY; // Julian year (IAU; common practice)
    if s < 1e-6 {
        format!("{} s", sci(Some(s)))
    } else if s < 1e-3 {
        format!("{:.2} µs", s * 1e6)
    } else if s < 1.0 {
        format!("{:.2} ms", s * 1e3)
    } else if s < MIN {
        format!("{s:.2} s")
    } else if s < HOUR {
        format!("{:.1} min", s / MIN)
    } else if s < DAY {
        format!("{:.1} h", s / HOUR)
    } else if s < YEAR {
        format!("{:.1} days", s / DAY)
    } else if s < 100.0 * YEAR {
        format!("{:.1} years", s / YEAR)
    } else if s < 1e6 * YEAR {
        format!("{:.0} years", s / YEAR)
    } else {
        format!("{} years", sci(Some(s / YEAR)))
    }
}

pub fn status_word(d: &ReactionData) -> &'static str {
    match d.status() {
        Some(Verdict::Verified) => "verified",
        Some(Verdict::Unverified) => "unverified",
        Some(Verdict::Failed) => "failed",
        None => "no summary",
    }
}

/// Why, in words (the verdict's reason, or what is missing).
pub fn reason(d: &ReactionData) -> String {
    match &d.summary {
        Some(s) => s.reason.clone(),
        None => {
            let failed: Vec<String> = d
                .tasks
                .iter()
                .filter_map(|t| t.message.as_ref().map(|m| format!("{}: {m}", t.stage)))
                .collect();
            if failed.is_empty() {
                "no summary.json: the run has not finished this reaction".into()
            } else {
                format!("no summary.json; {}", failed.join("; "))
            }
        }
    }
}

/// The imaginary frequency shown for a reaction, cm⁻¹ (positive number).
pub fn imaginary(d: &ReactionData) -> Option<f64> {
    d.summary
        .as_ref()
        .and_then(|s| s.imaginary_frequency_cm1)
        .or_else(|| d.kinetics.as_ref().map(|k| k.imaginary_frequency_cm1))
}

/// Escape a Markdown table cell.
pub fn md_cell(s: &str) -> String {
    s.replace('\\', "\\\\")
        .replace('|', "\\|")
        .replace('<', "&lt;")
        .replace('>', "&gt;")
        .replace(['\n', '\r'], " ")
}

/// Escape a CSV field (RFC 4180: quoted when it holds a comma, quote or line break; quotes
/// doubled). A leading = + - @ is prefixed with ' so spreadsheets do not run it as a formula.
pub fn csv_field(s: &str) -> String {
    let s = if s.starts_with(['=', '+', '@']) || (s.starts_with('-') && s.parse::<f64>().is_err()) {
        format!("'{s}")
    } else {
        s.to_string()
    };
    if s.contains([',', '"', '\n', '\r']) {
        format!("\"{}\"", s.replace('"', "\"\""))
    } else {
        s
    }
}

/// A number for CSV: plain when moderate, else scientific (`1.67e-37`), shortest round-trip
/// digits either way; empty when missing.
pub fn num_field(v: Option<f64>) -> String {
    match v {
        Some(x) if x.is_finite() => {
            if x == 0.0 || (1e-4..1e15).contains(&x.abs()) {
                format!("{x}")
            } else {
                format!("{x:e}")
            }
        }
        _ => String::new(),
    }
}

/// summary.csv: one row per reaction, sorted by forward barrier; units in the column names.
/// Energies on model surfaces are in surface units (column `energy_unit`).
pub fn csv(data: &RunData) -> String {
    let head = [
        "reaction",
        "status",
        "energy_unit",
        "barrier_forward",
        "barrier_reverse",
        "reaction_energy",
        "barrier_forward_kj_mol",
        "barrier_reverse_kj_mol",
        "reaction_energy_kj_mol",
        "imaginary_frequency_cm1",
        "n_imaginary",
        "gibbs_temperature_k",
        "barrier_forward_gibbs_kcal_mol",
        "barrier_reverse_gibbs_kcal_mol",
        "reaction_gibbs_kcal_mol",
        "rate_constant_forward_per_s",
        "half_life_forward_s",
        "rate_constant_reverse_per_s",
        "half_life_reverse_s",
        "reason",
    ];
    let mut out = head.join(",") + "\n";
    for d in data.sorted() {
        let s = d.summary.as_ref();
        let g = |f: fn(&crate::study::record::Summary) -> Option<f64>| s.and_then(f);
        let rate0 = s
            .and_then(|s| s.rate_constants.as_ref())
            .and_then(|r| r.first());
        let row = [
            csv_field(&d.name),
            status_word(d).to_string(),
            d.unit().to_string(),
            num_field(d.shown(g(|s| s.barrier_forward_kcal_mol))),
            num_field(d.shown(g(|s| s.barrier_reverse_kcal_mol))),
            num_field(d.shown(g(|s| s.reaction_energy_kcal_mol))),
            num_field(d.kj(g(|s| s.barrier_forward_kcal_mol))),
            num_field(d.kj(g(|s| s.barrier_reverse_kcal_mol))),
            num_field(d.kj(g(|s| s.reaction_energy_kcal_mol))),
            num_field(imaginary(d)),
            s.and_then(|s| s.n_imaginary)
                .map(|n| n.to_string())
                .unwrap_or_default(),
            num_field(g(|s| s.gibbs_temperature_k)),
            num_field(g(|s| s.barrier_forward_gibbs_kcal_mol)),
            num_field(g(|s| s.barrier_reverse_gibbs_kcal_mol)),
            num_field(g(|s| s.reaction_gibbs_kcal_mol)),
            num_field(rate0.map(|r| r.forward_per_s)),
            num_field(rate0.map(|r| r.half_life_forward_s)),
            num_field(rate0.map(|r| r.reverse_per_s)),
            num_field(rate0.map(|r| r.half_life_reverse_s)),
            csv_field(&reason(d)),
        ];
        out.push_str(&row.join(","));
        out.push('\n');
    }
    out
}

/// report.md: the caution, the study table sorted by barrier, then each reaction.
pub fn markdown(data: &RunData) -> String {
    let mut o = String::new();
    let _ = writeln!(o, "# Cairn report: {}\n", md_cell(&data.study));
    let _ = writeln!(o, "> **Caution.** {CAUTION}\n");
    let _ = writeln!(
        o,
        "Run directory: `{}`. Charts are in `report.html`; this file has the numbers.\n",
        data.dir.display()
    );
    let _ = writeln!(o, "## Reactions by forward barrier\n");
    let _ = writeln!(
        o,
        "| reaction | status | forward barrier (kcal/mol) | forward barrier (kJ/mol) | reverse barrier (kcal/mol) | reaction energy (kcal/mol) | imaginary frequency (cm⁻¹) | ΔG‡ forward (kcal/mol) | k forward (s⁻¹) | half-life forward |"
    );
    let _ = writeln!(o, "|---|---|---:|---:|---:|---:|---:|---:|---:|---:|");
    for d in data.sorted() {
        let s = d.summary.as_ref();
        let surf = if d.model_surface {
            " (surface units)"
        } else {
            ""
        };
        let rate0 = s
            .and_then(|s| s.rate_constants.as_ref())
            .and_then(|r| r.first());
        let _ = writeln!(
            o,
            "| {} | {} | {}{surf} | {} | {}{surf} | {}{surf} | {} | {} | {} | {} |",
            md_cell(&d.name),
            status_word(d),
            fixed(d.shown(s.and_then(|s| s.barrier_forward_kcal_mol)), 2),
            fixed(d.kj(s.and_then(|s| s.barrier_forward_kcal_mol)), 1),
            fixed(d.shown(s.and_then(|s| s.barrier_reverse_kcal_mol)), 2),
            fixed(d.shown(s.and_then(|s| s.reaction_energy_kcal_mol)), 2),
            fixed(imaginary(d), 0),
            fixed(s.and_then(|s| s.barrier_forward_gibbs_kcal_mol), 2),
            sci(rate0.map(|r| r.forward_per_s)),
            duration(rate0.map(|r| r.half_life_forward_s)),
        );
    }
    for d in &data.reactions {
        let _ = writeln!(o, "\n## {}\n", md_cell(&d.name));
        let _ = writeln!(
            o,
            "**Status:** {} — {}\n",
            status_word(d),
            md_cell(&reason(d))
        );
        match &d.summary {
            Some(s) => {
                let _ = writeln!(o, "| quantity | value ({}) | value (kJ/mol) |", d.unit());
                let _ = writeln!(o, "|---|---:|---:|");
                for (label, v) in energy_rows(s) {
                    let _ = writeln!(
                        o,
                        "| {label} | {} | {} |",
                        fixed(d.shown(v), 2),
                        fixed(d.kj(v), 1)
                    );
                }
                let _ = writeln!(
                    o,
                    "\nImaginary frequency: {} cm⁻¹ ({} imaginary). IRC connects the ends: {}.",
                    fixed(imaginary(d), 1),
                    s.n_imaginary
                        .map(|n| n.to_string())
                        .unwrap_or_else(|| "—".into()),
                    match s.irc_connects {
                        Some(true) => "yes",
                        Some(false) => "no",
                        None => "not checked",
                    }
                );
            }
            None => {
                let _ = writeln!(o, "No summary: nothing to show for this reaction.");
            }
        }
        match &d.kinetics {
            Some(k) => {
                let _ = writeln!(
                    o,
                    "\n**Rates** ({}; low frequencies: {}; standard state {}; tunnelling: {}; level {}):\n",
                    md_cell(&k.model),
                    md_cell(&k.low_frequency_treatment),
                    md_cell(&k.standard_state),
                    md_cell(&k.tunnelling),
                    md_cell(&k.level)
                );
                let _ = writeln!(
                    o,
                    "| T (K) | ΔH‡ forward (kcal/mol) | ΔG‡ forward (kcal/mol) | ΔG‡ forward (kJ/mol) | ΔG‡ reverse (kcal/mol) | ΔG reaction (kcal/mol) | κ | k forward (s⁻¹) | half-life forward | k reverse (s⁻¹) | half-life reverse |"
                );
                let _ = writeln!(
                    o,
                    "|---:|---:|---:|---:|---:|---:|---:|---:|---:|---:|---:|"
                );
                for t in &k.temperatures {
                    let _ = writeln!(
                        o,
                        "| {} | {:.2} | {:.2} | {:.1} | {:.2} | {:.2} | {:.3} | {} | {} | {} | {} |",
                        t.temperature_k,
                        t.barrier_forward_enthalpy_kcal_mol,
                        t.barrier_forward_gibbs_kcal_mol,
                        t.barrier_forward_gibbs_kcal_mol * crate::units::CALORIE_J,
                        t.barrier_reverse_gibbs_kcal_mol,
                        t.reaction_gibbs_kcal_mol,
                        t.tunnelling_kappa,
                        sci(Some(t.rate_constant_forward_per_s)),
                        duration(Some(t.half_life_forward_s)),
                        sci(Some(t.rate_constant_reverse_per_s)),
                        duration(Some(t.half_life_reverse_s)),
                    );
                }
                for n in &k.notes {
                    let _ = writeln!(o, "\n- {}", md_cell(n));
                }
            }
            None => {
                let why = d
                    .summary
                    .as_ref()
                    .and_then(|s| s.kinetics_error.clone())
                    .map(|e| format!("the rates stage failed: {e}"))
                    .unwrap_or_else(|| "no rates stage in this run".into());
                let _ = writeln!(o, "\nRates: not computed ({}).", md_cell(&why));
            }
        }
    }
    o
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn csv_fields_are_quoted_and_defused() {
        assert_eq!(csv_field("plain"), "plain");
        assert_eq!(csv_field("a,b"), "\"a,b\"");
        assert_eq!(csv_field("say \"hi\""), "\"say \"\"hi\"\"\"");
        assert_eq!(csv_field("=SUM(A1)"), "'=SUM(A1)");
        assert_eq!(csv_field("-3.5"), "-3.5");
    }

    #[test]
    fn markdown_cells_cannot_break_the_table() {
        assert_eq!(md_cell("a|b\nc<d>"), "a\\|b c&lt;d&gt;");
    }

    #[test]
    fn numbers_and_durations_carry_units() {
        assert_eq!(sci(Some(123_456.0)), "1.23e5");
        assert_eq!(sci(Some(9.999e-3)), "1.00e-2");
        assert_eq!(sci(None), "—");
        assert_eq!(duration(Some(0.5)), "500.00 ms");
        assert_eq!(duration(Some(90.0)), "1.5 min");
        assert_eq!(duration(Some(7200.0)), "2.0 h");
        // Julian year 365.25 d (IAU).
        assert_eq!(duration(Some(2.0 * 365.25 * 86_400.0)), "2.0 years");
        assert_eq!(duration(Some(1234.4 * 365.25 * 86_400.0)), "1234 years");
        assert_eq!(fixed(Some(1.234), 1), "1.2");
        assert_eq!(fixed(None, 1), "—");
    }
}
