//! Zone of convergence on the Müller–Brown surface: over the grid x ∈ [−1.5, 1.2],
//! y ∈ [−0.5, 2] at 0.05 (2805 starts, as in ../shared/notes/reference-values.md §1.3), the share
//! of starts from which each method reaches a first-order saddle, and what became of the rest.
//!
//! `cargo bench --bench zone` prints the table. Under `cargo test` (no `--bench` argument) it runs
//! a coarse grid only, as a smoke test.

use cairn::algo::run_sync;
use cairn::algo::saddle::{Method, SaddleOptions, SaddleSearch};
use cairn::engine::model::muller_brown_answer;
use cairn::geom::Frame;
use nalgebra::DVector;

const SADDLES: [(f64, f64); 2] = [
    (-0.822_001_559, 0.624_312_803),
    (0.212_486_582, 0.292_988_325),
];

#[derive(Default)]
struct Tally {
    s1: usize,
    s2: usize,
    other_stationary: usize,
    step_limit: usize,
    error: usize,
    gradients: usize,
    hessians: usize,
    starts: usize,
}

fn run(opts: &SaddleOptions, stride: usize) -> Tally {
    let mut t = Tally::default();
    for i in (0..55).step_by(stride) {
        for j in (0..51).step_by(stride) {
            let (x, y) = (-1.5 + 0.05 * i as f64, -0.5 + 0.05 * j as f64);
            t.starts += 1;
            let mut a = SaddleSearch::new(
                DVector::from_vec(vec![x, y, 0.0]),
                Frame::Surface,
                opts.clone(),
            );
            match run_sync(
                &mut a,
                |p| muller_brown_answer(&p.coords, p.quantity),
                10_000,
            ) {
                Ok((v, _)) => {
                    t.gradients += v.gradient_evaluations;
                    t.hessians += v.hessian_evaluations;
                    let near =
                        |s: &(f64, f64)| (v.x[0] - s.0).abs() < 1e-3 && (v.x[1] - s.1).abs() < 1e-3;
                    if v.converged && near(&SADDLES[0]) {
                        t.s1 += 1;
                    } else if v.converged && near(&SADDLES[1]) {
                        t.s2 += 1;
                    } else if v.stationary {
                        t.other_stationary += 1;
                    } else {
                        t.step_limit += 1;
                    }
                }
                Err(_) => t.error += 1,
            }
        }
    }
    t
}

fn main() {
    let full = std::env::args().any(|a| a == "--bench");
    let stride = if full { 1 } else { 5 };
    let variants: Vec<(&str, SaddleOptions)> = vec![
        (
            "Newton, exact Hessian every step (plain NR)",
            SaddleOptions {
                method: Method::Newton,
                recompute_every: Some(1),
                ..SaddleOptions::for_surface()
            },
        ),
        (
            "Newton, Bofill updates",
            SaddleOptions {
                method: Method::Newton,
                ..SaddleOptions::for_surface()
            },
        ),
        (
            "P-RFO, exact Hessian every step",
            SaddleOptions {
                recompute_every: Some(1),
                ..SaddleOptions::for_surface()
            },
        ),
        (
            "P-RFO, Bofill updates (default)",
            SaddleOptions::for_surface(),
        ),
    ];
    println!(
        "Müller–Brown zone of convergence: {} starts (reference-values.md §1.3 grid{}), at most 100 steps",
        if full { 2805 } else { 121 },
        if full { "" } else { ", every 5th point: smoke run" }
    );
    println!(
        "{:<44} {:>7} {:>7} {:>8} {:>9} {:>8} {:>7} {:>10} {:>10}",
        "method",
        "S1 %",
        "S2 %",
        "saddle %",
        "other st.",
        "no conv.",
        "error",
        "grad/start",
        "hess/start"
    );
    for (name, o) in variants {
        let opts = SaddleOptions {
            max_iterations: 100,
            ..o
        };
        let t = run(&opts, stride);
        let pct = |k: usize| 100.0 * k as f64 / t.starts as f64;
        println!(
            "{:<44} {:>7.2} {:>7.2} {:>8.2} {:>8.2}% {:>7.2}% {:>6.2}% {:>10.1} {:>10.1}",
            name,
            pct(t.s1),
            pct(t.s2),
            pct(t.s1 + t.s2),
            pct(t.other_stationary),
            pct(t.step_limit),
            pct(t.error),
            t.gradients as f64 / t.starts as f64,
            t.hessians as f64 / t.starts as f64,
        );
    }
    println!(
        "reference (plain NR, reference-values.md §1.3 [C]): S1 16.86 %, S2 7.63 %, saddle 24.49 %"
    );
}
