//! Path methods on the Müller–Brown surface (K. Müller and L. D. Brown, Theor. Chim. Acta 53,
//! 75 (1979)). Check values: ../shared/notes/reference-values.md §1.1 (stationary points,
//! computed there by Newton to |∇V| < 1e-12) and §1.2 (IRC connectivity and arc lengths,
//! computed there by gradient flow with scipy Radau, unit masses).

use cairn::algo::run_sync;
use cairn::engine::model::muller_brown_answer;
use cairn::geom::Frame;
use cairn::path::interp;
use cairn::path::neb::{Neb, NebOptions};
use nalgebra::DVector;

fn pt(x: f64, y: f64) -> DVector<f64> {
    DVector::from_vec(vec![x, y, 0.0])
}

// reference-values.md §1.1 [C]
const MA: (f64, f64) = (-0.558_223_635, 1.441_725_842);
const MB: (f64, f64) = (0.623_499_405, 0.028_037_759);
const MC: (f64, f64) = (-0.050_010_823, 0.466_694_105);
const S1: (f64, f64) = (-0.822_001_559, 0.624_312_803);
const S2: (f64, f64) = (0.212_486_582, 0.292_988_325);

fn dist(x: &DVector<f64>, p: (f64, f64)) -> f64 {
    ((x[0] - p.0).powi(2) + (x[1] - p.1).powi(2)).sqrt()
}

#[test]
fn climbing_band_between_ma_and_mc_finds_s1() {
    // Ends as given in the issue: the 3-decimal published minima (−0.558, 1.442), (−0.050, 0.467).
    let a = pt(-0.558, 1.442);
    let b = pt(-0.050, 0.467);
    let images = interp::linear(&a, &b, 10);
    let mut neb = Neb::new(images, Frame::Surface, NebOptions::surface()).unwrap();
    let (v, evals) = run_sync(
        &mut neb,
        |p| muller_brown_answer(&p.coords, p.quantity),
        5000,
    )
    .unwrap();
    assert!(v.converged, "{}", v.reason);
    let top = &v.images[v.highest];
    // Published saddle S1 (−0.822, 0.624) (Müller & Brown 1979; reference-values.md §1.1).
    assert!(
        dist(top, S1) < 0.01,
        "climbing image at ({}, {}), {}",
        top[0],
        top[1],
        v.reason
    );
    // The tangent at the climbing image is the unstable mode of S1 (reference-values.md §1.1:
    // eigenvector (0.761396, −0.648287)), up to sign.
    let ev = (0.761_396, -0.648_287);
    let cos = (v.tangent[0] * ev.0 + v.tangent[1] * ev.1).abs();
    assert!(
        cos > 0.95,
        "tangent {:?} vs unstable mode, |cos| = {cos}",
        v.tangent
    );
    assert_eq!(v.gradient_evaluations, evals);
    eprintln!(
        "band: {} iterations, {} gradients, {}",
        v.iterations, evals, v.reason
    );
    let _ = (MA, MB, MC, S2);
}

use cairn::path::walk::{Walk, WalkOptions, WalkStart};

fn near_saddle(x: &DVector<f64>) -> Option<&'static str> {
    if dist(x, S1) < 1e-3 {
        Some("S1")
    } else if dist(x, S2) < 1e-3 {
        Some("S2")
    } else {
        None
    }
}

