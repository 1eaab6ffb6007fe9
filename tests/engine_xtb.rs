//! The xtb adapter against independent references, with real xtb (/usr/bin/xtb).
//!
//! References: the GFN2-xTB implementation in the pip package `tblite` (run through
//! tests/reference/tblite_ref.py), and central finite differences of the adapter's own energies
//! and gradients.

mod engine_support;

use cairn::engine::FailureKind;
use cairn::eval::Quantity;
use engine_support::*;

// Geometries (Å) built by hand, deliberately away from minima so that gradients are not small.
const H2O: &[(&str, [f64; 3])] = &[
    ("O", [0.0, 0.0, 0.12]),
    ("H", [0.0, 0.78, -0.47]),
    ("H", [0.05, -0.74, -0.45]),
];
const METHANOL: &[(&str, [f64; 3])] = &[
    ("C", [-0.046, 0.663, 0.01]),
    ("O", [-0.046, -0.758, 0.0]),
    ("H", [0.86, -1.06, 0.02]),
    ("H", [-1.08, 0.98, 0.0]),
    ("H", [0.45, 1.08, 0.89]),
    ("H", [0.47, 1.05, -0.91]),
];
const HCO: &[(&str, [f64; 3])] = &[
    ("C", [0.0, 0.0, 0.0]),
    ("O", [1.18, 0.0, 0.02]),
    ("H", [-0.55, 0.95, 0.0]),
];
const H3O_PLUS: &[(&str, [f64; 3])] = &[
    ("O", [0.0, 0.0, 0.1]),
    ("H", [0.95, 0.0, -0.25]),
    ("H", [-0.47, 0.82, -0.25]),
    ("H", [-0.47, -0.82, -0.27]),
];

#[test]
fn energies_and_gradients_match_tblite() {
    // At accuracy 1 (xtb's default) the SCC is converged loosely: gradients agree to ~2e-6
    // Eh/bohr; at 0.01 to ~2e-8, so there the check is ten times tighter than required.
    tblite_comparison("1", 1e-5);
    tblite_comparison("0.01", 1e-6);
}

fn tblite_comparison(acc: &str, gtol: f64) {
    let e = xtb(&[("accuracy", acc)]);
    for (label, atoms, charge, mult) in [
        ("H2O", H2O, 0, 1),
        ("CH3OH", METHANOL, 0, 1),
        ("HCO doublet", HCO, 0, 2),
        ("H3O+", H3O_PLUS, 1, 1),
    ] {
        let j = job(atoms, charge, mult, Quantity::Gradient);
        let a = eval(e.as_ref(), &j);
        // Reference: tblite GFN2-xTB, same accuracy and electronic temperature (300 K).
        let (e_ref, g_ref) = tblite(&j, "GFN2-xTB", acc.parse().unwrap());
        let de = (a.energy - e_ref).abs();
        let dg = max_abs((a.gradient.unwrap() - &g_ref).iter().copied());
        eprintln!(
            "{label} (acc {acc}): E = {:.10} Eh, |dE| = {de:.2e} Eh, max |dg| = {dg:.2e} Eh/bohr",
            a.energy
        );
        assert!(
            de <= 1e-6,
            "{label}: energy differs from tblite by {de:e} Eh"
        );
        assert!(
            dg <= gtol,
            "{label}: gradient differs from tblite by {dg:e} Eh/bohr"
        );
        assert!(
            max_abs(g_ref.iter().copied()) > 1e-3,
            "{label}: test geometry too close to a minimum"
        );
    }
}

// Bent HCN with C and N both on the z axis (sharing x = 0 and y = 0) and H moved off it: the
// geometry that triggers the xtb 6.5.1 analytic-gradient defect (engines.md, "Analytic gradient
// bug": the x gradients of C and N come out wrong, even in sign).
const HCN_BENT: &[(&str, [f64; 3])] = &[
    ("H", [0.3, 0.0, -1.06]),
    ("C", [0.0, 0.0, 0.0]),
    ("N", [0.0, 0.0, 1.156]),
];
const HCN_LINEAR: &[(&str, [f64; 3])] = &[
    ("H", [0.0, 0.0, -1.09]),
    ("C", [0.0, 0.0, 0.0]),
    ("N", [0.0, 0.0, 1.17]),
];
const CO2: &[(&str, [f64; 3])] = &[
    ("O", [0.0, 0.0, -1.18]),
    ("C", [0.0, 0.0, 0.0]),
    ("O", [0.0, 0.0, 1.15]),
];

