//! Thermochemistry and rates against outside values. Check values and their sources:
//! /work/shared/notes/reference-values.md §3 (Eyring, Wigner, standard states; [C] computed
//! there with CODATA 2018) and §4 (RRHO stages [C]; CODATA Key Values, Cox, Wagman & Medvedev,
//! Hemisphere 1989 [S]). Constants: CODATA 2018 (src/units.rs).

use cairn::elements::Element;
use cairn::molecule::Molecule;
use cairn::thermo::rate::{
    self, half_life_first_order, half_life_second_order, kbt_over_h, standard_state_shift_hartree,
    wigner, StandardState,
};
use cairn::thermo::rrho::{self, Kind, Masses, Qrrho, Settings};
use cairn::thermo::symmetry::{detect, DEFAULT_SYMMETRY_TOL_ANGSTROM};
use cairn::units::{BOHR_PER_ANGSTROM, CALORIE_J, KCALMOL_PER_HARTREE, KJMOL_PER_HARTREE};

fn mol(atoms: &[(&str, [f64; 3])]) -> Molecule {
    let el = atoms
        .iter()
        .map(|(s, _)| Element::from_symbol(s).unwrap())
        .collect();
    let xyz = atoms
        .iter()
        .map(|(_, c)| c.map(|x| x * BOHR_PER_ANGSTROM))
        .collect();
    Molecule::new(el, xyz)
}

fn close(name: &str, got: f64, want: f64, tol: f64) {
    assert!(
        (got - want).abs() <= tol,
        "{name}: got {got}, want {want} ± {tol}"
    );
}

fn kjmol(eh: f64) -> f64 {
    eh * KJMOL_PER_HARTREE
}

fn h2o() -> Molecule {
    // r(OH) 0.9572 Å, ∠HOH 104.52° (Benedict, Gailar, Plyler 1956 [M]); Cartesians from §4.1.
    mol(&[
        ("O", [0.0, 0.0, 0.0]),
        ("H", [0.756_950_33, 0.0, 0.585_882_28]),
        ("H", [-0.756_950_33, 0.0, 0.585_882_28]),
    ])
}

fn co2() -> Molecule {
    // r(CO) 1.1600 Å [M], §4.2.
    mol(&[
        ("C", [0.0, 0.0, 0.0]),
        ("O", [0.0, 0.0, 1.16]),
        ("O", [0.0, 0.0, -1.16]),
    ])
}

fn nh3() -> Molecule {
    // r(NH) 1.012 Å, ∠HNH 106.7° [M], §4.4.
    let r = 1.012_f64;
    let th = 106.7_f64.to_radians();
    let d = 2.0 * r * (th / 2.0).sin();
    let rho = d / 3f64.sqrt();
    let h = (r * r - rho * rho).sqrt();
    let mut a = vec![("N", [0.0, 0.0, 0.0])];
    for k in 0..3 {
        let phi = 2.0 * std::f64::consts::PI * f64::from(k) / 3.0;
        a.push(("H", [rho * phi.cos(), rho * phi.sin(), -h]));
    }
    mol(&a)
}

