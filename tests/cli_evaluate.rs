//! `cairn evaluate` end to end: output, the store (cached on the second run), exit statuses
//! and error messages.

mod cli_support;
mod engine_support;

use cli_support::{cairn, json_ok as json, stderr, stdout};
use engine_support::{job, tblite};
use std::path::Path;
use std::process::Command;

/// Müller–Brown minimum A, (−0.558224, 1.441726), E = −146.699517 (Müller & Brown 1979 as
/// commonly quoted; from memory).
const MB_MIN_A: &str = "1\nMueller-Brown minimum A\nX -0.558224 1.441726 0.0\n";

#[test]
fn muller_brown_twice_second_is_cached() {
    let dir = tempfile::tempdir().unwrap();
    std::fs::write(dir.path().join("a.xyz"), MB_MIN_A).unwrap();
    let args = [
        "evaluate",
        "a.xyz",
        "--engine",
        "muller-brown",
        "--store",
        "st",
        "--json",
        "--hessian",
        "--jobs",
        "2",
    ];
    let first = json(&cairn(&args, dir.path()));
    let second = json(&cairn(&args, dir.path()));
    assert_eq!(first["cached"], false);
    assert_eq!(second["cached"], true);
    assert_eq!(first["engine"], "muller-brown");
    let e = first["energy_hartree"].as_f64().unwrap();
    assert!((e - -146.699517).abs() < 1e-5, "{e}");
    // Same numbers, to the bit, from the store.
    assert_eq!(first["energy_hartree"], second["energy_hartree"]);
    assert_eq!(
        first["gradient_hartree_per_bohr"],
        second["gradient_hartree_per_bohr"]
    );
    assert_eq!(
        first["hessian_hartree_per_bohr2"],
        second["hessian_hartree_per_bohr2"]
    );
    // Near a minimum: small gradient, N rows of 3.
    let g = first["gradient_hartree_per_bohr"].as_array().unwrap();
    assert_eq!(g.len(), 1);
    assert_eq!(g[0].as_array().unwrap().len(), 3);
    for v in g[0].as_array().unwrap() {
        assert!(v.as_f64().unwrap().abs() < 0.01, "{g:?}");
    }
    // 3N × 3N Hessian, positive definite in x, y at a minimum.
    let h = first["hessian_hartree_per_bohr2"].as_array().unwrap();
    assert_eq!(h.len(), 3);
    let hv = |i: usize, j: usize| h[i][j].as_f64().unwrap();
    assert!(hv(0, 0) > 0.0 && hv(0, 0) * hv(1, 1) - hv(0, 1) * hv(1, 0) > 0.0);
    assert_eq!(hv(0, 1), hv(1, 0));
    // Entries are where the output says.
    for p in first["store_entries"].as_array().unwrap() {
        assert!(dir.path().join(p.as_str().unwrap()).is_file(), "{p}");
    }
    assert_eq!(first["units"]["energy"], "surface units");
}

#[test]
fn text_output_labels_every_number_and_default_store_is_used() {
    let dir = tempfile::tempdir().unwrap();
    std::fs::write(dir.path().join("a.xyz"), MB_MIN_A).unwrap();
    let o = cairn(
        &["evaluate", "a.xyz", "--engine", "muller-brown"],
        dir.path(),
    );
    assert_eq!(o.status.code(), Some(0), "{}", stderr(&o));
    let s = stdout(&o);
    assert!(s.contains("energy        -146.69951"), "{s}");
    assert!(s.contains("(surface units)"), "{s}");
    assert!(s.contains("source        engine"), "{s}");
    // Without --store, the store is ./.cairn-store.
    assert!(dir.path().join(".cairn-store").join("evals").is_dir());
    let o = cairn(
        &["evaluate", "a.xyz", "--engine", "muller-brown"],
        dir.path(),
    );
    assert!(
        stdout(&o).contains("source        evaluation store"),
        "{}",
        stdout(&o)
    );
    // CAIRN_STORE moves it.
    let o = Command::new(env!("CARGO_BIN_EXE_cairn"))
        .args(["evaluate", "a.xyz", "--engine", "muller-brown", "--json"])
        .current_dir(dir.path())
        .env("CAIRN_STORE", "elsewhere")
        .output()
        .unwrap();
    assert_eq!(json(&o)["cached"], false);
    assert!(dir.path().join("elsewhere").join("evals").is_dir());
}

