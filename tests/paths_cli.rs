//! Bad input and partial results for the path commands. Model-surface runs use Müller–Brown
//! (no external program); the endpoint checks fail before any engine is started.

use serde_json::Value;
use std::path::{Path, PathBuf};
use std::process::Command;

fn data(name: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("tests/data")
        .join(name)
}

fn cairn(args: &[&str], dir: &Path) -> (i32, String, String) {
    let out = Command::new(env!("CARGO_BIN_EXE_cairn"))
        .args(args)
        .current_dir(dir)
        .env("OMP_NUM_THREADS", "1")
        .env("CAIRN_STORE", dir.join("store"))
        .output()
        .expect("run cairn");
    (
        out.status.code().unwrap_or(-1),
        String::from_utf8_lossy(&out.stdout).into_owned(),
        String::from_utf8_lossy(&out.stderr).into_owned(),
    )
}

fn write(dir: &Path, name: &str, text: &str) -> String {
    let p = dir.join(name);
    std::fs::write(&p, text).unwrap();
    p.to_str().unwrap().to_string()
}

#[test]
fn band_endpoints_must_match_and_differ() {
    let tmp = tempfile::tempdir().unwrap();
    let d = tmp.path();
    let r = data("formaldehyde.xyz");
    let r = r.to_str().unwrap();
    // different atom counts
    let three = write(
        d,
        "three.xyz",
        "3\nthree atoms\nC 0 0 0\nO 1.2 0 0\nH -0.6 0.9 0\n",
    );
    let (code, _, err) = cairn(&["band", r, &three, "--engine", "xtb"], d);
    assert_eq!(code, 1);
    assert!(
        err.contains("has 4 atoms but") && err.contains("has 3"),
        "{err}"
    );
    // different element order: first mismatching atom named
    let swapped = write(
        d,
        "swapped.xyz",
        "4\nO first\nO 1.2 0 0\nC 0 0 0\nH -0.6 0.9 0\nH -0.6 -0.9 0\n",
    );
    let (code, _, err) = cairn(&["band", r, &swapped, "--engine", "xtb"], d);
    assert_eq!(code, 1);
    assert!(
        err.contains("atom 1 is C in") && err.contains("but O in"),
        "{err}"
    );
    // identical ends (the copy is rotated and shifted: alignment finds them equal)
    let m = cairn::xyz::read(Path::new(r)).unwrap();
    let mut moved = m.clone();
    for c in &mut moved.coords {
        *c = [-c[1] + 3.0, c[0] - 1.0, c[2] + 0.5];
    }
    let copy = d.join("copy.xyz");
    cairn::xyz::write(&copy, &moved).unwrap();
    let (code, _, err) = cairn(&["band", r, copy.to_str().unwrap(), "--engine", "xtb"], d);
    assert_eq!(code, 1);
    assert!(err.contains("same geometry"), "{err}");
    // nothing was written for refused input
    assert!(!d.join("band").exists());
}

#[test]
fn band_out_of_budget_keeps_its_results() {
    let tmp = tempfile::tempdir().unwrap();
    let d = tmp.path();
    let a = write(d, "ma.xyz", "1\nMA\nX -0.558 1.442 0\n");
    let b = write(d, "mc.xyz", "1\nMC\nX -0.050 0.467 0\n");
    let (code, out, err) = cairn(
        &[
            "band",
            &a,
            &b,
            "--engine",
            "muller-brown",
            "--max-iterations",
            "5",
            "--out",
            "short",
        ],
        d,
    );
    assert_eq!(code, 3, "{out}\n{err}");
    assert!(out.contains("NOT CONVERGED"), "{out}");
    assert!(out.contains("step budget of 5 iterations"), "{out}");
    let rec: Value =
        serde_json::from_str(&std::fs::read_to_string(d.join("short/band.json")).unwrap()).unwrap();
    assert_eq!(rec["converged"], false);
    assert_eq!(rec["iterations"], 5);
    let frames = cairn::xyz::read_frames(&d.join("short/band.xyz")).unwrap();
    assert_eq!(frames.len(), 10);
    assert!(d.join("short/saddle_guess.xyz").exists());
}