#[test]
fn h2o_every_stage_matches_reference_values_4_1() {
    let m = h2o();
    let th = rrho::thermo(&m, &[3657.0, 1595.0, 3756.0], &Settings::default()).unwrap();
    // §4.1 [C]; tolerances from §4 "Recommended tolerances" (1e-3 J/(mol K), 1e-3 kJ/mol).
    close("M", th.mass_u, 18.010_564_68, 1e-7);
    close("S_trans", th.s_trans, 144.9105, 1e-3);
    close("q_trans", th.q_trans / 3.044_119e6, 1.0, 1e-6);
    let i = &th.moments_u_angstrom2;
    close("I_A", i[0], 0.614_456, 2e-6);
    close("I_B", i[1], 1.154_915, 2e-6);
    close("I_C", i[2], 1.769_370, 2e-6);
    let b = &th.rotational_constants_cm1;
    close("A", b[0], 27.435_068, 1e-5);
    close("B", b[1], 14.596_428, 1e-5);
    close("C", b[2], 9.527_474, 1e-5);
    let t = &th.rotational_temperatures_k;
    close("Θ_A", t[0], 39.472_942, 1e-5);
    close("Θ_B", t[1], 21.001_004, 1e-5);
    close("Θ_C", t[2], 13.707_910, 1e-5);
    assert_eq!(th.symmetry_number, 2);
    assert_eq!(th.point_group.label, "C2v");
    close("q_rot", th.q_rot, 42.799_803, 1e-5);
    close("S_rot", th.s_rot, 43.7053, 1e-3);
    close("S_vib", th.s_vib, 0.0329, 1e-4);
    close("S_vib(1595)", th.modes[1].s_harmonic, 0.032_858, 1e-6);
    close("S_total", th.s_total, 188.6486, 1e-3);
    close("E_vib", kjmol(th.e_vib_hartree) * 1000.0, 8.6719, 1e-3);
    close("H-H(0)", kjmol(th.h_minus_h0_hartree), 9.9245, 1e-3);
    close("ZPE kJ/mol", kjmol(th.zpe_hartree), 53.8798, 1e-3);
    close(
        "ZPE kcal/mol",
        th.zpe_hartree * KCALMOL_PER_HARTREE,
        12.8776,
        1e-3,
    );
    close("H_corr", th.h_corr_hartree, 0.024_301_8, 1e-6);
    close("G_corr", kjmol(th.g_corr_hartree), 7.5587, 1e-3);
    close("Cp", th.cp, 33.4819, 1e-3);
    // Against experiment: CODATA Key Value S° 188.835 J/(mol K) (Cox, Wagman, Medvedev 1989)
    // within 0.3, and H−H(0) 9.905 kJ/mol within 0.05 (§4.1 tolerance).
    close("S° vs CODATA", th.s_total, 188.835, 0.3);
    close(
        "H-H(0) vs CODATA",
        kjmol(th.h_minus_h0_hartree),
        9.905,
        0.05,
    );
}

#[test]
fn co2_linear_matches_reference_values_4_2() {
    let th = rrho::thermo(
        &co2(),
        &[1333.0, 667.0, 667.0, 2349.0],
        &Settings::default(),
    )
    .unwrap();
    assert!(th.linear);
    assert_eq!(th.point_group.label, "D∞h");
    assert_eq!(th.symmetry_number, 2);
    close("M", th.mass_u, 43.989_829_24, 1e-7);
    close("S_trans", th.s_trans, 156.0477, 1e-3);
    close("I", th.moments_u_angstrom2[0], 43.045_514, 1e-5);
    close("B", th.rotational_constants_cm1[0], 0.391_623, 1e-6);
    close("Θ_rot", th.rotational_temperatures_k[0], 0.563_459, 1e-6);
    close("q_rot", th.q_rot, 264.571_325, 1e-4);
    close("S_rot", th.s_rot, 54.6935, 1e-3);
    close("S_vib", th.s_vib, 3.0102, 1e-3);
    close("S_total", th.s_total, 213.7513, 1e-3);
    close("E_vib", kjmol(th.e_vib_hartree) * 1000.0, 691.0475, 1e-3);
    close("H-H(0)", kjmol(th.h_minus_h0_hartree), 9.3674, 1e-3);
    close("ZPE", kjmol(th.zpe_hartree), 30.0023, 1e-3);
    close("G_corr", kjmol(th.g_corr_hartree), -24.3602, 1e-3);
    // CODATA Key Values [S]: S° 213.785 ± 0.1 (§4 tolerance), H−H(0) 9.365 ± 0.05.
    close("S° vs CODATA", th.s_total, 213.785, 0.1);
    close(
        "H-H(0) vs CODATA",
        kjmol(th.h_minus_h0_hartree),
        9.365,
        0.05,
    );
}

