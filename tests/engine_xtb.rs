//! The xtb adapter against independent references, with real xtb (/usr/bin/xtb).
//!
//! References: the GFN2-xTB implementation in the pip package `tblite` (run through
//! tests/reference/tblite_ref.py), and central finite differences of the adapter's own energies
//! and gradients.

mod engine_support;

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
    let e = xtb(&[]);
    for (label, atoms, charge, mult) in [
        ("H2O", H2O, 0, 1),
        ("CH3OH", METHANOL, 0, 1),
        ("HCO doublet", HCO, 0, 2),
        ("H3O+", H3O_PLUS, 1, 1),
    ] {
        let j = job(atoms, charge, mult, Quantity::Gradient);
        let a = eval(e.as_ref(), &j);
        // Reference: tblite GFN2-xTB, same accuracy (1.0) and electronic temperature (300 K).
        let (e_ref, g_ref) = tblite(&j, "GFN2-xTB", 1.0);
        let de = (a.energy - e_ref).abs();
        let dg = max_abs((a.gradient.unwrap() - &g_ref).iter().copied());
        eprintln!(
            "{label}: E = {:.10} Eh, |dE| = {de:.2e} Eh, max |dg| = {dg:.2e} Eh/bohr",
            a.energy
        );
        assert!(
            de <= 1e-6,
            "{label}: energy differs from tblite by {de:e} Eh"
        );
        assert!(
            dg <= 1e-5,
            "{label}: gradient differs from tblite by {dg:e} Eh/bohr"
        );
        assert!(
            max_abs(g_ref.iter().copied()) > 1e-3,
            "{label}: test geometry too close to a minimum"
        );
    }
}
