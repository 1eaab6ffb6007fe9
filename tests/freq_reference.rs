//! Harmonic frequency analysis against independent references.

use cairn::algo::freq::analyze;
use cairn::geom::Frame;
use cairn::units::BOHR_PER_ANGSTROM;
use nalgebra::{DMatrix, DVector};

fn h2o_masses() -> Vec<f64> {
    // ¹⁶O and ¹H isotope masses, AME (reference-values.md §4, [M]); also Cairn's element table.
    vec![15.994_914_619_57, 1.007_825_032_23, 1.007_825_032_23]
}

#[test]
fn h2o_force_field_hessian_matches_reference_values() {
    // Bᵀ F B Cartesian Hessian of H2O (mdyn/Å) from the Hoy–Mills–Strey force field at
    // r = 0.9572 Å, 104.52°; geometry O (0,0,0), H (±0.75695033, 0, 0.58588228) Å;
    // frequencies 1647.6689, 3831.8149, 3942.4311 cm⁻¹, reduced masses 1.08195, 1.04585,
    // 1.08188 u: reference-values.md §5 [C] (Hessian printed to 6 decimals, so 0.01 cm⁻¹).
    #[rustfmt::skip]
    let mdyn = [
        10.699892, 0.0, 0.0, -5.349946, 0.0, -4.140877, -5.349946, 0.0, 4.140877,
        0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0,
        0.0, 0.0, 7.239309, -3.187237, 0.0, -3.619655, 3.187237, 0.0, -3.619655,
        -5.349946, 0.0, -3.187237, 5.80237, 0.0, 3.664057, -0.452424, 0.0, -0.47682,
        0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0,
        -4.140877, 0.0, -3.619655, 3.664057, 0.0, 3.412354, 0.47682, 0.0, 0.2073,
        -5.349946, 0.0, 3.187237, -0.452424, 0.0, 0.47682, 5.80237, 0.0, -3.664057,
        0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0,
        4.140877, 0.0, -3.619655, -0.47682, 0.0, 0.2073, -3.664057, 0.0, 3.412354,
    ];
    // 1 Eh/bohr² = 1556.893103 N/m and 1 mdyn/Å = 100 N/m (reference-values.md §2 [C]).
    let h = DMatrix::from_row_slice(9, 9, &mdyn) * (100.0 / 1_556.893_103);
    let x = DVector::from_vec(
        [
            0.0,
            0.0,
            0.0,
            0.756_950_33,
            0.0,
            0.585_882_28,
            -0.756_950_33,
            0.0,
            0.585_882_28,
        ]
        .iter()
        .map(|v| v * BOHR_PER_ANGSTROM)
        .collect(),
    );
    let r = analyze(&h, &x, &h2o_masses(), Frame::Molecule, 50.0).unwrap();
    assert_eq!(r.n_external, 6);
    assert!(!r.linear);
    assert_eq!(r.n_imaginary, 0);
    let want = [1647.6689, 3831.8149, 3942.4311];
    let mu = [1.08195, 1.04585, 1.08188];
    assert_eq!(r.frequencies_cm1.len(), 3);
    for k in 0..3 {
        assert!(
            (r.frequencies_cm1[k] - want[k]).abs() < 0.01,
            "{:?}",
            r.frequencies_cm1
        );
        assert!(
            (r.reduced_masses[k] - mu[k]).abs() < 1e-4,
            "{:?}",
            r.reduced_masses
        );
        assert!((r.modes[k].norm() - 1.0).abs() < 1e-12);
    }
    // Symmetric stretch: both H move out along their bonds by the same amount (a₁).
    let m = &r.modes[1];
    assert!((m[3] + m[6]).abs() < 1e-6 && (m[5] - m[8]).abs() < 1e-6);
}