/// Central differences of energies, step 1e-3 bohr: truncation error ~h²·E'''/6 ≈ 1e-7 and
/// rounding 1e-12/2h = 5e-10 Eh/bohr, so 2e-5 Eh/bohr leaves room for SCC noise at acc 0.01.
const FD_STEP: f64 = 1e-3;
const FD_TOL: f64 = 2e-5;

#[test]
fn gradients_match_finite_differences_of_energies() {
    let e = xtb(&[("accuracy", "0.01")]);
    for (label, atoms, mult) in [("H2O", H2O, 1), ("HCO", HCO, 2), ("HCN bent", HCN_BENT, 1)] {
        let j = job(atoms, 0, mult, Quantity::Gradient);
        let g = eval(e.as_ref(), &j).gradient.unwrap();
        let fd = fd_gradient(e.as_ref(), &j, FD_STEP);
        let d = max_abs((&g - &fd).iter().copied());
        eprintln!("{label}: max |analytic - FD| = {d:.2e} Eh/bohr");
        assert!(
            d < FD_TOL,
            "{label}: gradient differs from FD by {d:e} Eh/bohr"
        );
    }
}

#[test]
fn rotated_frame_defends_against_the_gradient_defect() {
    let j = job(HCN_BENT, 0, 1, Quantity::Gradient);
    // Without the defence (rotate_frame: no) the analytic gradient is wrong...
    let off = xtb(&[("accuracy", "0.01"), ("rotate_frame", "no")]);
    let g_off = eval(off.as_ref(), &j).gradient.unwrap();
    let fd = fd_gradient(off.as_ref(), &j, FD_STEP);
    let d_off = max_abs((&g_off - &fd).iter().copied());
    // ... with it (the adapter's default) it agrees with finite differences.
    let on = xtb(&[("accuracy", "0.01")]);
    let g_on = eval(on.as_ref(), &j).gradient.unwrap();
    let d_on = max_abs((&g_on - &fd).iter().copied());
    eprintln!("bent HCN: |analytic - FD| = {d_off:.2e} without, {d_on:.2e} with the rotated frame");
    assert!(
        d_off > 1e-4,
        "the defect no longer shows ({d_off:e}); is the defence still needed?"
    );
    assert!(
        d_on < FD_TOL,
        "rotated frame: gradient differs from FD by {d_on:e}"
    );
    // Energies do not depend on the frame.
    let e_off = eval(off.as_ref(), &j).energy;
    let e_on = eval(on.as_ref(), &j).energy;
    assert!((e_off - e_on).abs() < 1e-9, "{e_off} vs {e_on}");
}