#[test]
fn errors_have_status_1_and_say_what_is_wrong() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    std::fs::write(d.join("bad.xyz"), "2\ncomment\nH 0 0 0\nH 0 zero 0\n").unwrap();
    std::fs::write(d.join("h.xyz"), "1\nhydrogen atom\nH 0 0 0\n").unwrap();
    std::fs::write(
        d.join("water.xyz"),
        "3\nwater\nO 0 0 0\nH 0.76 0 0.59\nH -0.76 0 0.59\n",
    )
    .unwrap();
    let cases: Vec<(Vec<&str>, Vec<&str>)> = vec![
        (
            vec!["evaluate", "missing.xyz", "--engine", "muller-brown"],
            vec!["missing.xyz"],
        ),
        (
            vec!["evaluate", "bad.xyz", "--engine", "muller-brown"],
            vec!["bad.xyz:4"],
        ),
        // One electron cannot be a singlet; water with 10 electrons cannot be a doublet
        // (common practice).
        (
            vec!["evaluate", "h.xyz", "--engine", "muller-brown"],
            vec!["h.xyz", "multiplicity 1", "--multiplicity"],
        ),
        (
            vec![
                "evaluate",
                "water.xyz",
                "--engine",
                "muller-brown",
                "--multiplicity",
                "2",
            ],
            vec!["10 electrons"],
        ),
        (
            vec!["evaluate", "water.xyz", "--engine", "no-such-engine"],
            vec!["no-such-engine"],
        ),
        // The engine refuses real atoms: an engine failure, named.
        (
            vec!["evaluate", "water.xyz", "--engine", "muller-brown"],
            vec!["engine 'muller-brown'", "pseudo-atom X"],
        ),
        (
            vec![
                "evaluate",
                "water.xyz",
                "--engine",
                "muller-brown",
                "--set",
                "a=b",
            ],
            vec!["has no settings"],
        ),
    ];
    for (args, needles) in cases {
        let o = cairn(&args, d);
        let err = stderr(&o);
        assert_eq!(o.status.code(), Some(1), "{args:?}: {err}");
        assert!(err.starts_with("error: "), "{args:?}: {err}");
        for n in needles {
            assert!(err.contains(n), "{args:?}: '{n}' not in: {err}");
        }
        assert!(!err.contains("panicked"), "{err}");
        assert!(stdout(&o).is_empty());
    }
}

#[test]
fn usage_errors_have_status_2() {
    let dir = tempfile::tempdir().unwrap();
    for args in [
        vec!["evaluate", "a.xyz"],
        vec![
            "evaluate",
            "a.xyz",
            "--engine",
            "muller-brown",
            "--jobs",
            "0",
        ],
        vec![
            "evaluate",
            "a.xyz",
            "--engine",
            "muller-brown",
            "--set",
            "novalue",
        ],
        vec![
            "evaluate",
            "a.xyz",
            "--engine",
            "muller-brown",
            "--charge",
            "x",
        ],
    ] {
        let o = cairn(&args, dir.path());
        assert_eq!(o.status.code(), Some(2), "{args:?}: {}", stderr(&o));
    }
    let o = cairn(&["evaluate", "--help"], dir.path());
    assert_eq!(o.status.code(), Some(0));
    assert!(stdout(&o).contains("Exit status"));
}

#[test]
fn negative_charge_is_accepted() {
    let dir = tempfile::tempdir().unwrap();
    // H⁻ has 2 electrons: a singlet is possible (common practice). The engine then refuses
    // the real atom, which shows the charge got through the checks.
    std::fs::write(dir.path().join("h.xyz"), "1\nhydride\nH 0 0 0\n").unwrap();
    let o = cairn(
        &[
            "evaluate",
            "h.xyz",
            "--engine",
            "muller-brown",
            "--charge",
            "-1",
        ],
        dir.path(),
    );
    let err = stderr(&o);
    assert!(err.contains("engine 'muller-brown'"), "{err}");
}

// ---------------------------------------------------------------------------------------------
// Real xtb (/usr/bin/xtb, installed by .ci/setup).

/// Formyl radical HCO (a doublet), Å, a geometry of our own away from the minimum.
const HCO_XYZ: &str = "3\nformyl radical\nC 0.0 0.0 0.0\nO 1.18 0.0 0.02\nH -0.55 0.95 0.0\n";