#[test]
fn walking_uphill_from_each_minimum_reaches_a_published_saddle() {
    // Each minimum must reach the saddle next to it along its softest mode (one of the two
    // directions), and every converged walk must end on a published saddle (§1.1) with
    // negative curvature. Neighbours: MA–S1, MC–S1 and MC–S2, MB–S2 (§1.2).
    for (name, m, neighbours) in [
        ("MA", MA, &["S1"][..]),
        ("MB", MB, &["S2"][..]),
        ("MC", MC, &["S1", "S2"][..]),
    ] {
        let mut reached = false;
        for reverse in [false, true] {
            let opts = WalkOptions {
                reverse,
                ..WalkOptions::surface()
            };
            let mut w = Walk::new(pt(m.0, m.1), Frame::Surface, WalkStart::Mode(1), opts).unwrap();
            let (v, n) =
                run_sync(&mut w, |p| muller_brown_answer(&p.coords, p.quantity), 5000).unwrap();
            eprintln!(
                "{name} reverse {reverse}: ({:.4}, {:.4}) E {:.3} C {:.1} converged {} in {} iterations, {n} evaluations",
                v.x[0], v.x[1], v.energy, v.curvature, v.converged, v.iterations
            );
            assert_eq!(v.hessian_evaluations, 1);
            assert_eq!(v.hessian_evaluations + v.gradient_evaluations, n);
            if v.converged {
                let s = near_saddle(&v.x);
                assert!(
                    s.is_some(),
                    "{name}: converged away from any published saddle: {v:?}"
                );
                assert!(v.curvature < 0.0);
                reached |= s.is_some_and(|s| neighbours.contains(&s));
            }
        }
        assert!(reached, "{name}: no walk reached {neighbours:?}");
    }
}

use cairn::path::irc::{Irc, IrcOptions};

fn nearest_minimum(x: &DVector<f64>) -> (&'static str, f64) {
    [("MA", MA), ("MB", MB), ("MC", MC)]
        .into_iter()
        .map(|(n, m)| (n, dist(x, m)))
        .min_by(|a, b| a.1.total_cmp(&b.1))
        .unwrap()
}

fn irc_from(s: (f64, f64), opts: IrcOptions) -> cairn::path::irc::IrcResult {
    let mut irc = Irc::new(pt(s.0, s.1), &[1.0], Frame::Surface, opts).unwrap();
    run_sync(
        &mut irc,
        |p| muller_brown_answer(&p.coords, p.quantity),
        10_000,
    )
    .unwrap()
    .0
}

#[test]
fn irc_from_each_saddle_ends_in_the_minima_it_joins() {
    // reference-values.md §1.2 [C]: S1 joins MA (arc 1.03419) and MC (0.80208); S2 joins MC
    // (0.33383) and MB (0.52873); arc tolerance ±0.01 for steps ≤ 0.01.
    let cases = [
        (S1, [("MA", 1.03419), ("MC", 0.80208)]),
        (S2, [("MC", 0.33383), ("MB", 0.52873)]),
    ];
    for (s, ends) in cases {
        let r = irc_from(s, IrcOptions::surface());
        let mut got = Vec::new();
        for br in [&r.forward, &r.reverse] {
            let end = br.end().unwrap();
            let (m, d) = nearest_minimum(&end.x);
            eprintln!(
                "{s:?}: {} -> {m} at {d:.2e}, arc {:.5}, {} points",
                br.reason,
                br.arc_length(),
                br.points.len()
            );
            assert!(br.reached_minimum, "{}", br.reason);
            assert!(d < 0.01, "{s:?}: branch ends {d} from {m}");
            // After the final minimisation the end is the published minimum (§1.1).
            let min = br.minimum.as_ref().unwrap();
            assert!(min.converged, "{}", min.reason);
            let (m2, d2) = nearest_minimum(&min.x);
            assert!(m2 == m && d2 < 1e-3, "{s:?}: minimised end {d2} from {m2}");
            got.push((m, br.arc_length()));
            // energy falls monotonically from the saddle
            let mut prev = r.saddle_energy;
            for p in &br.points {
                assert!(p.energy < prev);
                prev = p.energy;
            }
        }
        got.sort_by(|a, b| a.0.cmp(b.0));
        let mut want = ends.to_vec();
        want.sort_by(|a, b| a.0.cmp(b.0));
        for ((gm, ga), (wm, wa)) in got.iter().zip(&want) {
            assert_eq!(gm, wm);
            assert!(
                (ga - wa).abs() < 0.01,
                "{s:?} -> {gm}: arc {ga:.5}, reference {wa}"
            );
        }
    }
}