#[test]
fn nh3_symmetric_top_matches_reference_values_4_4() {
    let f = [3337.0, 950.0, 3444.0, 3444.0, 1627.0, 1627.0];
    let th = rrho::thermo(&nh3(), &f, &Settings::default()).unwrap();
    assert_eq!(th.point_group.label, "C3v");
    assert_eq!(th.symmetry_number, 3);
    close("M", th.mass_u, 17.026_549_10, 1e-7);
    close("S_trans", th.s_trans, 144.2097, 1e-3);
    let i = &th.moments_u_angstrom2;
    close("I_A", i[0], 1.689_767, 1e-5);
    close("I_B", i[1], 1.689_767, 1e-5);
    close("I_C", i[2], 2.657_519, 1e-5);
    close("q_rot", th.q_rot, 70.143_282, 1e-4);
    close("S_rot", th.s_rot, 47.8127, 1e-3);
    close("S_vib", th.s_vib, 0.5359, 1e-3);
    close("S_total", th.s_total, 192.5582, 1e-3);
    close("H-H(0)", kjmol(th.h_minus_h0_hartree), 10.0482, 1e-3);
    close("ZPE", kjmol(th.zpe_hartree), 86.3046, 1e-3);
    close("G_corr", kjmol(th.g_corr_hartree), 38.9416, 1e-3);
    // CODATA Key Value 192.77 [M] within 0.3 (§4.4).
    close("S° vs CODATA", th.s_total, 192.77, 0.3);
}

#[test]
fn hcn_linear_without_inversion() {
    let m = mol(&[
        ("H", [0.0, 0.0, -1.0655]),
        ("C", [0.0, 0.0, 0.0]),
        ("N", [0.0, 0.0, 1.1532]),
    ]);
    let th = rrho::thermo(&m, &[3311.0, 712.0, 712.0, 2097.0], &Settings::default()).unwrap();
    assert_eq!(th.point_group.label, "C∞v");
    assert_eq!(th.symmetry_number, 1);
    // §4.3 [C] (lower confidence inputs, same model).
    close("S_total", th.s_total, 201.7894, 1e-3);
    close("H-H(0)", kjmol(th.h_minus_h0_hartree), 9.2441, 1e-3);
    // JANAF S° 201.83 [M] within 0.1.
    close("S° vs JANAF", th.s_total, 201.83, 0.1);
}

#[test]
fn monatomic_sackur_tetrode_matches_codata_key_values_4_0() {
    let s = Settings {
        masses: Masses::Standard,
        ..Settings::default()
    };
    // Ar, standard atomic weight 39.948: 154.8457 [C]; CODATA Key Value 154.846 ± 0.003 [S].
    let ar = rrho::thermo(&mol(&[("Ar", [0.0; 3])]), &[], &s).unwrap();
    close("S(Ar)", ar.s_total, 154.8457, 1e-3);
    close("S(Ar) vs CODATA", ar.s_total, 154.846, 0.003);
    close("H-H(0) Ar", kjmol(ar.h_minus_h0_hartree), 6.197, 0.001);
    // Be 9.0121831: 136.2753 [C]; CODATA 136.275 ± 0.003 [S].
    let be = rrho::thermo(&mol(&[("Be", [0.0; 3])]), &[], &s).unwrap();
    close("S(Be)", be.s_total, 136.2753, 1e-3);
    close("S(Be) vs CODATA", be.s_total, 136.275, 0.003);
}

#[test]
fn spin_degeneracy_adds_r_ln_multiplicity() {
    // S_elec = R ln(2S+1), common practice. A triplet O atom: R ln 3 = 9.1343 J/(mol K).
    let s = Settings {
        multiplicity: 3,
        ..Settings::default()
    };
    let o = rrho::thermo(&mol(&[("O", [0.0; 3])]), &[], &s).unwrap();
    close("S_elec", o.s_elec, 8.314_462_618 * 3f64.ln(), 1e-9);
    close(
        "S_total",
        o.s_total,
        o.s_trans + 8.314_462_618 * 3f64.ln(),
        1e-9,
    );
}

