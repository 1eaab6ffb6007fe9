//! Minimiser and saddle refinement on the Müller–Brown surface.
//!
//! Check values: K. Müller and L. D. Brown, Theor. Chim. Acta 53, 75 (1979), stationary points
//! as recomputed in ../shared/notes/reference-values.md §1.1 [C] (they reproduce the commonly
//! tabulated 3-decimal values); the Newton–Raphson zone of convergence, §1.3 [C].

use cairn::algo::minimize::{MinOptions, Minimizer};
use cairn::algo::run_sync;
use cairn::algo::saddle::{FollowMode, Method, SaddleOptions, SaddleSearch, SaddleVerdict};
use cairn::engine::model::muller_brown_answer;
use cairn::eval::{Point, Quantity};
use cairn::geom::Frame;
use nalgebra::DVector;
use rand::{Rng, SeedableRng};

/// Minima MA, MB, MC and saddles S1, S2: (x, y, V), reference-values.md §1.1 [C].
const MINIMA: [(f64, f64, f64); 3] = [
    (-0.558_223_635, 1.441_725_842, -146.699_517_210),
    (0.623_499_405, 0.028_037_759, -108.166_724_117),
    (-0.050_010_823, 0.466_694_105, -80.767_818_130),
];
const SADDLES: [(f64, f64, f64); 2] = [
    (-0.822_001_559, 0.624_312_803, -40.664_843_509),
    (0.212_486_582, 0.292_988_325, -72.248_940_112),
];

fn mb(p: &Point) -> cairn::eval::Answer {
    muller_brown_answer(&p.coords, p.quantity)
}

fn pt(x: f64, y: f64) -> DVector<f64> {
    DVector::from_vec(vec![x, y, 0.0])
}

fn saddle(x: f64, y: f64, opts: SaddleOptions) -> Result<SaddleVerdict, cairn::algo::AlgoError> {
    let mut a = SaddleSearch::new(pt(x, y), Frame::Surface, opts);
    run_sync(&mut a, mb, 10_000).map(|(v, _)| v)
}

/// Plain Newton–Raphson as specified in reference-values.md §1.3: exact Hessian every step,
/// pseudo-inverse, no step limit, at most 100 iterations.
fn plain_newton() -> SaddleOptions {
    SaddleOptions {
        method: Method::Newton,
        recompute_every: Some(1),
        max_iterations: 100,
        ..SaddleOptions::for_surface()
    }
}

fn prfo_exact() -> SaddleOptions {
    SaddleOptions {
        method: Method::Prfo,
        recompute_every: Some(1),
        max_iterations: 100,
        ..SaddleOptions::for_surface()
    }
}

/// Index of the published saddle within `tol` of the verdict (first-order saddles only).
fn which_saddle(v: &SaddleVerdict, tol: f64) -> Option<usize> {
    if !v.converged || v.n_negative != 1 {
        return None;
    }
    SADDLES
        .iter()
        .position(|s| (v.x[0] - s.0).abs() < tol && (v.x[1] - s.1).abs() < tol)
}

#[test]
fn minimiser_reaches_the_three_published_minima() {
    for (k, &(x, y, e)) in MINIMA.iter().enumerate() {
        for (dx, dy) in [(0.08, -0.06), (-0.05, 0.07)] {
            let mut m = Minimizer::new(
                pt(x + dx, y + dy),
                Frame::Surface,
                MinOptions::for_surface(),
            );
            let (v, n) = run_sync(&mut m, mb, 1000).unwrap();
            assert!(v.converged, "minimum {k}: {}", v.reason);
            assert!(
                (v.x[0] - x).abs() < 1e-3 && (v.x[1] - y).abs() < 1e-3,
                "{:?}",
                v.x
            );
            assert!((v.energy - e).abs() < 1e-3, "energy {} vs {e}", v.energy);
            assert_eq!(v.hessian_evaluations, 0);
            assert_eq!(v.gradient_evaluations, n);
        }
    }
}

#[test]
fn minimiser_asks_only_for_gradients_one_per_step() {
    let mut m = Minimizer::new(pt(0.3, 0.1), Frame::Surface, MinOptions::default());
    let mut asked = Vec::new();
    let (v, _) = run_sync(
        &mut m,
        |p| {
            asked.push(p.quantity);
            mb(p)
        },
        1000,
    )
    .unwrap();
    assert!(v.converged, "{}", v.reason);
    assert!(asked.iter().all(|q| *q == Quantity::Gradient));
    assert_eq!(asked.len(), v.iterations + 1);
    // From (0.3, 0.1) downhill is MB (reference-values.md §1.1 [C]).
    assert!((v.x[0] - MINIMA[1].0).abs() < 1e-3 && (v.x[1] - MINIMA[1].1).abs() < 1e-3);
}

