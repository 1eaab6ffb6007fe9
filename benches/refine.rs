//! Cost of saddle refinement per method: gradient and Hessian evaluations to converge, on
//! Müller–Brown from fixed guesses and on three xtb saddle guesses of our own (NH3 inversion,
//! HCN ⇌ HNC, H2CO → HCOH 1,2-hydrogen shift), as a table.
//!
//! `cargo bench --bench refine` prints the table. Under `cargo test` (no `--bench` argument) only
//! the Müller–Brown rows run, as a smoke test.

use cairn::algo::hessian::HessianSource;
use cairn::algo::run_sync;
use cairn::algo::saddle::{Method, SaddleOptions, SaddleSearch};
use cairn::elements::Element;
use cairn::engine::{find_engine, model::muller_brown_answer, Job, Settings};
use cairn::eval::Answer;
use cairn::geom::Frame;
use cairn::units::BOHR_PER_ANGSTROM;
use nalgebra::DVector;

fn variants(surface: bool) -> Vec<(&'static str, SaddleOptions)> {
    let base = if surface {
        SaddleOptions::for_surface()
    } else {
        SaddleOptions::default()
    };
    vec![
        (
            "Newton, exact Hessian each step",
            SaddleOptions {
                method: Method::Newton,
                recompute_every: Some(1),
                ..base.clone()
            },
        ),
        (
            "Newton, Bofill",
            SaddleOptions {
                method: Method::Newton,
                ..base.clone()
            },
        ),
        (
            "P-RFO, exact Hessian each step",
            SaddleOptions {
                recompute_every: Some(1),
                ..base.clone()
            },
        ),
        ("P-RFO, Bofill", base.clone()),
        (
            "P-RFO, Bofill, FD Hessians",
            SaddleOptions {
                hessian: HessianSource::FiniteDifference {
                    step: if surface { 1e-4 } else { 0.005 },
                },
                ..base
            },
        ),
    ]
}

fn row(case: &str, method: &str, out: Result<(bool, usize, usize, usize, String), String>) {
    match out {
        Ok((conv, it, g, h, note)) => println!(
            "{case:<26} {method:<32} {:>9} {it:>6} {g:>9} {h:>8}  {note}",
            if conv { "yes" } else { "no" }
        ),
        Err(e) => println!("{case:<26} {method:<32} {:>9}  {e}", "error"),
    }
}

/// Element symbols and positions (Å).
type Atoms = Vec<(&'static str, [f64; 3])>;

fn molecule(atoms: &[(&str, [f64; 3])]) -> (Vec<Element>, DVector<f64>) {
    let els = atoms
        .iter()
        .map(|(s, _)| Element::from_symbol(s).unwrap_or(Element::X))
        .collect();
    let x = DVector::from_iterator(
        3 * atoms.len(),
        atoms
            .iter()
            .flat_map(|(_, c)| c.iter().map(|v| v * BOHR_PER_ANGSTROM)),
    );
    (els, x)
}

fn main() {
    let full = std::env::args().any(|a| a == "--bench");
    println!(
        "{:<26} {:<32} {:>9} {:>6} {:>9} {:>8}  note",
        "case", "method", "converged", "steps", "gradients", "Hessians"
    );
    let mb_guesses = [
        ("MB near S1 (-0.75, 0.55)", -0.75, 0.55),
        ("MB near S2 (0.25, 0.25)", 0.25, 0.25),
        ("MB at MC (-0.05, 0.47)", -0.05, 0.47),
        ("MB far (-1.0, 1.0)", -1.0, 1.0),
    ];
    for (case, x, y) in mb_guesses {
        for (name, o) in variants(true) {
            let mut a = SaddleSearch::new(DVector::from_vec(vec![x, y, 0.0]), Frame::Surface, o);
            let out = run_sync(
                &mut a,
                |p| muller_brown_answer(&p.coords, p.quantity),
                10_000,
            )
            .map(|(v, _)| {
                let note = format!("E = {:.4} at ({:.4}, {:.4})", v.energy, v.x[0], v.x[1]);
                (
                    v.converged,
                    v.iterations,
                    v.gradient_evaluations,
                    v.hessian_evaluations,
                    note,
                )
            })
            .map_err(|e| e.0);
            row(case, name, out);
        }
    }
    if !full {
        return;
    }
    let engine = match find_engine("xtb", &Settings::new()) {
        Ok(e) => e,
        Err(e) => {
            println!("xtb rows skipped: {e}");
            return;
        }
    };
    // Saddle guesses of our own (Å).
    let cases: Vec<(&str, Atoms)> = vec![
        (
            "xtb NH3 inversion",
            vec![
                ("N", [0.0, 0.0, 0.08]),
                ("H", [1.0, 0.0, 0.0]),
                ("H", [-0.5, 0.87, 0.0]),
                ("H", [-0.5, -0.87, 0.0]),
            ],
        ),
        (
            "xtb HCN <-> HNC",
            vec![
                ("C", [0.0, 0.0, 0.0]),
                ("N", [1.19, 0.0, 0.0]),
                ("H", [0.55, 1.05, 0.0]),
            ],
        ),
        (
            "xtb H2CO -> HCOH",
            vec![
                ("C", [0.0, 0.0, 0.0]),
                ("O", [1.27, 0.0, 0.0]),
                ("H", [-0.55, 0.95, 0.0]),
                ("H", [0.55, 1.05, 0.0]),
            ],
        ),
    ];
    for (case, atoms) in cases {
        let (els, x0) = molecule(&atoms);
        for (name, o) in variants(false) {
            let mut a = SaddleSearch::new(x0.clone(), Frame::Molecule, o);
            let mut failure = None;
            let out = run_sync(
                &mut a,
                |p| {
                    let job = Job {
                        elements: els.clone(),
                        coords: p.coords.clone(),
                        charge: 0,
                        multiplicity: 1,
                        quantity: p.quantity,
                        threads: 1,
                    };
                    match engine.evaluate(&job, 0) {
                        Ok(o) => o.answer,
                        Err(e) => {
                            failure = Some(e.to_string());
                            Answer {
                                energy: f64::NAN,
                                gradient: None,
                                hessian: None,
                            }
                        }
                    }
                },
                10_000,
            );
            let out = match (out, failure) {
                (_, Some(f)) => Err(f),
                (Ok((v, _)), None) => {
                    let freq = v
                        .eigenvalues
                        .first()
                        .map(|l| format!("lowest eigenvalue {l:.4} Eh/bohr²"))
                        .unwrap_or_default();
                    Ok((
                        v.converged,
                        v.iterations,
                        v.gradient_evaluations,
                        v.hessian_evaluations,
                        format!("E = {:.6} Eh; {freq}", v.energy),
                    ))
                }
                (Err(e), None) => Err(e.0),
            };
            row(case, name, out);
        }
    }
}