#[test]
fn irc_refuses_a_minimum_and_scan_checks_atoms() {
    let tmp = tempfile::tempdir().unwrap();
    let d = tmp.path();
    // MA, a minimum (reference-values.md §1.1): no negative curvature.
    let a = write(d, "ma.xyz", "1\nMA\nX -0.558223635 1.441725842 0\n");
    let (code, _, err) = cairn(&["irc", &a, "--engine", "muller-brown"], d);
    assert_eq!(code, 1);
    assert!(err.contains("not a saddle"), "{err}");
    let r = data("formaldehyde.xyz");
    let (code, _, err) = cairn(
        &[
            "scan",
            r.to_str().unwrap(),
            "--engine",
            "xtb",
            "--bond",
            "1",
            "7",
            "--from",
            "1",
            "--to",
            "2",
            "--points",
            "3",
        ],
        d,
    );
    assert_eq!(code, 1);
    assert!(err.contains("atom 7 does not exist"), "{err}");
    let (code, _, err) = cairn(
        &[
            "scan",
            r.to_str().unwrap(),
            "--engine",
            "xtb",
            "--from",
            "1",
            "--to",
            "2",
            "--points",
            "3",
        ],
        d,
    );
    assert_eq!(code, 1);
    assert!(err.contains("say what to drive"), "{err}");
    // a real molecule on a model surface is refused with the reason
    let (code, _, err) = cairn(
        &["walk", r.to_str().unwrap(), "--engine", "muller-brown"],
        d,
    );
    assert_eq!(code, 1);
    assert!(err.contains("model surface"), "{err}");
}

#[test]
fn commands_work_on_muller_brown() {
    let tmp = tempfile::tempdir().unwrap();
    let d = tmp.path();
    let a = write(d, "ma.xyz", "1\nMA\nX -0.558 1.442 0\n");
    let b = write(d, "mc.xyz", "1\nMC\nX -0.050 0.467 0\n");
    // S1 and its neighbours MA, MC (reference-values.md §1.1, §1.2)
    let s1 = write(d, "s1.xyz", "1\nS1\nX -0.822001559 0.624312803 0\n");
    let (code, out, err) = cairn(&["band", &a, &b, "--engine", "muller-brown"], d);
    assert_eq!(code, 0, "{out}{err}");
    let guess = cairn::xyz::read(&d.join("band/saddle_guess.xyz")).unwrap();
    let (x, y) = (guess.coords[0][0], guess.coords[0][1]);
    assert!(
        ((x + 0.822).powi(2) + (y - 0.624).powi(2)).sqrt() < 0.01,
        "{x} {y}"
    );
    let (code, out, err) = cairn(
        &[
            "irc",
            &s1,
            "--engine",
            "muller-brown",
            "--reactant",
            &a,
            "--product",
            &b,
        ],
        d,
    );
    assert_eq!(code, 0, "{out}{err}");
    let rec: Value =
        serde_json::from_str(&std::fs::read_to_string(d.join("irc/irc.json")).unwrap()).unwrap();
    assert_eq!(rec["connects_reactant_and_product"], true);
    assert!(rec["forward_end"]["geometry"]["coordinates_surface_units"].is_array());
    let (code, out, err) = cairn(&["walk", &b, "--engine", "muller-brown"], d);
    assert_eq!(code, 0, "{out}{err}");
    let (code, out, err) = cairn(
        &[
            "scan",
            &b,
            "--engine",
            "muller-brown",
            "--cartesian",
            "1",
            "y",
            "--from",
            "0.47",
            "--to",
            "0.03",
            "--points",
            "23",
        ],
        d,
    );
    assert_eq!(code, 0, "{out}{err}");
    assert!(d.join("scan/profile.tsv").exists() && d.join("scan/saddle_guess.xyz").exists());
}