#[test]
fn both_methods_reach_both_published_saddles() {
    let variants: Vec<(&str, SaddleOptions)> = vec![
        ("newton exact", plain_newton()),
        (
            "newton bofill",
            SaddleOptions {
                method: Method::Newton,
                ..SaddleOptions::for_surface()
            },
        ),
        ("prfo exact", prfo_exact()),
        ("prfo bofill", SaddleOptions::for_surface()),
        (
            "prfo fd",
            SaddleOptions {
                hessian: cairn::algo::hessian::HessianSource::FiniteDifference { step: 1e-4 },
                ..SaddleOptions::for_surface()
            },
        ),
    ];
    for (name, opts) in variants {
        for (k, &(x, y, e)) in SADDLES.iter().enumerate() {
            for (dx, dy) in [(0.05, -0.04), (-0.04, -0.03)] {
                let v = saddle(x + dx, y + dy, opts.clone()).unwrap();
                assert!(v.converged, "{name} S{}: {}", k + 1, v.reason);
                assert!(
                    (v.x[0] - x).abs() < 1e-3 && (v.x[1] - y).abs() < 1e-3,
                    "{name} S{}: {:?}",
                    k + 1,
                    v.x
                );
                assert!((v.energy - e).abs() < 1e-3, "{name}: {} vs {e}", v.energy);
                assert_eq!(v.n_negative, 1, "{name}");
                assert!(v.hessian_exact, "{name}: final Hessian must be exact");
                assert_eq!(v.eigenvalues.iter().filter(|l| **l < 0.0).count(), 1);
            }
        }
    }
}

#[test]
fn follow_a_given_vector_or_index() {
    // From the MC minimum region, following +x-ish (the MC→S2 valley, reference-values.md §1.2
    // [C]) and the lowest mode both climb; a vector pointing along the S2 negative mode
    // (0.500, −0.866) (§1.1 [C]) from near S2 ends there.
    let (x, y, _) = SADDLES[1];
    let v = saddle(
        x - 0.06,
        y + 0.05,
        SaddleOptions {
            follow: FollowMode::Vector(DVector::from_vec(vec![0.500_306, -0.865_849, 0.0])),
            ..SaddleOptions::for_surface()
        },
    )
    .unwrap();
    assert_eq!(which_saddle(&v, 1e-3), Some(1), "{}", v.reason);
    // Index(1) near S1 follows the positive mode first: the overlap-following keeps it, and the
    // run ends at a first-order saddle or says clearly why not.
    let (x, y, _) = SADDLES[0];
    let v = saddle(
        x + 0.02,
        y + 0.02,
        SaddleOptions {
            follow: FollowMode::Index(1),
            ..SaddleOptions::for_surface()
        },
    )
    .unwrap();
    assert!(!v.reason.is_empty());
    assert!(
        v.converged == (v.n_negative == 1 && v.stationary),
        "{}",
        v.reason
    );
    // An index past the number of modes is an error, not a panic.
    let e = saddle(
        x,
        y,
        SaddleOptions {
            follow: FollowMode::Index(5),
            ..SaddleOptions::for_surface()
        },
    )
    .unwrap_err();
    assert!(e.0.contains("only 2 internal modes"), "{e}");
}

/// Share of grid starts (x ∈ [−1.5, 1.2], y ∈ [−0.5, 2] at 0.05, 2805 starts; reference-values.md
/// §1.3) ending at S1 and at S2.
fn zone_shares(opts: &SaddleOptions) -> (f64, f64) {
    let mut counts = [0usize; 2];
    for i in 0..55 {
        for j in 0..51 {
            let (x, y) = (-1.5 + 0.05 * i as f64, -0.5 + 0.05 * j as f64);
            if let Ok(v) = saddle(x, y, opts.clone()) {
                if let Some(k) = which_saddle(&v, 1e-3) {
                    counts[k] += 1;
                }
            }
        }
    }
    (
        100.0 * counts[0] as f64 / 2805.0,
        100.0 * counts[1] as f64 / 2805.0,
    )
}

#[test]
fn zone_of_convergence_newton_matches_reference_and_prfo_is_larger() {
    // Plain NR: S1 16.86 %, S2 7.63 % of the grid (reference-values.md §1.3 [C]); single grid
    // points are chaotic, so only aggregate fractions are compared, ±3 percentage points.
    let (n1, n2) = zone_shares(&plain_newton());
    assert!((n1 - 16.86).abs() < 3.0, "Newton S1 share {n1:.2} %");
    assert!((n2 - 7.63).abs() < 3.0, "Newton S2 share {n2:.2} %");
    // P-RFO (maximise along the lowest mode, trust radius) reaches a first-order saddle from
    // clearly more starts: at least 10 points more.
    let (p1, p2) = zone_shares(&prfo_exact());
    assert!(
        p1 + p2 > n1 + n2 + 10.0,
        "P-RFO {:.1} % vs Newton {:.1} %",
        p1 + p2,
        n1 + n2
    );
}

