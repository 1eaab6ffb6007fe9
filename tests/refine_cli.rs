//! `cairn relax`, `cairn saddle` and `cairn modes` end to end: records, files, exit statuses.
//!
//! Check values: Müller–Brown stationary points and Hessian eigenvalues from
//! ../shared/notes/reference-values.md §1.1 [C] (Müller & Brown, Theor. Chim. Acta 53, 75 (1979)).

mod cli_support;

use cli_support::{cairn, json, stderr};

fn num(v: &serde_json::Value) -> f64 {
    v.as_f64().unwrap()
}

const S1: (f64, f64, f64) = (-0.822_001_559, 0.624_312_803, -40.664_843_509);
const MA: (f64, f64, f64) = (-0.558_223_635, 1.441_725_842, -146.699_517_210);

#[test]
fn muller_brown_saddle_both_methods() {
    let dir = tempfile::tempdir().unwrap();
    std::fs::write(
        dir.path().join("g.xyz"),
        "1\nguess near S1\nX -0.78 0.58 0.0\n",
    )
    .unwrap();
    for method in ["prfo", "newton"] {
        let out = format!("ts-{method}");
        let o = cairn(
            &[
                "saddle",
                "g.xyz",
                "--engine",
                "muller-brown",
                "--method",
                method,
                "--out",
                &out,
                "--store",
                "st",
                "--json",
            ],
            dir.path(),
        );
        assert_eq!(o.status.code(), Some(0), "{}", stderr(&o));
        let r = json(&o);
        assert_eq!(r["converged"], true, "{}", r["reason"]);
        let g = &r["geometry"][0];
        assert!((num(&g[0]) - S1.0).abs() < 1e-3 && (num(&g[1]) - S1.1).abs() < 1e-3);
        assert!((num(&r["energy_hartree"]) - S1.2).abs() < 1e-3);
        assert_eq!(r["n_imaginary"], 1);
        let f = r["frequencies_cm1"].as_array().unwrap();
        assert_eq!(f.len(), 2);
        assert!(num(&f[0]) < 0.0 && num(&f[1]) > 0.0);
        // S1 Hessian eigenvalues −750.862663, 490.240708 (reference-values.md §1.1 [C]).
        let ev = r["hessian_eigenvalues"].as_array().unwrap();
        assert!((num(&ev[0]) + 750.862_663).abs() < 0.5 && (num(&ev[1]) - 490.240_708).abs() < 0.5);
        assert!(num(&r["gradient_evaluations"]) >= 2.0);
        assert!(num(&r["hessian_evaluations"]) >= 1.0);
        assert!(r["iterations"].as_u64().is_some());
        assert!(dir.path().join(format!("{out}.xyz")).exists());
        let saved: serde_json::Value = serde_json::from_str(
            &std::fs::read_to_string(dir.path().join(format!("{out}.json"))).unwrap(),
        )
        .unwrap();
        assert_eq!(saved, r);
    }
}

#[test]
fn muller_brown_relax_and_modes_and_readable_summary() {
    let dir = tempfile::tempdir().unwrap();
    std::fs::write(dir.path().join("a.xyz"), "1\nnear MA\nX -0.50 1.38 0.0\n").unwrap();
    let o = cairn(
        &[
            "relax",
            "a.xyz",
            "--engine",
            "muller-brown",
            "--store",
            "st",
            "--json",
        ],
        dir.path(),
    );
    assert_eq!(o.status.code(), Some(0), "{}", stderr(&o));
    let r = json(&o);
    assert_eq!(r["converged"], true);
    let g = &r["geometry"][0];
    assert!((num(&g[0]) - MA.0).abs() < 1e-3 && (num(&g[1]) - MA.1).abs() < 1e-3);
    assert!((num(&r["energy_hartree"]) - MA.2).abs() < 1e-3);
    assert_eq!(r["hessian_evaluations"], 0);
    // Frequency analysis of the relaxed point (default output a.relaxed.xyz): a minimum.
    let o = cairn(
        &[
            "modes",
            "a.relaxed.xyz",
            "--engine",
            "muller-brown",
            "--store",
            "st",
            "--json",
        ],
        dir.path(),
    );
    assert_eq!(o.status.code(), Some(0), "{}", stderr(&o));
    let m = json(&o);
    assert_eq!(m["n_imaginary"], 0);
    // MA eigenvalues 410.531135 and 4068.198955 (reference-values.md §1.1 [C]).
    let ev = m["hessian_eigenvalues"].as_array().unwrap();
    assert!((num(&ev[0]) - 410.531_135).abs() < 1.0 && (num(&ev[1]) - 4_068.198_955).abs() < 1.0);
    // The readable summary names units.
    let o = cairn(
        &[
            "saddle",
            "a.relaxed.xyz",
            "--engine",
            "muller-brown",
            "--store",
            "st",
            "--max-steps",
            "2",
        ],
        dir.path(),
    );
    let text = String::from_utf8_lossy(&o.stdout);
    assert!(text.contains("surface units"), "{text}");
    assert!(text.contains("NOT converged"), "{text}");
    assert_eq!(
        o.status.code(),
        Some(3),
        "not converged has its own exit status"
    );
}