#[test]
fn irc_with_updated_hessians_keeps_connectivity() {
    // Only the saddle Hessian computed; Bofill updates after that (the default for molecules).
    let opts = IrcOptions {
        hessian_every: 0,
        ..IrcOptions::surface()
    };
    for (s, ends) in [(S1, ["MA", "MC"]), (S2, ["MB", "MC"])] {
        let r = irc_from(s, opts.clone());
        assert_eq!(r.hessian_evaluations, 1);
        let mut got: Vec<&str> = [&r.forward, &r.reverse]
            .iter()
            .map(|b| nearest_minimum(b.end_geometry().unwrap()).0)
            .collect();
        got.sort();
        assert_eq!(
            got, ends,
            "{s:?}: {} / {}",
            r.forward.reason, r.reverse.reason
        );
    }
}

use cairn::algo::saddle::{FollowMode, SaddleOptions, SaddleSearch};
use cairn::path::coords::Coord;
use cairn::path::scan::{Scan, ScanAxis, ScanOptions};

#[test]
fn relaxed_scan_of_y_from_mc_to_mb_peaks_at_s2_and_refines_to_it() {
    // Drive y from MC (0.467) down to MB (0.028) while x relaxes. At S2, H_xx = 198.97 > 0 and
    // H_yy − H_xy²/H_xx < 0 (reference-values.md §1.1 Hessian elements), so the relaxed profile
    // E(y) = min_x V has its maximum at S2.
    let axis = ScanAxis::range(Coord::Cartesian(0, 1), 0.47, 0.03, 45);
    let mut scan = Scan::new(
        pt(MC.0, MC.1),
        Frame::Surface,
        vec![axis],
        ScanOptions::surface(),
    )
    .unwrap();
    let (v, n) = run_sync(
        &mut scan,
        |p| muller_brown_answer(&p.coords, p.quantity),
        100_000,
    )
    .unwrap();
    assert!(v.all_converged);
    assert_eq!(v.gradient_evaluations, n);
    assert_eq!(v.points.len(), 45);
    for p in &v.points {
        assert!((p.reached[0] - p.target[0]).abs() < 1e-4);
    }
    let g = v.saddle_guess.expect(&v.guess_note);
    let top = &v.points[g].x;
    eprintln!(
        "scan maximum at ({:.4}, {:.4}), E {:.3}; {n} gradients",
        top[0], top[1], v.points[g].energy
    );
    // grid spacing 0.01 in y
    assert!(
        dist(top, S2) < 0.02,
        "scan maximum at ({}, {})",
        top[0],
        top[1]
    );
    // Refined (P-RFO following the scanned coordinate) it is the published S2.
    let mode = v.guess_mode.clone().unwrap();
    let opts = SaddleOptions {
        follow: FollowMode::Vector(mode),
        ..SaddleOptions::for_surface()
    };
    let mut s = SaddleSearch::new(top.clone(), Frame::Surface, opts);
    let (sv, _) = run_sync(&mut s, |p| muller_brown_answer(&p.coords, p.quantity), 1000).unwrap();
    assert!(sv.converged && sv.n_negative == 1, "{}", sv.reason);
    assert!(dist(&sv.x, S2) < 1e-4);
}

#[test]
fn grid_scan_finds_a_discrete_saddle_near_s2() {
    // Both surface coordinates driven: an unrelaxed 2-D grid around S2 (0.2125, 0.2930).
    let ax = ScanAxis::range(Coord::Cartesian(0, 0), 0.0, 0.4, 9);
    let ay = ScanAxis::range(Coord::Cartesian(0, 1), 0.1, 0.5, 9);
    let mut scan = Scan::new(
        pt(0.0, 0.1),
        Frame::Surface,
        vec![ax, ay],
        ScanOptions::surface(),
    )
    .unwrap();
    let (v, _) = run_sync(
        &mut scan,
        |p| muller_brown_answer(&p.coords, p.quantity),
        100_000,
    )
    .unwrap();
    assert_eq!(v.points.len(), 81);
    let g = v.saddle_guess.expect(&v.guess_note);
    let x = &v.points[g].x;
    // grid spacing 0.05
    assert!(dist(x, S2) < 0.075, "grid saddle at ({}, {})", x[0], x[1]);
}