#[test]
fn robust_convergence_disks() {
    // Every start within 0.130 of S1 and 0.085 of S2 converges to it under plain NR
    // (reference-values.md §1.3 (c) [C]); the suggested test uses radii 0.12 and 0.08.
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(7);
    for (k, (r, opts)) in [(0.12, plain_newton()), (0.08, plain_newton())]
        .into_iter()
        .enumerate()
    {
        let (x, y, _) = SADDLES[k];
        for _ in 0..60 {
            let (rad, ang): (f64, f64) = (r * rng.gen::<f64>().sqrt(), rng.gen_range(0.0..6.3));
            for o in [opts.clone(), prfo_exact(), SaddleOptions::for_surface()] {
                let v = saddle(x + rad * ang.cos(), y + rad * ang.sin(), o.clone()).unwrap();
                assert_eq!(
                    which_saddle(&v, 1e-3),
                    Some(k),
                    "{:?} from r={rad:.3}: {}",
                    o.method,
                    v.reason
                );
            }
        }
    }
}

#[test]
fn newton_converges_quadratically_near_a_saddle() {
    let (x, y, _) = SADDLES[0];
    let mut iterates = Vec::new();
    let mut a = SaddleSearch::new(
        pt(x + 0.04, y - 0.03),
        Frame::Surface,
        SaddleOptions {
            convergence: cairn::algo::common::Convergence::VERY_TIGHT.scaled(1e-3),
            ..plain_newton()
        },
    );
    let (v, _) = run_sync(
        &mut a,
        |p| {
            if p.quantity == Quantity::Gradient {
                iterates.push((p.coords[0], p.coords[1]));
            }
            mb(p)
        },
        100,
    )
    .unwrap();
    assert!(v.converged, "{}", v.reason);
    let err: Vec<f64> = iterates
        .iter()
        .map(|(a, b)| (a - v.x[0]).hypot(b - v.x[1]))
        .collect();
    // e_{k+1} ≈ C e_k²: the ratio e_{k+1}/e_k² stays bounded while e_k falls by orders of
    // magnitude, and the number of correct digits about doubles (log e_{k+1} / log e_k ≥ 1.7).
    let mut checked = 0;
    for w in err.windows(2) {
        if w[0] < 5e-2 && w[1] > 1e-12 {
            let c = w[1] / (w[0] * w[0]);
            assert!(c < 20.0, "errors {err:?}");
            if w[0] < 1e-2 {
                assert!(w[1].ln() / w[0].ln() > 1.7, "errors {err:?}");
            }
            checked += 1;
        }
    }
    assert!(checked >= 2, "too few steps to see the order: {err:?}");
}

#[test]
fn two_negative_eigenvalues_at_the_start_give_a_clear_verdict() {
    // Find a grid start whose Hessian has two negative eigenvalues (4.85 % of the grid,
    // reference-values.md §1.3 [C]).
    let mut found = None;
    'outer: for i in 0..55 {
        for j in 0..51 {
            let (x, y) = (-1.5 + 0.05 * i as f64, -0.5 + 0.05 * j as f64);
            let (_, _, h) = cairn::engine::model::muller_brown(x, y);
            if h[0] + h[2] < 0.0 && h[0] * h[2] - h[1] * h[1] > 0.0 {
                found = Some((x, y));
                break 'outer;
            }
        }
    }
    let (x, y) = found.expect("the grid has points of index 2");
    for o in [plain_newton(), SaddleOptions::for_surface()] {
        match saddle(x, y, o) {
            Ok(v) => {
                assert_eq!(v.initial_negative, 2);
                assert!(v.reason.contains("2 negative"), "{}", v.reason);
                assert_eq!(
                    v.converged,
                    which_saddle(&v, 1e-3).is_some(),
                    "{}",
                    v.reason
                );
            }
            Err(e) => assert!(e.0.contains("not a finite number") || e.0.contains("non-finite")),
        }
    }
}

#[test]
fn non_finite_engine_answers_stop_with_a_clear_error() {
    // A Hessian with NaN (as a broken engine output would give) stops the refinement with an
    // error naming the entry; a NaN gradient stops the minimiser. No panic.
    let (x, y, _) = SADDLES[0];
    let mut a = SaddleSearch::new(pt(x, y), Frame::Surface, SaddleOptions::for_surface());
    let e = run_sync(
        &mut a,
        |p| {
            let mut ans = mb(p);
            if let Some(h) = ans.hessian.as_mut() {
                h[(1, 0)] = f64::NAN;
            }
            ans
        },
        100,
    )
    .unwrap_err();
    assert!(e.0.contains("Hessian") && e.0.contains("non-finite"), "{e}");
    let mut m = Minimizer::new(pt(0.3, 0.1), Frame::Surface, MinOptions::for_surface());
    let mut calls = 0;
    let e = run_sync(
        &mut m,
        |p| {
            calls += 1;
            let mut ans = mb(p);
            if calls == 3 {
                if let Some(g) = ans.gradient.as_mut() {
                    g[0] = f64::NAN;
                }
            }
            ans
        },
        100,
    )
    .unwrap_err();
    assert!(e.0.contains("step 2") && e.0.contains("non-finite"), "{e}");
}