#[test]
fn xtb_ammonia_saddle_with_finite_difference_hessians_in_parallel() {
    let dir = tempfile::tempdir().unwrap();
    std::fs::write(
        dir.path().join("nh3.xyz"),
        "4\nnearly planar ammonia (our guess)\nN 0 0 0.08\nH 1.0 0 0\nH -0.5 0.87 0\nH -0.5 -0.87 0\n",
    )
    .unwrap();
    let o = cairn(
        &[
            "saddle",
            "nh3.xyz",
            "--engine",
            "xtb",
            "--fd-step",
            "0.005",
            "--jobs",
            "2",
            "--store",
            "st",
            "--json",
        ],
        dir.path(),
    );
    assert_eq!(o.status.code(), Some(0), "{}", stderr(&o));
    let r = json(&o);
    assert_eq!(r["converged"], true, "{}", r["reason"]);
    assert_eq!(r["n_imaginary"], 1);
    assert_eq!(r["hessian_evaluations"], 0);
    assert_eq!(r["units"]["geometry"], "angstrom");
    let f = r["frequencies_cm1"].as_array().unwrap();
    assert_eq!(f.len(), 6);
    assert!(num(&f[0]) < -300.0);
    // Planar: the N–H distances are about 1 Å.
    let geo = r["geometry"].as_array().unwrap();
    let d = |i: usize| {
        (0..3)
            .map(|k| (num(&geo[i][k]) - num(&geo[0][k])).powi(2))
            .sum::<f64>()
            .sqrt()
    };
    assert!((0.9..1.1).contains(&d(1)), "{}", d(1));
}

#[test]
fn bad_inputs_give_clear_errors() {
    let dir = tempfile::tempdir().unwrap();
    let o = cairn(
        &["saddle", "missing.xyz", "--engine", "muller-brown"],
        dir.path(),
    );
    assert_eq!(o.status.code(), Some(1));
    assert!(stderr(&o).contains("missing.xyz"), "{}", stderr(&o));
    std::fs::write(dir.path().join("g.xyz"), "1\nS1\nX -0.8 0.6 0.0\n").unwrap();
    let o = cairn(
        &[
            "saddle",
            "g.xyz",
            "--engine",
            "muller-brown",
            "--follow-mode",
            "3",
            "--store",
            "st",
        ],
        dir.path(),
    );
    assert_eq!(o.status.code(), Some(1));
    assert!(
        stderr(&o).contains("only 2 internal modes"),
        "{}",
        stderr(&o)
    );
    // A real molecule on the model surface is refused with the reason.
    std::fs::write(
        dir.path().join("w.xyz"),
        "3\nwater\nO 0 0 0\nH 0.76 0 0.59\nH -0.76 0 0.59\n",
    )
    .unwrap();
    let o = cairn(
        &[
            "relax",
            "w.xyz",
            "--engine",
            "muller-brown",
            "--store",
            "st",
        ],
        dir.path(),
    );
    assert_eq!(o.status.code(), Some(1));
    assert!(stderr(&o).contains("pseudo-atoms X"), "{}", stderr(&o));
    // One atom: relax converges at once, modes has no frequencies, saddle says why not.
    std::fs::write(dir.path().join("ar.xyz"), "1\nargon\nAr 0 0 0\n").unwrap();
    let o = cairn(
        &[
            "relax", "ar.xyz", "--engine", "xtb", "--store", "st", "--json",
        ],
        dir.path(),
    );
    assert_eq!(o.status.code(), Some(0), "{}", stderr(&o));
    assert!(json(&o)["reason"]
        .as_str()
        .unwrap()
        .contains("nothing to optimise"));
    let o = cairn(
        &[
            "modes",
            "ar.xyz",
            "--engine",
            "xtb",
            "--store",
            "st",
            "--fd-step",
            "0.005",
            "--json",
        ],
        dir.path(),
    );
    assert_eq!(o.status.code(), Some(0), "{}", stderr(&o));
    assert_eq!(json(&o)["frequencies_cm1"].as_array().unwrap().len(), 0);
    let o = cairn(
        &[
            "saddle",
            "ar.xyz",
            "--engine",
            "xtb",
            "--store",
            "st",
            "--fd-step",
            "0.005",
            "--json",
        ],
        dir.path(),
    );
    assert_eq!(o.status.code(), Some(3), "{}", stderr(&o));
    assert!(json(&o)["reason"]
        .as_str()
        .unwrap()
        .contains("no internal degrees of freedom"));
}

#[test]
fn follow_a_mode_file_on_muller_brown() {
    // From near S2, follow the S2 negative-curvature direction (0.500306, −0.865849)
    // (reference-values.md §1.1 [C]) given as a mode file like those the path commands write.
    let dir = tempfile::tempdir().unwrap();
    std::fs::write(dir.path().join("g.xyz"), "1\nnear S2\nX 0.16 0.33 0.0\n").unwrap();
    std::fs::write(
        dir.path().join("mode.txt"),
        "# band tangent at the saddle guess: unit vector\nX 0.500306 -0.865849 0.0\n",
    )
    .unwrap();
    let args = [
        "saddle",
        "g.xyz",
        "--engine",
        "muller-brown",
        "--follow-file",
        "mode.txt",
        "--store",
        "st",
        "--json",
    ];
    let o = cairn(&args, dir.path());
    assert_eq!(o.status.code(), Some(0), "{}", stderr(&o));
    let r = json(&o);
    let g = &r["geometry"][0];
    assert!((num(&g[0]) - 0.212_486_582).abs() < 1e-3 && (num(&g[1]) - 0.292_988_325).abs() < 1e-3);
    // A mode file for another molecule is refused with file and line.
    std::fs::write(dir.path().join("bad.txt"), "# x\nH 1 0 0\n").unwrap();
    let o = cairn(
        &[
            "saddle",
            "g.xyz",
            "--engine",
            "muller-brown",
            "--follow-file",
            "bad.txt",
            "--store",
            "st",
        ],
        dir.path(),
    );
    assert_eq!(o.status.code(), Some(1));
    assert!(stderr(&o).contains("bad.txt:2"), "{}", stderr(&o));
}
