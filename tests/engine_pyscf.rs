//! The PySCF adapter (adapters/pyscf.yaml + adapters/pyscf_driver.py) with real PySCF.
//!
//! Check values: engines.md, "Cross-engine sanity check" — H2O at the xtb-optimised geometry
//! below, computed with NWChem 7.0.2 and Psi4 1.3.2 (independent programs); plus finite
//! differences of the adapter's own energies and gradients.

mod engine_support;

use cairn::engine::{find_engine, Engine, FailureKind, Settings};
use cairn::eval::Quantity;
use engine_support::*;
use std::sync::Arc;

fn pyscf(settings: &[(&str, &str)]) -> Arc<dyn Engine> {
    let s: Settings = settings
        .iter()
        .map(|(k, v)| (k.to_string(), v.to_string()))
        .collect();
    find_engine("pyscf", &s).expect("pyscf adapter loads")
}

// engines.md (the Psi4 input there): H2O, Å.
const H2O: &[(&str, [f64; 3])] = &[
    ("O", [0.0, 0.0, 0.10571016]),
    ("H", [0.0, 0.77208699, -0.46340508]),
    ("H", [0.0, -0.77208699, -0.46340508]),
];

#[test]
fn h2o_hf_sto3g_matches_nwchem_and_psi4() {
    let e = pyscf(&[]);
    let a = eval(e.as_ref(), &job(H2O, 0, 1, Quantity::Hessian));
    // Energy: Psi4 -74.962047825, NWChem -74.962047817 Eh.
    assert!((a.energy - -74.962047825).abs() < 2e-8, "{}", a.energy);
    // dE/dz(O): Psi4 -0.067401136961 (its output block), NWChem -0.06740125 Eh/bohr.
    let g = a.gradient.unwrap();
    assert!((g[2] - -0.067401137).abs() < 2e-7, "{}", g[2]);
    // By symmetry the two H atoms have mirror-image gradients and nothing moves along x.
    assert!((g[4] + g[7]).abs() < 1e-8 && (g[5] - g[8]).abs() < 1e-8);
    // Hessian [0,0]: NWChem analytic -0.0626713, PySCF in the probe -0.0626712 Eh/bohr².
    let h = a.hessian.unwrap();
    assert!((h[(0, 0)] - -0.0626712).abs() < 2e-7, "{}", h[(0, 0)]);
    // Hessian [1,1]: NWChem 1.0131956, PySCF in the probe 1.0131952.
    assert!((h[(1, 1)] - 1.0131952).abs() < 1e-6, "{}", h[(1, 1)]);
}

#[test]
fn hf_derivatives_match_finite_differences() {
    // A distorted, asymmetric H2O so that no gradient component vanishes by symmetry.
    let atoms: &[(&str, [f64; 3])] = &[
        ("O", [0.0, 0.02, 0.11]),
        ("H", [0.03, 0.80, -0.45]),
        ("H", [-0.02, -0.72, -0.49]),
    ];
    let e = pyscf(&[]);
    let j = job(atoms, 0, 1, Quantity::Hessian);
    let a = eval(e.as_ref(), &j);
    let g = a.gradient.unwrap();
    let h = a.hessian.unwrap();
    // Each PySCF run costs ~0.7 s (mostly the import), so only the coordinates of one H atom
    // (indices 3, 4, 5) are displaced: 6 energies and 6 gradients, central differences.
    let step = 1e-3;
    for i in 3..6 {
        let mut p = j.clone();
        p.quantity = Quantity::Gradient;
        p.coords[i] += step;
        let ap = eval(e.as_ref(), &p);
        p.coords[i] -= 2.0 * step;
        let am = eval(e.as_ref(), &p);
        let fd_g = (ap.energy - am.energy) / (2.0 * step);
        assert!(
            (g[i] - fd_g).abs() < 1e-6,
            "dE/dx[{i}]: {} vs FD {fd_g}",
            g[i]
        );
        let col = (ap.gradient.unwrap() - am.gradient.unwrap()) / (2.0 * step);
        let dh = max_abs((h.column(i) - col).iter().copied());
        assert!(
            dh < 1e-5,
            "Hessian column {i} vs FD of gradients: {dh:e} Eh/bohr^2"
        );
    }
}

#[test]
fn dft_b3lyp_cartesian_631gs_matches_nwchem_and_psi4() {
    let e = pyscf(&[
        ("method", "b3lyp"),
        ("basis", "6-31g*"),
        ("cartesian", "yes"),
    ]);
    let a = eval(e.as_ref(), &job(H2O, 0, 1, Quantity::Gradient));
    // NWChem -76.408516985, Psi4 -76.408517077 Eh (grids differ; the engines agree to 2e-7).
    assert!((a.energy - -76.408517).abs() < 3e-7, "{}", a.energy);
}

#[test]
fn pyscf_failures_are_named() {
    let j = job(H2O, 0, 1, Quantity::Gradient);
    let e = pyscf(&[("basis", "no-such-basis-xyz")]);
    let f = e.evaluate(&j, 0).unwrap_err();
    assert_eq!(f.kind, FailureKind::BadInput, "{f}");
    assert!(f.message.contains("unknown_basis"), "{f}");
    if let Some(p) = f.output {
        std::fs::remove_dir_all(p).ok();
    }
    // Two SCF cycles cannot converge to 1e-10; the first remedy (400 cycles) does.
    let e = pyscf(&[("max_cycle", "2")]);
    let f = e.evaluate(&j, 0).unwrap_err();
    assert_eq!(
        f.kind,
        FailureKind::Signature("scf_not_converged".into()),
        "{f}"
    );
    if let Some(p) = f.output {
        std::fs::remove_dir_all(p).ok();
    }
    let o = e.evaluate(&j, 1).unwrap();
    assert_eq!(o.remedies, vec!["more SCF cycles".to_string()]);
    assert!((o.answer.energy - -74.962047825).abs() < 2e-8);
}
