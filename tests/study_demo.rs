//! The demo study: it passes `cairn check`, it has the kinds of reaction it promises, and its
//! geometries are what their comments say (checked with real xtb: GFN2-xTB gradients).

use cairn::engine::{find_engine, Job};
use cairn::eval::Quantity;
use cairn::study::{self, Start};
use std::path::PathBuf;
use std::process::Command;

fn demo() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("workflows-demo/demo.yaml")
}

#[test]
fn demo_passes_cairn_check() {
    let cwd = tempfile::tempdir().unwrap();
    let out = Command::new(env!("CARGO_BIN_EXE_cairn"))
        .arg("check")
        .arg(demo())
        .current_dir(cwd.path())
        .env_remove("CAIRN_SCRATCH")
        .output()
        .unwrap();
    let text = String::from_utf8_lossy(&out.stdout);
    assert_eq!(
        out.status.code(),
        Some(0),
        "{text}{}",
        String::from_utf8_lossy(&out.stderr)
    );
    // xtb's adapter asks for RAM scratch; the CI machines have a roomy tmpfs at /dev/shm.
    assert!(
        cairn::engine::process::memory_scratch_root().is_some(),
        "this machine has no usable /dev/shm"
    );
    for want in [
        "study \"cold-cloud-sampler\"",
        "reactions (5)",
        "executable /usr/bin/xtb, scratch in /dev/shm (RAM)",
        "CHN (geometries/hnc.xyz) at level gfn2: hcn-to-hnc (product), hnc-uphill (reactant)",
        "drive: atoms 1-6 from 2.947 Å to 1.800 Å",
    ] {
        assert!(text.contains(want), "missing {want:?} in\n{text}");
    }
    assert!(std::fs::read_dir(cwd.path()).unwrap().next().is_none());
}

#[test]
fn demo_has_every_promised_kind_of_reaction() {
    let s = study::load(&demo()).unwrap();
    assert!(s.reactions.len() >= 5);
    for l in &s.levels {
        assert_eq!(l.engine, "xtb");
        assert_eq!(l.settings.get("method").map(String::as_str), Some("gfn2"));
    }
    let any = |f: &dyn Fn(&study::Reaction) -> bool| s.reactions.iter().any(f);
    assert!(
        any(&|r| matches!(r.start, Start::Ends { .. })),
        "a rearrangement from its ends"
    );
    assert!(any(&|r| r.charge != 0), "a charged case");
    assert!(any(&|r| r.multiplicity == 2), "an open-shell case");
    assert!(
        any(&|r| matches!(r.start, Start::Drive { .. })),
        "one from a scan"
    );
    assert!(
        any(&|r| matches!(r.start, Start::Guess { .. })),
        "one from a saddle guess"
    );
    // Bimolecular: the chloride exchange starts from a complex of two fragments, Cl⁻ and
    // CH3Cl: the incoming Cl is far from every other atom (> 2.5 Å; a C–Cl bond is 1.77 Å,
    // Cordero et al. 2008 radii 0.76 + 1.02 Å).
    let ex = s.reaction("chloride-exchange").unwrap();
    if let Start::Drive { reactant, .. } = &ex.start {
        let c = &reactant.molecule.coords;
        let cl = c[5];
        for p in &c[..5] {
            let d = ((p[0] - cl[0]).powi(2) + (p[1] - cl[1]).powi(2) + (p[2] - cl[2]).powi(2))
                .sqrt()
                * cairn::units::ANGSTROM_PER_BOHR;
            assert!(d > 2.5, "{d} Å");
        }
    } else {
        panic!("chloride-exchange starts from a scan");
    }
    for r in &s.reactions {
        assert!(r.atom_count() <= 8, "{} is small", r.name);
    }
}

/// GFN2-xTB (plain xtb) for `m`.
fn xtb(m: &cairn::molecule::Molecule, quantity: Quantity) -> cairn::eval::Answer {
    let engine = find_engine("xtb", &[("method".to_string(), "gfn2".to_string())].into()).unwrap();
    let job = Job {
        elements: m.elements.clone(),
        coords: m.flat(),
        charge: m.charge,
        multiplicity: m.multiplicity,
        quantity,
        threads: 1,
    };
    engine.evaluate(&job, 0).unwrap().answer
}

fn gradient_max(m: &cairn::molecule::Molecule) -> (f64, f64) {
    let a = xtb(m, Quantity::Gradient);
    (a.energy, a.gradient.unwrap().amax())
}

fn imaginary_modes(m: &cairn::molecule::Molecule) -> usize {
    let h = xtb(m, Quantity::Hessian).hessian.unwrap();
    let modes = cairn::algo::freq::analyze(
        &h,
        &m.flat(),
        &m.masses(),
        cairn::geom::Frame::Molecule,
        20.0,
    )
    .unwrap();
    modes.n_imaginary
}

#[test]
fn demo_ends_are_gfn2_minima_and_the_guess_is_a_plausible_saddle_region() {
    let s = study::load(&demo()).unwrap();
    let mut energies = std::collections::BTreeMap::new();
    for r in &s.reactions {
        let (re, pr) = r.ends();
        let mut geoms: Vec<&study::Geometry> = re.into_iter().chain(pr).collect();
        if let Start::Drive { reactant, .. } = &r.start {
            geoms = vec![reactant];
        }
        for g in geoms {
            let (e, gmax) = gradient_max(&g.molecule);
            // `xtb --opt tight` stops at gradient norms of about 1e-3 Eh/bohr (common practice
            // for "tight"); the files keep 8 decimals of Å, so allow a little more.
            assert!(
                gmax < 2e-3,
                "{}: {} has max |dE/dx| {gmax} Eh/bohr",
                r.name,
                g.written
            );
            energies.insert(g.written.clone(), e);
            // A small gradient alone also passes a planar or linear saddle (a symmetric
            // structure can have zero forces and a negative curvature): the Hessian must have
            // no imaginary mode above 20 cm⁻¹ (common practice for "a minimum").
            let n_imag = imaginary_modes(&g.molecule);
            assert_eq!(n_imag, 0, "{}: {} is not a minimum", r.name, g.written);
        }
    }
    // The hand-built methoxy guess: well above methoxy but below any bond breaking; the
    // 1,2-H shift barrier in CH3O is about 30-40 kcal/mol (from memory).
    let r = s.reaction("methoxy-h-shift").unwrap();
    if let Start::Guess { guess, .. } = &r.start {
        let (e, _) = gradient_max(&guess.molecule);
        let above = (e - energies["geometries/methoxy.xyz"]) * cairn::units::KCALMOL_PER_HARTREE;
        assert!((25.0..50.0).contains(&above), "{above} kcal/mol");
    } else {
        panic!("methoxy-h-shift starts from a guess");
    }
}
