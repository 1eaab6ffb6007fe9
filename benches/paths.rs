//! Cost of nudged elastic bands per reaction: band iterations, gradient evaluations, wall
//! time, engine time, and how well the parallel slots were used: wall ÷ (engine seconds ÷
//! slots), 1.0 being ideal (all images of an iteration run side by side, nothing else waits).
//!
//! Reactions: Müller–Brown MA → MC (in-process surface), and on GFN2-xTB formaldehyde →
//! trans-hydroxycarbene and the Cl⁻ + CH3Cl identity SN2 (ends: the ion–dipole complex of
//! tests/data and its mirror image with the two chlorines' roles exchanged). Each band runs
//! through the driver with a fresh store and 2 local slots (the machine has 2 cores).
//!
//! `cargo bench --bench paths` prints the table. Under `cargo test` (no `--bench` argument) only
//! the Müller–Brown row runs, as a smoke test.

use cairn::driver::{block_on, drive, Evaluator, System};
use cairn::engine::{find_engine, Settings};
use cairn::molecule::Molecule;
use cairn::path::align::prepare_endpoints;
use cairn::path::interp;
use cairn::path::neb::{Neb, NebOptions};
use std::path::Path;
use std::time::Instant;

const SLOTS: usize = 2;

struct Row {
    name: String,
    images: usize,
    converged: bool,
    iterations: usize,
    gradients: u64,
    wall: f64,
    engine: f64,
}

fn band(name: &str, engine: &str, r: &Molecule, p: &Molecule, images: usize) -> Row {
    let ends = prepare_endpoints(r, p, ("reactant", "product")).expect("ends");
    let path = if ends.frame == cairn::geom::Frame::Surface {
        interp::linear(&ends.reactant, &ends.product, images)
    } else {
        interp::idpp(&ends.reactant, &ends.product, images).expect("idpp")
    };
    let mut neb = Neb::new(path, ends.frame, NebOptions::for_frame(ends.frame)).expect("band");
    let store = tempfile::tempdir().expect("temp dir");
    let eng = find_engine(engine, &Settings::new()).expect("engine");
    let ev = Evaluator::local(eng, store.path(), SLOTS).expect("evaluator");
    let system = System::of(r).expect("system");
    let t0 = Instant::now();
    let (v, stats) = block_on(drive(&mut neb, &ev, &system)).expect("band run");
    Row {
        name: name.into(),
        images,
        converged: v.converged,
        iterations: v.iterations,
        gradients: stats.gradient_evaluations,
        wall: t0.elapsed().as_secs_f64(),
        engine: stats.engine_seconds,
    }
}

fn point(x: f64, y: f64) -> Molecule {
    Molecule::new(vec![cairn::elements::Element::X], vec![[x, y, 0.0]])
}

fn data(name: &str) -> Molecule {
    cairn::xyz::read(
        &Path::new(env!("CARGO_MANIFEST_DIR"))
            .join("tests/data")
            .join(name),
    )
    .expect("test geometry")
}

/// The SN2 product complex: the mirror image of the reactant complex through the plane
/// perpendicular to the Cl–C···Cl axis at C, with the two chlorines (atoms 2 and 3) exchanged.
fn sn2_product(r: &Molecule) -> Molecule {
    let c = r.coords[0];
    let axis = {
        let d: Vec<f64> = (0..3).map(|k| r.coords[2][k] - r.coords[1][k]).collect();
        let n = d.iter().map(|v| v * v).sum::<f64>().sqrt();
        [d[0] / n, d[1] / n, d[2] / n]
    };
    let mut p = r.clone();
    for (i, q) in r.coords.iter().enumerate() {
        let t: f64 = (0..3).map(|k| (q[k] - c[k]) * axis[k]).sum();
        p.coords[i] = [
            q[0] - 2.0 * t * axis[0],
            q[1] - 2.0 * t * axis[1],
            q[2] - 2.0 * t * axis[2],
        ];
    }
    p.coords.swap(1, 2);
    p
}

fn main() {
    let full = std::env::args().any(|a| a == "--bench");
    let mut rows = vec![band(
        "Müller–Brown MA → MC",
        "muller-brown",
        &point(-0.558, 1.442),
        &point(-0.050, 0.467),
        8,
    )];
    if full {
        rows.push(band(
            "H2CO → trans-HCOH (GFN2-xTB)",
            "xtb",
            &data("formaldehyde.xyz"),
            &data("hydroxycarbene.xyz"),
            8,
        ));
        let mut r = data("sn2_complex.xyz");
        r.charge = -1;
        let p = sn2_product(&r);
        rows.push(band(
            "Cl⁻ + CH3Cl → ClCH3 + Cl⁻ (GFN2-xTB)",
            "xtb",
            &r,
            &p,
            8,
        ));
    }
    println!("Nudged elastic band (climbing image, FIRE), {SLOTS} parallel slots, fresh store");
    println!(
        "{:<40} {:>6} {:>9} {:>10} {:>10} {:>10} {:>12} {:>14}",
        "reaction",
        "images",
        "converged",
        "iterations",
        "gradients",
        "wall (s)",
        "engine (s)",
        "wall/(eng/slots)"
    );
    for r in &rows {
        let ideal = r.engine / SLOTS as f64;
        let ratio = if ideal > 1e-3 {
            format!("{:.2}", r.wall / ideal)
        } else {
            "n/a (in-process)".into()
        };
        println!(
            "{:<40} {:>6} {:>9} {:>10} {:>10} {:>10.2} {:>12.2} {:>14}",
            r.name,
            r.images,
            if r.converged { "yes" } else { "no" },
            r.iterations,
            r.gradients,
            r.wall,
            r.engine,
            ratio
        );
    }
}
