//! Helpers shared by the engine integration tests.
#![allow(dead_code)]

use cairn::elements::Element;
use cairn::engine::{find_engine, Engine, Job, Settings};
use cairn::eval::{Answer, Quantity};
use cairn::units::BOHR_PER_ANGSTROM;
use nalgebra::{DMatrix, DVector};
use std::sync::Arc;

/// The shipped xtb adapter with `settings`.
pub fn xtb(settings: &[(&str, &str)]) -> Arc<dyn Engine> {
    let s: Settings = settings
        .iter()
        .map(|(k, v)| (k.to_string(), v.to_string()))
        .collect();
    find_engine("xtb", &s).expect("xtb adapter loads")
}

/// A job from element symbols and coordinates in Å.
pub fn job(atoms: &[(&str, [f64; 3])], charge: i32, mult: u32, q: Quantity) -> Job {
    Job {
        elements: atoms
            .iter()
            .map(|(s, _)| Element::from_symbol(s).expect("known element"))
            .collect(),
        coords: DVector::from_iterator(
            3 * atoms.len(),
            atoms
                .iter()
                .flat_map(|(_, c)| c.iter().map(|v| v * BOHR_PER_ANGSTROM)),
        ),
        charge,
        multiplicity: mult,
        quantity: q,
        threads: 1,
    }
}

pub fn eval(e: &dyn Engine, j: &Job) -> Answer {
    match e.evaluate(j, 0) {
        Ok(o) => o.answer,
        Err(f) => panic!("evaluation failed: {f} (output {:?})", f.output),
    }
}

/// Central finite differences of energies, step h bohr.
pub fn fd_gradient(e: &dyn Engine, j: &Job, h: f64) -> DVector<f64> {
    let n = j.coords.len();
    let mut g = DVector::zeros(n);
    for i in 0..n {
        let mut p = j.clone();
        p.quantity = Quantity::Energy;
        p.coords[i] += h;
        let ep = eval(e, &p).energy;
        p.coords[i] -= 2.0 * h;
        let em = eval(e, &p).energy;
        g[i] = (ep - em) / (2.0 * h);
    }
    g
}

/// Central finite differences of gradients, step h bohr (symmetrised).
pub fn fd_hessian(e: &dyn Engine, j: &Job, h: f64) -> DMatrix<f64> {
    let n = j.coords.len();
    let mut m = DMatrix::zeros(n, n);
    for i in 0..n {
        let mut p = j.clone();
        p.quantity = Quantity::Gradient;
        p.coords[i] += h;
        let gp = eval(e, &p).gradient.expect("gradient");
        p.coords[i] -= 2.0 * h;
        let gm = eval(e, &p).gradient.expect("gradient");
        let col = (gp - gm) / (2.0 * h);
        m.set_column(i, &col);
    }
    (&m + m.transpose()) * 0.5
}

pub fn max_abs(v: impl IntoIterator<Item = f64>) -> f64 {
    v.into_iter().fold(0.0, |a, b| a.max(b.abs()))
}

/// Projector onto the complement of rigid translations and rotations (plain Cartesian, not
/// mass-weighted), built here independently of the library: the six vectors are
/// orthonormalised with Gram–Schmidt.
pub fn rigid_complement(x: &DVector<f64>) -> DMatrix<f64> {
    let n = x.len() / 3;
    let c: [f64; 3] = [0, 1, 2].map(|k| (0..n).map(|a| x[3 * a + k]).sum::<f64>() / n as f64);
    let mut basis: Vec<DVector<f64>> = vec![];
    for k in 0..3 {
        let mut t = DVector::zeros(3 * n);
        for a in 0..n {
            t[3 * a + k] = 1.0;
        }
        basis.push(t);
    }
    for k in 0..3 {
        let mut r = DVector::zeros(3 * n);
        for a in 0..n {
            let p = [x[3 * a] - c[0], x[3 * a + 1] - c[1], x[3 * a + 2] - c[2]];
            // e_k × p
            let (i, j) = ((k + 1) % 3, (k + 2) % 3);
            r[3 * a + j] = p[i];
            r[3 * a + i] = -p[j];
        }
        basis.push(r);
    }
    let mut ortho: Vec<DVector<f64>> = vec![];
    for mut v in basis {
        for o in &ortho {
            let d = o.dot(&v);
            v -= o * d;
        }
        let nrm = v.norm();
        if nrm > 1e-6 {
            ortho.push(v / nrm);
        }
    }
    let mut p = DMatrix::identity(3 * n, 3 * n);
    for o in &ortho {
        p -= o * o.transpose();
    }
    p
}

/// Energy and gradient from tblite (tests/reference/tblite_ref.py), GFN2-xTB.
pub fn tblite(j: &Job, method: &str, accuracy: f64) -> (f64, DVector<f64>) {
    use std::io::Write;
    let n = j.elements.len();
    let req = serde_json::json!({
        "numbers": j.elements.iter().map(|e| e.z()).collect::<Vec<_>>(),
        "positions_bohr": (0..n).map(|a| vec![j.coords[3*a], j.coords[3*a+1], j.coords[3*a+2]]).collect::<Vec<_>>(),
        "charge": j.charge,
        "uhf": j.multiplicity - 1,
        "method": method,
        "accuracy": accuracy,
        "etemp_kelvin": 300.0,
    });
    let script = concat!(env!("CARGO_MANIFEST_DIR"), "/tests/reference/tblite_ref.py");
    let mut child = std::process::Command::new("python3")
        .arg(script)
        .env("OMP_NUM_THREADS", "1")
        .stdin(std::process::Stdio::piped())
        .stdout(std::process::Stdio::piped())
        .spawn()
        .expect("python3 runs");
    child
        .stdin
        .take()
        .unwrap()
        .write_all(req.to_string().as_bytes())
        .unwrap();
    let out = child.wait_with_output().unwrap();
    assert!(out.status.success(), "tblite_ref.py failed");
    let v: serde_json::Value =
        serde_json::from_slice(&out.stdout).expect("JSON from tblite_ref.py");
    let e = v["energy"].as_f64().unwrap();
    let g: Vec<f64> = v["gradient"]
        .as_array()
        .unwrap()
        .iter()
        .flat_map(|r| r.as_array().unwrap().iter().map(|x| x.as_f64().unwrap()))
        .collect();
    (e, DVector::from_vec(g))
}

/// A variant of the shipped xtb adapter: its text with `(from, to)` replacements applied
/// (each `from` must occur), loaded from a temporary directory. The directory is returned so it
/// lives as long as the engine.
pub fn xtb_variant(
    replacements: &[(&str, &str)],
    settings: &[(&str, &str)],
) -> (Arc<dyn Engine>, tempfile::TempDir) {
    use cairn::engine::adapter::{Adapter, AdapterEngine};
    let shipped = concat!(env!("CARGO_MANIFEST_DIR"), "/adapters/xtb.yaml");
    let mut text = std::fs::read_to_string(shipped).unwrap();
    for (from, to) in replacements {
        assert!(text.contains(from), "xtb.yaml no longer contains {from:?}");
        text = text.replace(from, to);
    }
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("xtb.yaml");
    std::fs::write(&path, text).unwrap();
    let a = Adapter::load(&path).unwrap_or_else(|e| panic!("variant adapter: {e}"));
    let s: Settings = settings
        .iter()
        .map(|(k, v)| (k.to_string(), v.to_string()))
        .collect();
    let e = AdapterEngine::new(Arc::new(a), &s).unwrap();
    (Arc::new(e), dir)
}