/// Compare the xtb Hessian with central differences of the adapter's gradients on the internal
/// subspace: P·H·P against P·H_fd·P, with P the plain Cartesian projector onto the complement of
/// rigid translations and rotations, built independently in the test support. (xtb projects
/// translations and rotations out of its file for H2O-like molecules (engines.md); for linear
/// molecules the file equals the raw matrix, measured here. P·H·P is the same either way.)
/// Returns (H, P) for further checks.
fn check_hessian(
    label: &str,
    atoms: &[(&str, [f64; 3])],
    mult: u32,
    tol: f64,
) -> (nalgebra::DMatrix<f64>, nalgebra::DMatrix<f64>) {
    let e = xtb(&[("accuracy", "0.01")]);
    let j = job(atoms, 0, mult, Quantity::Hessian);
    let a = eval(e.as_ref(), &j);
    let h = a.hessian.unwrap();
    let fd = fd_hessian(e.as_ref(), &j, 5e-3);
    let p = rigid_complement(&j.coords);
    let d = max_abs((&p * &h * &p - &p * fd * &p).iter().copied());
    let asym = max_abs((&h - h.transpose()).iter().copied());
    let scale = max_abs(h.iter().copied());
    eprintln!("{label}: max |P H P - P H_fd P| = {d:.2e} Eh/bohr^2 (largest element {scale:.3})");
    assert!(asym < 1e-8, "{label}: Hessian not symmetric ({asym:e})");
    assert!(
        d < tol,
        "{label}: Hessian differs from FD of gradients by {d:e}"
    );
    // The energy of the Hessian run equals the energy of a gradient run.
    let mut jg = j.clone();
    jg.quantity = Quantity::Gradient;
    let eg = eval(e.as_ref(), &jg).energy;
    assert!(
        (a.energy - eg).abs() < 1e-6,
        "{label}: {} vs {eg}",
        a.energy
    );
    (h, p)
}

#[test]
fn hessian_matches_finite_differences_of_gradients() {
    // Tolerance: xtb differentiates its gradients with step 0.005 bohr at SCC accuracy 0.3
    // (engines.md), the reference uses the same step; 2e-4 Eh/bohr² is ~0.03 % of the largest
    // element.
    let (h, p) = check_hessian("H2O", H2O, 1, 2e-4);
    // The file has translations and rotations projected out (engines.md): H = P H P.
    let d = max_abs((&p * &h * &p - &h).iter().copied());
    assert!(d < 2e-4, "H2O Hessian file is not projected ({d:e})");
    check_hessian("HCO", HCO, 2, 2e-4);
}

#[test]
fn hessian_of_linear_molecules() {
    // xtb --hess aborts on these without `$symmetry maxat=0` (engines.md); the FD reference
    // displaces atoms off the axis, so it also relies on the rotated-frame gradient defence.
    check_hessian("HCN linear", HCN_LINEAR, 1, 2e-4);
    check_hessian("CO2", CO2, 1, 2e-4);
}

/// The two defences against the `--hess` abort on (near-)linear molecules: `$symmetry maxat=0`
/// in the control input, and deciding success from complete, validated output (with failure
/// signatures) rather than from the exit status.
#[test]
fn linear_hessian_abort_is_defended_twice() {
    let no_symmetry_skip = ("$symmetry\n       maxat=0\n", "");
    for (label, atoms) in [("HCN", HCN_LINEAR), ("CO2", CO2)] {
        let j = job(atoms, 0, 1, Quantity::Hessian);
        let shipped = xtb(&[]);
        let ok = shipped.evaluate(&j, 0).expect("shipped adapter");
        assert!(ok.raw_output.contains("status: exit status 0"), "{label}");

        // Without the control input xtb aborts after writing a complete Hessian file...
        let (variant, _d) = xtb_variant(&[no_symmetry_skip], &[]);
        let crashed = variant
            .evaluate(&j, 0)
            .expect("complete output despite the abort");
        assert!(
            crashed.raw_output.contains("SIGABRT") || crashed.raw_output.contains("status 134"),
            "{label}: xtb no longer aborts here: {}",
            &crashed.raw_output[..200.min(crashed.raw_output.len())]
        );
        // ... which is bit-identical to the one from the clean run (engines.md).
        assert_eq!(crashed.answer.hessian, ok.answer.hessian, "{label}");

        // Without either defence the evaluation fails.
        let (strict, _d2) = xtb_variant(
            &[
                no_symmetry_skip,
                ("exit_status: ignored", "exit_status: must_be_zero"),
            ],
            &[],
        );
        let err = strict.evaluate(&j, 0).expect_err("exit status decides");
        assert_eq!(err.kind, FailureKind::Crash, "{label}: {err}");
        assert!(
            err.message.contains("SIGABRT") || err.message.contains("134"),
            "{err}"
        );
        if let Some(dir) = err.output {
            std::fs::remove_dir_all(dir).ok();
        }
    }
}