#[test]
fn symmetry_numbers_and_point_groups_are_detected() {
    let tol = DEFAULT_SYMMETRY_TOL_ANGSTROM;
    let check = |m: &Molecule, label: &str, sigma: u32| {
        let ang: Vec<[f64; 3]> = m
            .coords
            .iter()
            .map(|c| c.map(|x| x / BOHR_PER_ANGSTROM))
            .collect();
        let pg = detect(&m.elements, &ang, &m.masses(), tol);
        assert_eq!(
            (pg.label.as_str(), pg.sigma),
            (label, sigma),
            "{}",
            m.formula()
        );
    };
    // Symmetry numbers: common practice (textbook point groups).
    check(&h2o(), "C2v", 2);
    check(&nh3(), "C3v", 3);
    check(&co2(), "D∞h", 2);
    let a = 0.629;
    check(
        &mol(&[
            ("C", [0.0; 3]),
            ("H", [a, a, a]),
            ("H", [a, -a, -a]),
            ("H", [-a, a, -a]),
            ("H", [-a, -a, a]),
        ]),
        "Td",
        12,
    );
    check(
        &mol(&[
            ("H", [0.0, 0.0, -1.0655]),
            ("C", [0.0, 0.0, 0.0]),
            ("N", [0.0, 0.0, 1.1532]),
        ]),
        "C∞v",
        1,
    );
    check(
        &mol(&[
            ("C", [0.667, 0.0, 0.0]),
            ("C", [-0.667, 0.0, 0.0]),
            ("H", [1.23, 0.92, 0.0]),
            ("H", [1.23, -0.92, 0.0]),
            ("H", [-1.23, 0.92, 0.0]),
            ("H", [-1.23, -0.92, 0.0]),
        ]),
        "D2h",
        4,
    );
    let mut bf3 = vec![("B", [0.0; 3])];
    for k in 0..3 {
        let p = 2.0 * std::f64::consts::PI * f64::from(k) / 3.0;
        bf3.push(("F", [1.31 * p.cos(), 1.31 * p.sin(), 0.0]));
    }
    check(&mol(&bf3), "D3h", 6);
    // H2O2-like, skewed: C2.
    check(
        &mol(&[
            ("O", [0.73, 0.0, 0.0]),
            ("O", [-0.73, 0.0, 0.0]),
            ("H", [0.9, 0.9, 0.3]),
            ("H", [-0.9, -0.9, 0.3]),
        ]),
        "C2",
        2,
    );
    // HOCl, planar: Cs.
    check(
        &mol(&[
            ("O", [0.0, 0.0, 0.0]),
            ("H", [0.96, 0.0, 0.0]),
            ("Cl", [-0.4, 1.6, 0.0]),
        ]),
        "Cs",
        1,
    );
    // CHFClBr: C1.
    check(
        &mol(&[
            ("C", [0.0, 0.0, 0.0]),
            ("H", [0.63, 0.63, 0.63]),
            ("F", [0.8, -0.8, -0.8]),
            ("Cl", [-1.0, 1.0, -1.0]),
            ("Br", [-1.1, -1.1, 1.1]),
        ]),
        "C1",
        1,
    );
    // Centrosymmetric, nothing else: Ci.
    check(
        &mol(&[
            ("H", [1.0, 0.2, 0.3]),
            ("H", [-1.0, -0.2, -0.3]),
            ("F", [0.3, 1.1, -0.4]),
            ("F", [-0.3, -1.1, 0.4]),
            ("Cl", [0.5, -0.2, 1.3]),
            ("Cl", [-0.5, 0.2, -1.3]),
        ]),
        "Ci",
        1,
    );
}

#[test]
fn symmetry_override_is_used() {
    let s = Settings {
        symmetry_number: Some(1),
        ..Settings::default()
    };
    let th = rrho::thermo(&h2o(), &[3657.0, 1595.0, 3756.0], &s).unwrap();
    assert_eq!(th.symmetry_source, "given");
    // σ 2 → 1 raises S_rot by R ln 2 (definition of q_rot).
    close("S_rot", th.s_rot, 43.7053 + 8.314_462_618 * 2f64.ln(), 1e-3);
}

#[test]
fn bad_input_is_an_error_not_a_panic() {
    let f = [3657.0, 1595.0, 3756.0];
    let e = rrho::thermo(&h2o(), &[3657.0, -1595.0, 3756.0], &Settings::default()).unwrap_err();
    assert!(e.to_string().contains("imaginary"), "{e}");
    for t in [0.0, -5.0, f64::NAN] {
        let s = Settings {
            temperature_k: t,
            ..Settings::default()
        };
        let e = rrho::thermo(&h2o(), &f, &s).unwrap_err();
        assert!(e.to_string().contains("temperature"), "{e}");
    }
    let e = rrho::thermo(&h2o(), &f[..2], &Settings::default()).unwrap_err();
    assert!(e.to_string().contains("3N−6 = 3"), "{e}");
    // Linear CO2 needs 3N−5 = 4.
    let e = rrho::thermo(&co2(), &[1333.0, 667.0, 2349.0], &Settings::default()).unwrap_err();
    assert!(e.to_string().contains("3N−5 = 4"), "{e}");
    let e = rrho::thermo(&h2o(), &[3657.0, 0.0, 3756.0], &Settings::default()).unwrap_err();
    assert!(e.to_string().contains("not a vibration"), "{e}");
}

