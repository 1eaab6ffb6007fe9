//! The `rates` stage on real xtb (GFN2-xTB): HCN → HNC from a hand-built saddle guess.
//! Every number in kinetics.json is checked against the textbook formulas with constants from
//! outside the crate: reference-values.md §3 (k_B T/h and RT at 298.15 K, CODATA 2018 [C]),
//! CODATA 2018 c₂ = hc/k_B = 1.438 776 877 cm K (Wigner), and hcN_A = 11.962 656 J/mol per cm⁻¹
//! (CODATA 2018, for zero-point energies); the report's CSV carries the same rate constants.

use cairn::study::kinetics::KineticsRecord;
use cairn::study::{self, run};
use std::path::PathBuf;

fn data(f: &str) -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
        .join("tests/data/studies")
        .join(f)
}

fn rel(a: f64, b: f64) -> f64 {
    ((a - b) / b).abs()
}

#[test]
fn rates_stage_on_xtb_matches_the_formulas_and_reaches_the_report() {
    std::env::set_var("OMP_NUM_THREADS", "1");
    let top = tempfile::tempdir().unwrap();
    let dir = top.path().join("run");
    let s = study::load(&data("rates-xtb.yaml")).unwrap();
    let mut opts = run::RunOptions::new(dir.clone(), 2);
    opts.progress = cairn::study::progress::ProgressMode::Quiet;
    let rep = cairn::driver::block_on(run::run(&s, &opts)).unwrap();
    let sum = &rep.summaries[0];
    assert_eq!(
        sum.status,
        cairn::study::record::Verdict::Verified,
        "{}",
        sum.reason
    );
    assert_eq!(
        sum.kinetics_json.as_deref(),
        Some("hcn-isomer/kinetics.json")
    );
    let text = std::fs::read_to_string(dir.join("hcn-isomer/kinetics.json")).unwrap();
    let k = KineticsRecord::from_json(&text, "kinetics.json").unwrap();

    // Stated model choices.
    assert_eq!(k.low_frequency_treatment, "harmonic");
    assert_eq!(k.standard_state, "1 bar (ideal gas)");
    assert_eq!(k.tunnelling, "wigner");
    assert_eq!(k.rate_constant_unit, "s^-1");

    // The electronic barriers are the verdict's (same ends, same energies).
    assert!(
        (k.barrier_forward_electronic_kcal_mol - sum.barrier_forward_kcal_mol.unwrap()).abs()
            < 1e-9
    );
    assert!(
        (k.barrier_reverse_electronic_kcal_mol - sum.barrier_reverse_kcal_mol.unwrap()).abs()
            < 1e-9
    );

    // HCN and HNC are linear: 3N−5 = 4 wavenumbers, σ = 1 (C∞v); the saddle (bent) has
    // 3N−6 = 3 with one imaginary, its magnitude the summary's imaginary frequency.
    let sp = |role: &str| k.species.iter().find(|s| s.role == role).unwrap();
    for end in ["reactant", "product"] {
        assert_eq!(sp(end).frequencies_cm1.len(), 4, "{end}");
        assert_eq!(sp(end).symmetry_number, 1, "{end}");
        assert_eq!(sp(end).point_group, "C∞v", "{end}");
        assert!(sp(end).frequencies_cm1.iter().all(|f| *f > 0.0));
    }
    let ts = sp("saddle");
    assert_eq!(ts.frequencies_cm1.len(), 3);
    assert_eq!(ts.frequencies_cm1.iter().filter(|f| **f < 0.0).count(), 1);
    assert!((k.imaginary_frequency_cm1 - sum.imaginary_frequency_cm1.unwrap()).abs() < 1e-6);
    // Common practice: an H-atom transfer has an imaginary frequency of 1000–2000i cm⁻¹
    // (reference-values.md §6).
    assert!((1000.0..2000.0).contains(&k.imaginary_frequency_cm1));

    // Zero-point energies: ½ Σ ν̃ × hcN_A (CODATA 2018: 11.962 656 J/mol per cm⁻¹).
    let zpe = |f: &[f64]| 0.5 * f.iter().filter(|x| **x > 0.0).sum::<f64>() * 11.962_656 / 4184.0;
    for role in ["reactant", "saddle", "product"] {
        let s = sp(role);
        assert!(
            rel(s.zero_point_energy_kcal_mol, zpe(&s.frequencies_cm1)) < 1e-6,
            "{role}"
        );
    }
    let dzpe = zpe(&ts.frequencies_cm1) - zpe(&sp("reactant").frequencies_cm1);
    assert!(
        (k.barrier_forward_zpe_kcal_mol - k.barrier_forward_electronic_kcal_mol - dzpe).abs()
            < 1e-6
    );

    // 298.15 K: k = κ (k_B T/h) exp(−ΔG‡/RT) with §3's k_B T/h = 6.2124379916e12 s⁻¹ and
    // RT = 0.59248495 kcal/mol; κ = 1 + (c₂ν̃‡/T)²/24 (Wigner; c₂ = 1.438776877 cm K).
    let t = &k.temperatures[0];
    assert_eq!(t.temperature_k, 298.15);
    let u = 1.438_776_877 * k.imaginary_frequency_cm1 / 298.15;
    let kappa = 1.0 + u * u / 24.0;
    assert!(rel(t.tunnelling_kappa, kappa) < 1e-9);
    let kf = kappa * 6.212_437_991_6e12 * (-t.barrier_forward_gibbs_kcal_mol / 0.592_484_95).exp();
    let kr = kappa * 6.212_437_991_6e12 * (-t.barrier_reverse_gibbs_kcal_mol / 0.592_484_95).exp();
    assert!(
        rel(t.rate_constant_forward_per_s, kf) < 1e-6,
        "{} vs {kf}",
        t.rate_constant_forward_per_s
    );
    assert!(rel(t.rate_constant_reverse_per_s, kr) < 1e-6);
    assert!(rel(t.half_life_forward_s, std::f64::consts::LN_2 / kf) < 1e-6);
    // Microscopic reversibility: ΔG = ΔG‡(forward) − ΔG‡(reverse), k_f/k_r = exp(−ΔG/RT).
    assert!(
        (t.reaction_gibbs_kcal_mol
            - (t.barrier_forward_gibbs_kcal_mol - t.barrier_reverse_gibbs_kcal_mol))
            .abs()
            < 1e-9
    );
    assert!(
        rel(
            t.rate_constant_forward_per_s / t.rate_constant_reverse_per_s,
            (-t.reaction_gibbs_kcal_mol / 0.592_484_95).exp()
        ) < 1e-6
    );
    // κ > 2 at 298 K for a 1400i cm⁻¹ mode: the record says the Wigner model is stretched.
    assert!(
        k.notes.iter().any(|n| n.contains("Wigner κ above 2")),
        "{:?}",
        k.notes
    );
    // Higher temperature, faster (ΔG‡ changes little against RT).
    assert!(k.temperatures[1].rate_constant_forward_per_s > t.rate_constant_forward_per_s);

    // The summary carries the 298.15 K Gibbs barriers and every rate constant.
    assert_eq!(sum.gibbs_temperature_k, Some(298.15));
    assert_eq!(
        sum.barrier_forward_gibbs_kcal_mol,
        Some(t.barrier_forward_gibbs_kcal_mol)
    );
    assert_eq!(sum.rate_constants.as_ref().map(Vec::len), Some(2));

    // The saddle's Hessian came from the store (modes ran at the same level).
    let rates_task = rep.state.tasks.iter().find(|t| t.stage == "rates").unwrap();
    assert!(rates_task.store_hits >= 1, "{rates_task:?}");

    // `cairn report` puts the same rate constant into summary.csv and the page.
    let out = std::process::Command::new(env!("CARGO_BIN_EXE_cairn"))
        .arg("report")
        .arg(&dir)
        .output()
        .unwrap();
    assert_eq!(
        out.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let csv = std::fs::read_to_string(dir.join("summary.csv")).unwrap();
    let lines: Vec<&str> = csv.lines().collect();
    let head: Vec<&str> = lines[0].split(',').collect();
    let row: Vec<&str> = lines[1].split(',').collect();
    let col = |name: &str| row[head.iter().position(|h| *h == name).unwrap()];
    assert_eq!(col("reaction"), "hcn-isomer");
    let k_csv: f64 = col("rate_constant_forward_per_s").parse().unwrap();
    assert_eq!(k_csv, t.rate_constant_forward_per_s);
    let html = std::fs::read_to_string(dir.join("report.html")).unwrap();
    assert!(html.contains("Low-frequency treatment: <b>harmonic</b>"));
    assert!(html.contains("Standard state: <b>1 bar (ideal gas)</b>"));
    assert!(html.contains("Gibbs energy ΔG, 298.15 K"));
}