#[test]
fn xtb_doublet_matches_tblite_and_is_cached() {
    let dir = tempfile::tempdir().unwrap();
    std::fs::write(dir.path().join("hco.xyz"), HCO_XYZ).unwrap();
    let args = [
        "evaluate",
        "hco.xyz",
        "--engine",
        "xtb",
        "--set",
        "accuracy=0.01",
        "--multiplicity",
        "2",
        "--store",
        "st",
        "--json",
    ];
    let first = json(&cairn(&args, dir.path()));
    assert_eq!(first["cached"], false);
    assert_eq!(first["engine"], "xtb");
    assert_eq!(first["units"]["energy"], "hartree");
    // The same geometry as HCO_XYZ, through tests/reference/tblite_ref.py.
    let hco = [
        ("C", [0.0, 0.0, 0.0]),
        ("O", [1.18, 0.0, 0.02]),
        ("H", [-0.55, 0.95, 0.0]),
    ];
    let (e_ref, g_ref) = tblite(
        &job(&hco, 0, 2, cairn::eval::Quantity::Gradient),
        "GFN2-xTB",
        0.01,
    );
    let e = first["energy_hartree"].as_f64().unwrap();
    // Agreement seen between xtb 6.5.1 and tblite: ≤ 5e-9 Eh, ≤ 2.4e-8 Eh/bohr at accuracy
    // 0.01 (DEVELOPERS.md, Adapters); checked here with margin.
    assert!((e - e_ref).abs() < 1e-7, "xtb {e} vs tblite {e_ref}");
    let g: Vec<f64> = first["gradient_hartree_per_bohr"]
        .as_array()
        .unwrap()
        .iter()
        .flat_map(|r| r.as_array().unwrap().iter().map(|x| x.as_f64().unwrap()))
        .collect();
    assert_eq!(g.len(), 9);
    for (a, b) in g.iter().zip(&g_ref) {
        assert!((a - b).abs() < 1e-6, "gradient {g:?} vs tblite {g_ref:?}");
    }
    // Not at a minimum: the gradient is not small, so the comparison means something.
    assert!(g.iter().map(|v| v * v).sum::<f64>().sqrt() > 1e-2);
    let second = json(&cairn(&args, dir.path()));
    assert_eq!(second["cached"], true);
    assert_eq!(second["energy_hartree"], first["energy_hartree"]);
    assert_eq!(
        second["gradient_hartree_per_bohr"],
        first["gradient_hartree_per_bohr"]
    );
    // A different setting is a different key: the engine runs again.
    let mut other = args.to_vec();
    other[5] = "accuracy=0.1";
    assert_eq!(json(&cairn(&other, dir.path()))["cached"], false);
}

#[test]
fn xtb_hessian_text_output() {
    let dir = tempfile::tempdir().unwrap();
    std::fs::write(
        dir.path().join("w.xyz"),
        "3\nwater\nO 0.0 0.0 0.12\nH 0.0 0.78 -0.47\nH 0.05 -0.74 -0.45\n",
    )
    .unwrap();
    let o = cairn(
        &[
            "evaluate",
            "w.xyz",
            "--engine",
            "xtb",
            "--hessian",
            "--store",
            "st",
            "--jobs",
            "2",
        ],
        dir.path(),
    );
    assert_eq!(o.status.code(), Some(0), "{}", stderr(&o));
    let s = stdout(&o);
    assert!(s.contains(" Eh\n"), "{s}");
    assert!(s.contains("gradient      Eh/bohr"), "{s}");
    assert!(s.contains("Hessian       Eh/bohr², 9 x 9"), "{s}");
    let o = cairn(
        &[
            "evaluate",
            "w.xyz",
            "--engine",
            "xtb",
            "--hessian",
            "--store",
            "st",
            "--json",
        ],
        dir.path(),
    );
    let v = json(&o);
    assert_eq!(v["cached"], true);
    let h = v["hessian_hartree_per_bohr2"].as_array().unwrap();
    assert_eq!(h.len(), 9);
    for (i, row) in h.iter().enumerate() {
        assert_eq!(row.as_array().unwrap().len(), 9);
        for (j, hij) in row.as_array().unwrap().iter().enumerate() {
            // xtb writes an exactly symmetric matrix (engines.md, section 1); the adapter's
            // rotation back from its evaluation frame adds only rounding.
            let (a, b) = (hij.as_f64().unwrap(), h[j][i].as_f64().unwrap());
            assert!(
                (a - b).abs() < 1e-12,
                "H[{i}][{j}] = {a}, H[{j}][{i}] = {b}"
            );
        }
    }
    // O–H stretch block is stiff and positive: diagonal y of H2 > 0.
    assert!(h[4][4].as_f64().unwrap() > 0.1, "{h:?}");
}

#[test]
fn xtb_failure_names_the_kept_output() {
    let dir = tempfile::tempdir().unwrap();
    // Two hydrogens on top of each other: xtb refuses (engines.md, failure modes).
    std::fs::write(
        dir.path().join("bad.xyz"),
        "3\ncoincident atoms\nO 0 0 0\nH 0.0 0.0 0.96\nH 0.0 0.0 0.96\n",
    )
    .unwrap();
    let o = Command::new(env!("CARGO_BIN_EXE_cairn"))
        .args(["evaluate", "bad.xyz", "--engine", "xtb", "--store", "st"])
        .current_dir(dir.path())
        .env("CAIRN_SCRATCH", dir.path())
        .env("OMP_NUM_THREADS", "1")
        .output()
        .unwrap();
    let err = stderr(&o);
    assert_eq!(o.status.code(), Some(1), "{err}");
    assert!(err.contains("engine 'xtb'"), "{err}");
    assert!(err.contains("after 1 attempt"), "{err}");
    let kept = err
        .split("engine output kept in ")
        .nth(1)
        .and_then(|s| s.split(')').next())
        .unwrap_or_else(|| panic!("no kept output named: {err}"));
    assert!(Path::new(kept).exists(), "{kept}");
}