#[test]
fn transition_state_leaves_its_imaginary_mode_out() {
    let s = Settings {
        kind: Kind::TransitionState,
        ..Settings::default()
    };
    // Water with its bend replaced by an imaginary mode: S_vib loses the 1595 term exactly.
    let th = rrho::thermo(&h2o(), &[3657.0, -1000.0, 3756.0], &s).unwrap();
    assert_eq!(th.imaginary_cm1, Some(1000.0));
    assert_eq!(th.modes.len(), 2);
    close("S_vib", th.s_vib, 0.000_003 + 0.000_002, 2e-6);
    let e = rrho::thermo(&h2o(), &[3657.0, 1595.0, 3756.0], &s).unwrap_err();
    assert!(e.to_string().contains("exactly one imaginary"), "{e}");
}

#[test]
fn qrrho_switches_low_modes_to_free_rotor() {
    let q = Qrrho::default();
    // Damping function definition (Grimme 2012): w(ω0) = 1/2.
    close("w(ω0)", rrho::qrrho_weight(100.0, &q), 0.5, 1e-15);
    assert!(rrho::qrrho_weight(3000.0, &q) > 0.999_998);
    // Water: all modes far above ω0, so qRRHO changes S by less than 1e-4 J/(mol K).
    let s = Settings {
        qrrho: Some(q),
        ..Settings::default()
    };
    let th = rrho::thermo(&h2o(), &[3657.0, 1595.0, 3756.0], &s).unwrap();
    close("S_total qRRHO", th.s_total, 188.6486, 1e-3);
    // A 10 cm⁻¹ mode: harmonic S is large (R(1 + ln(kT/hcν)) ≈ 36.7); the free rotor caps it.
    let sh = rrho::s_harmonic(10.0, 298.15);
    let sr = rrho::s_free_rotor(10.0, 298.15, &q);
    assert!(sh > 30.0 && sr < sh, "harmonic {sh}, rotor {sr}");
}

#[test]
fn eyring_rates_match_reference_values_3() {
    let t = 298.15;
    // §3 [C]: k_B T/h = 6.2124379916e12 s⁻¹.
    close("kT/h", kbt_over_h(t) / 6.212_437_991_6e12, 1.0, 1e-10);
    for (dg, k, thalf) in [
        (10.0, 2.905_435e5, 2.3857e-6),
        (15.0, 6.283_271e1, 11.032e-3),
        (20.0, 1.358_815e-2, 51.011),
        (25.0, 2.938_562e-6, 65.52 * 3600.0),
    ] {
        let r = rate::eyring(dg / KCALMOL_PER_HARTREE, t, 1, StandardState::OneMolar, 1.0).unwrap();
        assert_eq!(r.unit, "s^-1");
        close(&format!("k({dg})"), r.k / k, 1.0, 1e-6);
        close(
            &format!("t½({dg})"),
            half_life_first_order(r.k) / thalf,
            1.0,
            1e-4,
        );
        // Unimolecular: the standard state cancels.
        let rb = rate::eyring(dg / KCALMOL_PER_HARTREE, t, 1, StandardState::OneBar, 1.0).unwrap();
        close("unimolecular 1 bar = 1 M", rb.k / r.k, 1.0, 1e-12);
    }
    assert!(rate::eyring(0.01, t, 0, StandardState::OneBar, 1.0).is_err());
    assert!(rate::eyring(0.01, -1.0, 1, StandardState::OneBar, 1.0).is_err());
}

