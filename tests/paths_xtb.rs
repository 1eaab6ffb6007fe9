//! Path commands end to end on GFN2-xTB (xtb 6.5.1 at /usr/bin/xtb), with geometries of our own
//! in tests/data/ (each prepared by a plain `xtb --opt tight`; see the comment lines).
//!
//! 1. Formaldehyde → trans-hydroxycarbene (1,2-H shift): `cairn band`, refinement by P-RFO
//!    (`cairn saddle`) following the band tangent, exactly one imaginary mode, `cairn irc` whose two ends match
//!    the reactant and product bond graphs, energies falling monotonically from the saddle.
//! 2. Cl⁻ + CH3Cl identity SN2: `cairn scan` of the forming C–Cl bond gives a smooth one-peak
//!    profile whose maximum refines (`cairn saddle`) to a first-order saddle with equal C–Cl bonds (the identity
//!    reaction's saddle is symmetric: a fact of the reaction, common practice).

use cairn::molecule::Molecule;
use cairn::units::{ANGSTROM_PER_BOHR, KCALMOL_PER_HARTREE};
use serde_json::Value;
use std::path::{Path, PathBuf};
use std::process::Command;

fn data(name: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("tests/data")
        .join(name)
}

fn cairn(args: &[&str], store: &Path) -> (i32, String, String) {
    let out = Command::new(env!("CARGO_BIN_EXE_cairn"))
        .args(args)
        .env("OMP_NUM_THREADS", "1")
        .env("CAIRN_STORE", store)
        .output()
        .expect("run cairn");
    (
        out.status.code().unwrap_or(-1),
        String::from_utf8_lossy(&out.stdout).into_owned(),
        String::from_utf8_lossy(&out.stderr).into_owned(),
    )
}

fn json(path: &Path) -> Value {
    let text = std::fs::read_to_string(path).unwrap_or_else(|e| panic!("{}: {e}", path.display()));
    serde_json::from_str(&text).unwrap()
}

fn floats(v: &Value) -> Vec<f64> {
    v.as_array()
        .unwrap()
        .iter()
        .map(|x| x.as_f64().unwrap())
        .collect()
}

/// Refine with `cairn saddle` (P-RFO) following the mode file a path command wrote; returns
/// its JSON record and the refined geometry.
fn refine(
    guess: &Path,
    mode: &Path,
    prefix: &Path,
    charge: &str,
    store: &Path,
) -> (Value, Molecule) {
    let (code, stdout, stderr) = cairn(
        &[
            "saddle",
            guess.to_str().unwrap(),
            "--engine",
            "xtb",
            "--charge",
            charge,
            "--follow-file",
            mode.to_str().unwrap(),
            "--jobs",
            "2",
            "--out",
            prefix.to_str().unwrap(),
        ],
        store,
    );
    assert_eq!(code, 0, "{stdout}\n{stderr}");
    let rec = json(&prefix.with_extension("json"));
    let m = cairn::xyz::read(&prefix.with_extension("xyz")).unwrap();
    (rec, m)
}

#[test]
fn formaldehyde_to_hydroxycarbene_band_refine_irc() {
    let tmp = tempfile::tempdir().unwrap();
    let store = tmp.path().join("store");
    let out = tmp.path().join("band");
    let (r, p) = (data("formaldehyde.xyz"), data("hydroxycarbene.xyz"));
    let (rs, ps) = (r.to_str().unwrap(), p.to_str().unwrap());
    let (code, stdout, stderr) = cairn(
        &[
            "band",
            rs,
            ps,
            "--engine",
            "xtb",
            "--images",
            "8",
            "--out",
            out.to_str().unwrap(),
        ],
        &store,
    );
    assert_eq!(code, 0, "{stdout}\n{stderr}");
    let band = json(&out.join("band.json"));
    assert_eq!(band["converged"], true);
    let e = floats(&band["energies"]);
    assert_eq!(e.len(), 10);
    let hi = band["highest_image"].as_u64().unwrap() as usize;
    assert!(hi > 0 && hi < 9);
    // The band is a barrier: highest image above both ends.
    assert!(e[hi] > e[0] && e[hi] > e[9]);
    // The band file holds every image.
    let frames = cairn::xyz::read_frames(&out.join("band.xyz")).unwrap();
    assert_eq!(frames.len(), 10);

    // Refine the highest image with `cairn saddle`, following the band tangent.
    let ts = tmp.path().join("ts");
    let (rec, _) = refine(
        &out.join("saddle_guess.xyz"),
        &out.join("saddle_guess_mode.txt"),
        &ts,
        "0",
        &store,
    );
    assert_eq!(rec["converged"], true, "{rec}");
    assert_eq!(rec["n_imaginary"], 1, "{}", rec["frequencies_cm1"]);
    assert_eq!(rec["n_negative_eigenvalues"], 1);
    // The climbing image was close to it: within 1 kcal/mol.
    let ets = rec["energy_hartree"].as_f64().unwrap();
    assert!(((ets - e[hi]) * KCALMOL_PER_HARTREE).abs() < 1.0);
    let saddle_file = ts.with_extension("xyz");

    // IRC from the refined saddle: its ends are the reactant and the product.
    let irc_out = tmp.path().join("irc");
    let (code, stdout, stderr) = cairn(
        &[
            "irc",
            saddle_file.to_str().unwrap(),
            "--engine",
            "xtb",
            "--reactant",
            rs,
            "--product",
            ps,
            "--out",
            irc_out.to_str().unwrap(),
        ],
        &store,
    );
    assert_eq!(code, 0, "{stdout}\n{stderr}");
    let irc = json(&irc_out.join("irc.json"));
    assert_eq!(irc["connects_reactant_and_product"], true, "{stdout}");
    let fr = irc["forward_end"]["matches_reactant"].as_bool().unwrap();
    let fp = irc["forward_end"]["matches_product"].as_bool().unwrap();
    let rr = irc["reverse_end"]["matches_reactant"].as_bool().unwrap();
    let rp = irc["reverse_end"]["matches_product"].as_bool().unwrap();
    assert!((fr && rp) || (fp && rr), "{stdout}");
    // Both ends carry geometries.
    for k in ["forward_end", "reverse_end"] {
        assert_eq!(irc[k]["geometry"]["symbols"].as_array().unwrap().len(), 4);
    }
    // Energy falls monotonically from the saddle on both sides.
    let e0 = irc["saddle_energy"].as_f64().unwrap();
    for k in ["forward", "reverse"] {
        let es = floats(&irc[k]["energies"]);
        assert!(es.len() > 3, "{k}: {} points", es.len());
        let mut prev = e0;
        for (i, x) in es.iter().enumerate() {
            assert!(*x < prev, "{k}: energy rises at point {i}");
            prev = *x;
        }
        let arcs = floats(&irc[k]["arc"]);
        assert!(arcs.windows(2).all(|w| w[1] > w[0]));
    }
    // The minimised ends are the two prepared minima (energies within 0.1 kcal/mol of the
    // comment-line energies of tests/data, computed by xtb --opt tight).
    let (er, ep) = (-7.175_648_079_036, -7.093_177_691_341);
    let ends: Vec<f64> = ["forward_end", "reverse_end"]
        .iter()
        .map(|k| irc[*k]["energy"].as_f64().unwrap())
        .collect();
    let near = |a: f64, b: f64| ((a - b) * KCALMOL_PER_HARTREE).abs() < 0.1;
    assert!(
        (near(ends[0], er) && near(ends[1], ep)) || (near(ends[0], ep) && near(ends[1], er)),
        "end energies {ends:?}"
    );
}