#[test]
fn same_hessian_as_pyscf_gives_pyscf_frequencies() {
    // Reference: PySCF's pyscf.hessian.thermo.harmonic_analysis on the HF/STO-3G Hessian of H2O
    // (tests/reference/pyscf_h2o_freq.py computes both and prints JSON).
    let script = concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/tests/reference/pyscf_h2o_freq.py"
    );
    let out = std::process::Command::new("python3")
        .arg(script)
        .env("OMP_NUM_THREADS", "1")
        .output()
        .expect("python3 must be installed (./.ci/setup)");
    assert!(
        out.status.success(),
        "{script} failed (pip package pyscf is installed by ./.ci/setup): {}",
        String::from_utf8_lossy(&out.stderr)
    );
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    let nums = |k: &str| -> Vec<f64> {
        v[k].as_array()
            .unwrap()
            .iter()
            .map(|x| x.as_f64().unwrap())
            .collect()
    };
    let coords = DVector::from_vec(nums("coords_bohr"));
    let masses = nums("masses");
    let rows: Vec<f64> = v["hessian"]
        .as_array()
        .unwrap()
        .iter()
        .flat_map(|r| r.as_array().unwrap().iter().map(|x| x.as_f64().unwrap()))
        .collect();
    let h = DMatrix::from_row_slice(9, 9, &rows);
    let r = analyze(&h, &coords, &masses, Frame::Molecule, 50.0).unwrap();
    let want = nums("frequencies_cm1");
    let mu = nums("reduced_masses");
    assert_eq!(r.frequencies_cm1.len(), want.len());
    for k in 0..want.len() {
        assert!(
            (r.frequencies_cm1[k] - want[k]).abs() < 1.0,
            "Cairn {:?} vs PySCF {want:?}",
            r.frequencies_cm1
        );
        assert!(
            (r.reduced_masses[k] - mu[k]).abs() < 1e-3,
            "{:?} vs {mu:?}",
            r.reduced_masses
        );
    }
    assert_eq!(r.n_imaginary, 0);
}

#[test]
fn linear_molecule_has_four_modes_and_imaginary_bends_are_counted() {
    // A linear symmetric triatomic O–C–O (a model of our own): stretch springs k between
    // neighbours and a bend term on the middle atom's displacement relative to the ends. The
    // symmetric stretch moves only the end atoms, so ν̃ = √(k/m_O)·5140.487 cm⁻¹ (textbook,
    // from memory); the bend is doubly degenerate and imaginary when its constant is negative.
    let (mc, mo, k) = (12.0, 15.994_914_619_57, 1.0);
    let d = 2.2;
    let x = DVector::from_vec(vec![0.0, 0.0, -d, 0.0, 0.0, 0.0, 0.0, 0.0, d]);
    let mut h = DMatrix::zeros(9, 9);
    // springs O1–C (z) and C–O2 (z)
    for (a, b) in [(2usize, 5usize), (5, 8)] {
        h[(a, a)] += k;
        h[(b, b)] += k;
        h[(a, b)] -= k;
        h[(b, a)] -= k;
    }
    for kb in [0.05, -0.05] {
        // bend: V = ½ kb (u_C − (u_O1 + u_O2)/2)² for u = x and u = y
        let mut hb = h.clone();
        for off in [0usize, 1] {
            let c = [(3 + off, 1.0), (off, -0.5), (6 + off, -0.5)];
            for (i, ci) in c {
                for (j, cj) in c {
                    hb[(i, j)] += kb * ci * cj;
                }
            }
        }
        let r = analyze(&hb, &x, &[mo, mc, mo], Frame::Molecule, 10.0).unwrap();
        assert!(r.linear);
        assert_eq!(r.n_external, 5);
        assert_eq!(r.frequencies_cm1.len(), 4);
        let sym = (k / mo).sqrt() * cairn::units::freq_factor_cm1();
        assert!(r.frequencies_cm1.iter().any(|f| (f - sym).abs() < 1e-6));
        // the doubly degenerate bend
        let bends: Vec<f64> = r.frequencies_cm1[..2].to_vec();
        assert!((bends[0] - bends[1]).abs() < 1e-6);
        assert_eq!(r.n_imaginary, if kb < 0.0 { 2 } else { 0 });
        assert_eq!(bends[0] < 0.0, kb < 0.0);
    }
}

#[test]
fn model_surface_reports_eigenvalues_and_counts_negative_ones() {
    // S1 of Müller–Brown: eigenvalues −750.862663 and 490.240708 (reference-values.md §1.1 [C]).
    let (_, _, hh) = cairn::engine::model::muller_brown(-0.822_001_559, 0.624_312_803);
    let mut h = DMatrix::zeros(3, 3);
    h[(0, 0)] = hh[0];
    h[(0, 1)] = hh[1];
    h[(1, 0)] = hh[1];
    h[(1, 1)] = hh[2];
    let x = DVector::from_vec(vec![-0.822_001_559, 0.624_312_803, 0.0]);
    let r = analyze(&h, &x, &[], Frame::Surface, 50.0).unwrap();
    assert_eq!(r.n_imaginary, 1);
    assert!((r.eigenvalues[0] + 750.862_663).abs() < 1e-3);
    assert!((r.eigenvalues[1] - 490.240_708).abs() < 1e-3);
    assert!(r.frequencies_cm1[0] < 0.0 && r.frequencies_cm1[1] > 0.0);
    // The negative mode is (0.761396, −0.648287) up to sign.
    assert!((r.modes[0][0].abs() - 0.761_396).abs() < 1e-5);
    assert!((r.modes[0][1].abs() - 0.648_287).abs() < 1e-5);
}