#[test]
fn bimolecular_standard_state_conversion_matches_reference_values_3() {
    let t = 298.15;
    // §3 [C]: ΔG‡(1 M) − ΔG‡(1 bar) = −RT ln(RT c°/p°) = −7.958501 kJ/mol = −1.902127 kcal/mol.
    let shift = standard_state_shift_hartree(t, 2);
    close("shift kJ/mol", kjmol(shift), -7.958_501, 1e-6);
    close("shift kcal/mol", kjmol(shift) / CALORIE_J, -1.902_127, 1e-6);
    // Molar volume at 1 bar 24.789570 L/mol, so c°(1 bar) = 1/24.789570 mol/L.
    close(
        "c°(1 bar)",
        StandardState::OneBar.concentration_mol_per_l(t),
        1.0 / 24.789_570,
        1e-8,
    );
    // A bimolecular k from ΔG‡ at 1 bar equals k from the shifted ΔG‡ at 1 M.
    let dg_bar = 15.0 / KCALMOL_PER_HARTREE;
    let kb = rate::eyring(dg_bar, t, 2, StandardState::OneBar, 1.0).unwrap();
    let km = rate::eyring(dg_bar + shift, t, 2, StandardState::OneMolar, 1.0).unwrap();
    assert_eq!(kb.unit, "L mol^-1 s^-1");
    close("k(1 bar) = k(1 M, shifted)", kb.k / km.k, 1.0, 1e-10);
    // Second-order half-life at 1 mol/L of each reactant: 1/(k c0).
    close(
        "t½ 2nd order",
        half_life_second_order(km.k, 1.0) * km.k,
        1.0,
        1e-12,
    );
}

#[test]
fn wigner_factor_matches_reference_values_3() {
    // §3 [C].
    close("κ(500i)", wigner(500.0, 298.15), 1.242_575_00, 1e-7);
    close("κ(1000i)", wigner(1000.0, 298.15), 1.970_300_00, 1e-7);
    close("κ(1500i)", wigner(-1500.0, 298.15), 3.183_174_99, 1e-7);
    close("κ(1000i, 200 K)", wigner(1000.0, 200.0), 3.156_332, 1e-6);
    close("κ(1000i, 1000 K)", wigner(1000.0, 1000.0), 1.086_253, 1e-6);
}

#[test]
fn cli_prints_every_term_and_a_json_record() {
    let dir = tempfile::tempdir().unwrap();
    std::fs::write(
        dir.path().join("water.xyz"),
        "3\nwater\nO 0 0 0\nH 0.75695033 0 0.58588228\nH -0.75695033 0 0.58588228\n",
    )
    .unwrap();
    let inp = dir.path().join("water.yaml");
    std::fs::write(
        &inp,
        "geometry: water.xyz\nfrequencies_cm1: [3657, 1595, 3756]\nmultiplicity: 1\n",
    )
    .unwrap();
    let exe = env!("CARGO_BIN_EXE_cairn");
    let out = std::process::Command::new(exe)
        .args(["thermo", inp.to_str().unwrap()])
        .output()
        .unwrap();
    let text = String::from_utf8_lossy(&out.stdout);
    assert!(
        out.status.success(),
        "{text}{}",
        String::from_utf8_lossy(&out.stderr)
    );
    for want in [
        "188.6486 J/(mol K)",
        "C2v",
        "symmetry number 2",
        "harmonic oscillator",
        "kcal/mol",
    ] {
        assert!(text.contains(want), "missing {want}:\n{text}");
    }
    let out = std::process::Command::new(exe)
        .args([
            "thermo",
            inp.to_str().unwrap(),
            "--json",
            "--qrrho",
            "--temperature",
            "298.15",
            "500",
        ])
        .output()
        .unwrap();
    assert!(out.status.success());
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    let r = v["results"].as_array().unwrap();
    assert_eq!(r.len(), 2);
    close("json S", r[0]["s_total"].as_f64().unwrap(), 188.6486, 1e-3);
    assert!(v["model"].as_str().unwrap().contains("quasi-RRHO"));
    // Bad input: imaginary frequency at a minimum, and T ≤ 0 — exit 1 with a message.
    std::fs::write(
        &inp,
        "geometry: water.xyz\nfrequencies_cm1: [3657, -1595, 3756]\n",
    )
    .unwrap();
    let out = std::process::Command::new(exe)
        .args(["thermo", inp.to_str().unwrap()])
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(1));
    assert!(String::from_utf8_lossy(&out.stderr).contains("imaginary"));
    let out = std::process::Command::new(exe)
        .args(["thermo", inp.to_str().unwrap(), "--temperature", "-3"])
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(1));
}