#[test]
fn sn2_bond_scan_peaks_at_a_symmetric_first_order_saddle() {
    let tmp = tempfile::tempdir().unwrap();
    let store = tmp.path().join("store");
    let out = tmp.path().join("scan");
    let m = data("sn2_complex.xyz");
    // Atoms: 1 C, 2 Cl (bonded), 3 Cl (the nucleophile), 4-6 H. Drive C–Cl(3) from the
    // ion–dipole complex (2.95 Å) through the saddle to the product side (1.85 Å).
    let (code, stdout, stderr) = cairn(
        &[
            "scan",
            m.to_str().unwrap(),
            "--engine",
            "xtb",
            "--charge",
            "-1",
            "--bond",
            "1",
            "3",
            "--from",
            "2.95",
            "--to",
            "1.85",
            "--points",
            "12",
            "--out",
            out.to_str().unwrap(),
        ],
        &store,
    );
    assert_eq!(code, 0, "{stdout}\n{stderr}");
    let scan = json(&out.join("scan.json"));
    assert_eq!(scan["all_converged"], true);
    let pts = scan["points"].as_array().unwrap();
    let e: Vec<f64> = pts
        .iter()
        .map(|p| p["energy"].as_f64().unwrap() * KCALMOL_PER_HARTREE)
        .collect();
    // Every point reached its value (Å).
    for p in pts {
        let (t, r) = (floats(&p["target"])[0], floats(&p["reached"])[0]);
        assert!((t - r).abs() < 2e-3, "target {t} reached {r}");
    }
    // Smooth: rises to one maximum, then falls; no jump (second differences below 3 kcal/mol
    // on a 0.1 Å grid, where the barrier is about 10 kcal/mol high).
    let top = e
        .iter()
        .enumerate()
        .max_by(|a, b| a.1.total_cmp(b.1))
        .map(|(i, _)| i)
        .unwrap();
    assert!(top > 0 && top < e.len() - 1);
    assert!(e[..=top].windows(2).all(|w| w[1] > w[0]), "{e:?}");
    assert!(e[top..].windows(2).all(|w| w[1] < w[0]), "{e:?}");
    for w in e.windows(3) {
        assert!((w[2] - 2.0 * w[1] + w[0]).abs() < 3.0, "{e:?}");
    }
    assert_eq!(
        scan["saddle_guess"]["index"][0].as_u64().unwrap() as usize,
        top
    );

    let ts = tmp.path().join("ts");
    let (rec, sm) = refine(
        &out.join("saddle_guess.xyz"),
        &out.join("saddle_guess_mode.txt"),
        &ts,
        "-1",
        &store,
    );
    assert_eq!(rec["converged"], true, "{rec}");
    assert_eq!(rec["n_imaginary"], 1, "{}", rec["frequencies_cm1"]);
    let x = sm.flat();
    let d = |i: usize, j: usize| {
        (0..3)
            .map(|k| (x[3 * i + k] - x[3 * j + k]).powi(2))
            .sum::<f64>()
            .sqrt()
            * ANGSTROM_PER_BOHR
    };
    assert!(
        (d(0, 1) - d(0, 2)).abs() < 0.01,
        "C–Cl {} and {} Å",
        d(0, 1),
        d(0, 2)
    );
    // The saddle lies above the scan maximum by less than the scan's grid can hide (1 kcal/mol).
    let es = rec["energy_hartree"].as_f64().unwrap() * KCALMOL_PER_HARTREE;
    assert!(
        es >= e[top] - 1e-3 && es - e[top] < 1.0,
        "saddle {es}, scan top {}",
        e[top]
    );
}
