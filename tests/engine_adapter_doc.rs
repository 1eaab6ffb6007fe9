//! The commented adapter example in DEVELOPERS.md ("Adapters" → "A short example") loads and
//! works, run against a stand-in `toyqc` script put on PATH (own test binary: it changes PATH).

mod engine_support;

use cairn::engine::adapter::{Adapter, AdapterEngine};
use cairn::engine::{Engine, FailureKind, Settings};
use cairn::eval::Quantity;
use cairn::units::{ANGSTROM_PER_BOHR, KCALMOL_PER_HARTREE};
use engine_support::*;
use std::os::unix::fs::PermissionsExt;
use std::sync::Arc;

fn example_yaml() -> String {
    let doc =
        std::fs::read_to_string(concat!(env!("CARGO_MANIFEST_DIR"), "/DEVELOPERS.md")).unwrap();
    let start = doc
        .find("### A short example")
        .expect("example section in DEVELOPERS.md");
    let rest = &doc[start..];
    let open = rest.find("```yaml\n").expect("yaml block") + "```yaml\n".len();
    let close = rest[open..].find("```").expect("closing fence");
    rest[open..open + close].to_string()
}

// The stand-in prints E = -1.25 (Eh), and writes the gradient 0.1·k kcal/mol/Å for component k;
// it records its arguments so the test can check the rendered command line.
const TOYQC: &str = r#"#!/bin/sh
echo "$@" > args.txt
case " $* " in *" --basis=6-31g "*) echo "basis 6-31g not found"; exit 1;; esac
echo "E = -1.25"
n=$(head -n 1 geom.xyz)
awk -v n="$n" 'BEGIN { print "gradient"; for (k = 1; k <= 3*n; k++) printf "%.3f\n", 0.1*k }' > grad.dat
"#;

#[test]
fn developers_md_example_loads_and_runs() {
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("toyqc.yaml");
    std::fs::write(&path, example_yaml()).unwrap();
    let adapter = Arc::new(Adapter::load(&path).unwrap_or_else(|e| panic!("example: {e}")));

    let bin = dir.path().join("bin");
    std::fs::create_dir(&bin).unwrap();
    let exe = bin.join("toyqc");
    std::fs::write(&exe, TOYQC).unwrap();
    std::fs::set_permissions(&exe, std::fs::Permissions::from_mode(0o755)).unwrap();
    let old = std::env::var("PATH").unwrap_or_default();
    std::env::set_var("PATH", format!("{}:{old}", bin.display()));

    let e = AdapterEngine::new(adapter.clone(), &Settings::new()).unwrap();
    let j = job(
        &[("H", [0.0, 0.0, 0.0]), ("H", [0.0, 0.0, 0.74])],
        0,
        3,
        Quantity::Gradient,
    );
    let o = e.evaluate(&j, 0).unwrap_or_else(|f| panic!("{f}"));
    assert_eq!(o.answer.energy, -1.25);
    let g = o.answer.gradient.unwrap();
    for k in 0..6 {
        let want = 0.1 * (k + 1) as f64 * ANGSTROM_PER_BOHR / KCALMOL_PER_HARTREE;
        assert!((g[k] - want).abs() < 1e-15, "component {k}");
    }
    assert!(
        o.raw_output
            .contains("toyqc geom.xyz --charge 0 --spin 2 --basis=sto-3g --tight --gradient"),
        "{}",
        o.raw_output
    );

    // The bad_input signature: basis 6-31g is "not found" in the stand-in.
    let s: Settings = [("basis".to_string(), "6-31g".to_string())].into();
    let e2 = AdapterEngine::new(adapter, &s).unwrap();
    let f = e2.evaluate(&j, 0).unwrap_err();
    assert_eq!(f.kind, FailureKind::BadInput, "{f}");
    if let Some(p) = f.output {
        std::fs::remove_dir_all(p).ok();
    }
}