#[test]
fn remaining_bad_input_is_an_error_not_a_panic() {
    let f = [3657.0, 1595.0, 3756.0];
    let err =
        |s: Settings, m: &Molecule, f: &[f64]| rrho::thermo(m, f, &s).unwrap_err().to_string();
    let e = err(
        Settings {
            pressure_pa: 0.0,
            ..Settings::default()
        },
        &h2o(),
        &f,
    );
    assert!(e.contains("pressure"), "{e}");
    let e = err(
        Settings {
            multiplicity: 0,
            ..Settings::default()
        },
        &h2o(),
        &f,
    );
    assert!(e.contains("multiplicity"), "{e}");
    let e = err(
        Settings {
            symmetry_number: Some(0),
            ..Settings::default()
        },
        &h2o(),
        &f,
    );
    assert!(e.contains("symmetry number"), "{e}");
    // A transition state with two imaginary modes is a second-order saddle: refused.
    let e = err(
        Settings {
            kind: Kind::TransitionState,
            ..Settings::default()
        },
        &h2o(),
        &[-3657.0, -1595.0, 3756.0],
    );
    assert!(
        e.contains("exactly one imaginary") && e.contains("2 given"),
        "{e}"
    );
    // A model-surface pseudo-atom has no mass.
    let x = Molecule::new(vec![Element::X], vec![[0.1, 0.2, 0.0]]);
    let e = err(Settings::default(), &x, &[]);
    assert!(e.contains("real molecule"), "{e}");
    // Rates: T ≤ 0, molecularity outside 1–3, κ ≤ 0 are errors with the value named.
    for t in [0.0, -1.0, f64::NAN] {
        let e = rate::eyring(0.03, t, 1, StandardState::OneBar, 1.0).unwrap_err();
        assert!(e.to_string().contains("temperature"), "{e}");
    }
    for m in [0, 4] {
        let e = rate::eyring(0.03, 298.15, m, StandardState::OneBar, 1.0).unwrap_err();
        assert!(e.to_string().contains(&format!("got {m}")), "{e}");
    }
    assert!(rate::eyring(0.03, 298.15, 1, StandardState::OneBar, 0.0).is_err());
    assert!(rate::eyring(f64::NAN, 298.15, 1, StandardState::OneBar, 1.0).is_err());
}

#[test]
fn cli_names_the_input_file_and_the_problem() {
    let dir = tempfile::tempdir().unwrap();
    std::fs::write(
        dir.path().join("water.xyz"),
        "3\nwater\nO 0 0 0\nH 0.75695033 0 0.58588228\nH -0.75695033 0 0.58588228\n",
    )
    .unwrap();
    let inp = dir.path().join("water.yaml");
    let exe = env!("CARGO_BIN_EXE_cairn");
    let run = |text: &str, extra: &[&str]| {
        std::fs::write(&inp, text).unwrap();
        let out = std::process::Command::new(exe)
            .arg("thermo")
            .arg(&inp)
            .args(extra)
            .output()
            .unwrap();
        (
            out.status.code(),
            String::from_utf8_lossy(&out.stderr).to_string(),
        )
    };
    let good = "geometry: water.xyz\nfrequencies_cm1: [3657, 1595, 3756]\n";
    // Temperature ≤ 0 with otherwise good input.
    let (code, err) = run(good, &["--temperature", "-3"]);
    assert_eq!(code, Some(1));
    assert!(
        err.contains("water.yaml") && err.contains("temperature"),
        "{err}"
    );
    // Too few frequencies for three atoms.
    let (code, err) = run("geometry: water.xyz\nfrequencies_cm1: [3657, 1595]\n", &[]);
    assert_eq!(code, Some(1));
    assert!(
        err.contains("water.yaml") && err.contains("3N−6 = 3"),
        "{err}"
    );
    // Pressure ≤ 0.
    let (code, err) = run(good, &["--pressure", "0"]);
    assert_eq!(code, Some(1));
    assert!(err.contains("pressure"), "{err}");
}
