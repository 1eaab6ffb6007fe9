//! Stray `.CHRG`, `.UHF` and `xtbrestart` files in the caller's working directory change
//! nothing: every evaluation runs in its own fresh scratch directory and passes --chrg, --uhf
//! and --norestart. One test in its own binary, because it changes the process's working
//! directory.

mod engine_support;

use cairn::eval::Quantity;
use engine_support::*;

const H2O: &[(&str, [f64; 3])] = &[
    ("O", [0.0, 0.0, 0.12]),
    ("H", [0.0, 0.78, -0.47]),
    ("H", [0.05, -0.74, -0.45]),
];

#[test]
fn stray_charge_spin_and_restart_files_are_ignored() {
    let e = xtb(&[]);
    let j = job(H2O, 0, 1, Quantity::Gradient);
    let clean = eval(e.as_ref(), &j);

    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    std::fs::write(d.join(".CHRG"), "1\n").unwrap();
    std::fs::write(d.join(".UHF"), "1\n").unwrap();
    std::fs::write(d.join("xtbrestart"), b"\x00\x01garbage restart data\xff").unwrap();
    std::fs::write(
        d.join("mol.xyz"),
        "3\n\nO 0.0 0.0 0.12\nH 0.0 0.78 -0.47\nH 0.05 -0.74 -0.45\n",
    )
    .unwrap();

    // The files are potent: plain xtb started in that directory picks up charge +1 (engines.md:
    // xtb reads .CHRG and .UHF from the working directory unless --chrg/--uhf are given).
    let out = std::process::Command::new("xtb")
        .args(["mol.xyz", "--grad"])
        .current_dir(d)
        .env("OMP_NUM_THREADS", "1")
        .output()
        .expect("xtb runs");
    let text = String::from_utf8_lossy(&out.stdout);
    let line = text
        .lines()
        .rev()
        .find(|l| l.contains("TOTAL ENERGY"))
        .expect("xtb printed an energy");
    let stray: f64 = line.split_whitespace().nth(3).unwrap().parse().unwrap();
    assert!(
        (stray - clean.energy).abs() > 0.1,
        "the stray files did not change plain xtb ({stray} vs {})",
        clean.energy
    );

    // Cairn in the same working directory: same result as from a clean directory, equal to the
    // tblite reference for the neutral singlet, and nothing written to the caller's directory.
    let before: Vec<_> = std::fs::read_dir(d)
        .unwrap()
        .map(|e| e.unwrap().file_name())
        .collect();
    std::env::set_current_dir(d).unwrap();
    let here = eval(e.as_ref(), &j);
    std::env::set_current_dir(env!("CARGO_MANIFEST_DIR")).unwrap();
    assert_eq!(here.energy, clean.energy);
    assert_eq!(here.gradient, clean.gradient);
    let (e_ref, _) = tblite(&j, "GFN2-xTB", 1.0);
    assert!((here.energy - e_ref).abs() < 1e-6);
    let after: Vec<_> = std::fs::read_dir(d)
        .unwrap()
        .map(|e| e.unwrap().file_name())
        .collect();
    assert_eq!(
        before.len(),
        after.len(),
        "files appeared in the caller's directory"
    );
}
