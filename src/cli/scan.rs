//! `cairn scan MOL.xyz --engine E --bond I J --from A --to B --points N` (or --angle I J K,
//! --dihedral I J K L, or on a model surface --cartesian I AXIS): a relaxed scan; a second
//! coordinate (--bond2 ... --from2 --to2 --points2) makes a 2-D grid.
//!
//! Exit status: 0 every point relaxed; 1 error; 2 usage error; 3 some point not converged
//! (results kept).

use super::band::{cost_json, engine_json, finish, out_dir, session, write_json, EngineArgs};
use crate::driver::{block_on, drive};
use crate::error::{Error, Result};
use crate::path::coords::Coord;
use crate::path::report;
use crate::path::scan::{Scan, ScanAxis, ScanOptions};
use crate::units::{ANGSTROM_PER_BOHR, BOHR_PER_ANGSTROM};
use serde_json::json;
use std::path::PathBuf;
use std::time::Instant;

/// Relaxed scan of a bond length, angle or dihedral (1-D, or a 2-D grid with a second one).
///
/// Everything else relaxes at each point (harmonic restraint on the driven coordinate, target
/// corrected until reached; see DEVELOPERS.md "Paths"). Atoms count from 1. Lengths in Å
/// (surface units on model surfaces), angles in degrees. Writes into --out: scan.xyz (every
/// relaxed point), profile.tsv, saddle_guess.xyz and saddle_guess_mode.txt (when the profile has
/// an interior maximum), scan.json.
/// Exit status: 0 every point relaxed; 1 error; 2 usage error; 3 some point not converged.
#[derive(clap::Args, Debug)]
pub struct Args {
    /// Starting geometry (XYZ, Å).
    pub molecule: PathBuf,
    #[command(flatten)]
    pub engine: EngineArgs,
    /// Drive the bond I–J.
    #[arg(long, num_args = 2, value_names = ["I", "J"])]
    pub bond: Option<Vec<usize>>,
    /// Drive the angle I–J–K (vertex J).
    #[arg(long, num_args = 3, value_names = ["I", "J", "K"])]
    pub angle: Option<Vec<usize>>,
    /// Drive the dihedral I–J–K–L.
    #[arg(long, num_args = 4, value_names = ["I", "J", "K", "L"])]
    pub dihedral: Option<Vec<usize>>,
    /// Drive one Cartesian component of atom I (AXIS x, y or z); meant for model surfaces.
    #[arg(long, num_args = 2, value_names = ["I", "AXIS"])]
    pub cartesian: Option<Vec<String>>,
    /// First value (Å or degrees).
    #[arg(long, allow_negative_numbers = true)]
    pub from: f64,
    /// Last value (Å or degrees).
    #[arg(long, allow_negative_numbers = true)]
    pub to: f64,
    /// Number of points, ends included.
    #[arg(long, value_parser = clap::value_parser!(u64).range(2..1000))]
    pub points: u64,
    /// Second coordinate of a 2-D grid: bond.
    #[arg(long, num_args = 2, value_names = ["I", "J"])]
    pub bond2: Option<Vec<usize>>,
    /// Second coordinate: angle.
    #[arg(long, num_args = 3, value_names = ["I", "J", "K"])]
    pub angle2: Option<Vec<usize>>,
    /// Second coordinate: dihedral.
    #[arg(long, num_args = 4, value_names = ["I", "J", "K", "L"])]
    pub dihedral2: Option<Vec<usize>>,
    /// Second coordinate: Cartesian component.
    #[arg(long, num_args = 2, value_names = ["I", "AXIS"])]
    pub cartesian2: Option<Vec<String>>,
    #[arg(long, allow_negative_numbers = true)]
    pub from2: Option<f64>,
    #[arg(long, allow_negative_numbers = true)]
    pub to2: Option<f64>,
    #[arg(long, value_parser = clap::value_parser!(u64).range(2..1000))]
    pub points2: Option<u64>,
    /// Output directory.
    #[arg(long, default_value = "scan")]
    pub out: PathBuf,
}

pub fn run(args: Args) -> i32 {
    finish("scan", execute(&args))
}

/// 1-based atom number → 0-based index.
fn idx(v: usize, flag: &str) -> Result<usize> {
    v.checked_sub(1)
        .ok_or_else(|| Error::invalid(format!("--{flag}: atoms count from 1, got 0")))
}

fn coord(
    bond: &Option<Vec<usize>>,
    angle: &Option<Vec<usize>>,
    dihedral: &Option<Vec<usize>>,
    cartesian: &Option<Vec<String>>,
    suffix: &str,
) -> Result<Option<Coord>> {
    let mut found = Vec::new();
    if let Some(v) = bond {
        let f = format!("bond{suffix}");
        found.push(Coord::Bond(idx(v[0], &f)?, idx(v[1], &f)?));
    }
    if let Some(v) = angle {
        let f = format!("angle{suffix}");
        found.push(Coord::Angle(idx(v[0], &f)?, idx(v[1], &f)?, idx(v[2], &f)?));
    }
    if let Some(v) = dihedral {
        let f = format!("dihedral{suffix}");
        found.push(Coord::Dihedral(
            idx(v[0], &f)?,
            idx(v[1], &f)?,
            idx(v[2], &f)?,
            idx(v[3], &f)?,
        ));
    }
    if let Some(v) = cartesian {
        let f = format!("cartesian{suffix}");
        let i: usize = v[0]
            .parse()
            .map_err(|_| Error::invalid(format!("--{f}: '{}' is not an atom number", v[0])))?;
        let axis = match v[1].to_ascii_lowercase().as_str() {
            "x" => 0,
            "y" => 1,
            "z" => 2,
            other => {
                return Err(Error::invalid(format!(
                    "--{f}: axis '{other}' is not x, y or z"
                )))
            }
        };
        found.push(Coord::Cartesian(idx(i, &f)?, axis));
    }
    if found.len() > 1 {
        return Err(Error::invalid(format!(
            "give one of --bond{suffix}, --angle{suffix}, --dihedral{suffix}, --cartesian{suffix}, not several"
        )));
    }
    Ok(found.pop())
}

/// User value (Å, degrees, or surface units) → internal (bohr, rad).
fn to_internal(c: &Coord, v: f64, surface: bool) -> f64 {
    match c {
        Coord::Angle(..) | Coord::Dihedral(..) => v.to_radians(),
        _ if surface => v,
        _ => v * BOHR_PER_ANGSTROM,
    }
}

fn to_user(c: &Coord, v: f64, surface: bool) -> f64 {
    match c {
        Coord::Angle(..) | Coord::Dihedral(..) => v.to_degrees(),
        _ if surface => v,
        _ => v * ANGSTROM_PER_BOHR,
    }
}

fn unit(c: &Coord, surface: bool) -> &'static str {
    match c {
        Coord::Angle(..) | Coord::Dihedral(..) => "degree",
        _ if surface => "surface units",
        _ => "angstrom",
    }
}

fn execute(args: &Args) -> Result<(String, bool)> {
    let t0 = Instant::now();
    let mut m = crate::xyz::read(&args.molecule)?;
    let name = args.molecule.display().to_string();
    let c1 = coord(&args.bond, &args.angle, &args.dihedral, &args.cartesian, "")?
        .ok_or_else(|| {
            Error::invalid("say what to drive: --bond I J, --angle I J K, --dihedral I J K L or --cartesian I AXIS")
        })?;
    let c2 = coord(
        &args.bond2,
        &args.angle2,
        &args.dihedral2,
        &args.cartesian2,
        "2",
    )?;
    let s = session(&args.engine, &mut m, &args.molecule)?;
    for c in std::iter::once(&c1).chain(c2.as_ref()) {
        c.check(m.len())
            .map_err(|e| Error::invalid(format!("{name}: {}: {e}", c.label())))?;
    }
    let n1 = usize::try_from(args.points).unwrap_or(2);
    let mut axes = vec![ScanAxis::range(
        c1,
        to_internal(&c1, args.from, s.surface),
        to_internal(&c1, args.to, s.surface),
        n1,
    )];
    if let Some(c2) = c2 {
        let (Some(a), Some(b), Some(n)) = (args.from2, args.to2, args.points2) else {
            return Err(Error::invalid(
                "a second coordinate needs --from2, --to2 and --points2",
            ));
        };
        axes.push(ScanAxis::range(
            c2,
            to_internal(&c2, a, s.surface),
            to_internal(&c2, b, s.surface),
            usize::try_from(n).unwrap_or(2),
        ));
    }
    let mut scan = Scan::new(m.flat(), s.frame, axes, ScanOptions::for_frame(s.frame))
        .map_err(|e| Error::invalid(format!("{name}: {e}")))?;
    out_dir(&args.out)?;
    let (v, stats) = block_on(drive(&mut scan, &s.ev, &s.system))
        .map_err(|e| Error::Algorithm(format!("{name}: {e}")))?;
    let wall = t0.elapsed().as_secs_f64();
    let e0 = v.points.first().map_or(0.0, |p| p.energy);
    let describe = |p: &crate::path::scan::ScanPoint| {
        v.axes
            .iter()
            .zip(&p.reached)
            .map(|(a, r)| {
                format!(
                    "{} = {:.4} {}",
                    a.coord.label(),
                    to_user(&a.coord, *r, s.surface),
                    unit(&a.coord, s.surface)
                )
            })
            .collect::<Vec<_>>()
            .join(", ")
    };
    let frames: Vec<_> = v
        .points
        .iter()
        .map(|p| {
            (
                p.x.clone(),
                format!(
                    "scan {} E = {} rel = {}{}",
                    describe(p),
                    report::energy(p.energy, s.surface),
                    report::relative(p.energy, e0, s.surface),
                    if p.converged { "" } else { " (not converged)" }
                ),
            )
        })
        .collect();
    let scan_file = args.out.join("scan.xyz");
    crate::xyz::write_atomic(&scan_file, &report::frames_xyz(&m, &frames))?;
    // profile.tsv: one line per point.
    let mut tsv = String::new();
    for a in &v.axes {
        tsv.push_str(&format!(
            "{} ({})\t",
            a.coord.label(),
            unit(&a.coord, s.surface)
        ));
    }
    tsv.push_str(&format!(
        "energy ({})\trelative ({})\tconverged\n",
        report::energy_unit(s.surface),
        if s.surface {
            "surface units"
        } else {
            "kcal/mol"
        }
    ));
    for p in &v.points {
        for (a, r) in v.axes.iter().zip(&p.reached) {
            tsv.push_str(&format!("{:.6}\t", to_user(&a.coord, *r, s.surface)));
        }
        let rel = if s.surface {
            p.energy - e0
        } else {
            (p.energy - e0) * crate::units::KCALMOL_PER_HARTREE
        };
        tsv.push_str(&format!("{:.10}\t{:.4}\t{}\n", p.energy, rel, p.converged));
    }
    let tsv_file = args.out.join("profile.tsv");
    crate::xyz::write_atomic(&tsv_file, &tsv)?;
    let mut text = format!(
        "relaxed scan of {} on {name}, engine {}: {} points\n",
        v.axes
            .iter()
            .map(|a| a.coord.label())
            .collect::<Vec<_>>()
            .join(" × "),
        s.engine.name(),
        v.points.len()
    );
    let mut guess_json = serde_json::Value::Null;
    if let Some(g) = v.saddle_guess.and_then(|g| v.points.get(g)) {
        let guess_file = args.out.join("saddle_guess.xyz");
        crate::xyz::write_atomic(
            &guess_file,
            &crate::xyz::format_frame(
                &m.with_flat(&g.x),
                &format!(
                    "saddle guess from the scan: {} E = {}",
                    describe(g),
                    report::energy(g.energy, s.surface)
                ),
            ),
        )?;
        text.push_str(&format!(
            "saddle guess ({}): {}, E = {}, {} above the first point; written to {}\n",
            v.guess_note,
            describe(g),
            report::energy(g.energy, s.surface),
            report::relative(g.energy, e0, s.surface),
            guess_file.display()
        ));
        let mut mode_file = None;
        if let Some(mode) = &v.guess_mode {
            let f = args.out.join("saddle_guess_mode.txt");
            crate::xyz::write_atomic(
                &f,
                &report::mode_text(
                    &m,
                    mode,
                    "gradient of the scanned coordinate at the saddle guess",
                ),
            )?;
            mode_file = Some(f.display().to_string());
        }
        guess_json = json!({
            "energy": g.energy,
            "index": g.index,
            "geometry": report::geometry_json(&m, &g.x),
            "mode": v.guess_mode.as_ref().map(|md| md.iter().copied().collect::<Vec<f64>>()),
            "file": guess_file.display().to_string(),
            "mode_file": mode_file,
        });
    } else {
        text.push_str(&format!("no saddle guess: {}\n", v.guess_note));
    }
    let record = json!({
        "command": "scan",
        "molecule": name,
        "engine": engine_json(&s),
        "coordinates": v.axes.iter().map(|a| json!({
            "coordinate": a.coord,
            "label": a.coord.label(),
            "unit": unit(&a.coord, s.surface),
            "values": a.values.iter().map(|x| to_user(&a.coord, *x, s.surface)).collect::<Vec<_>>(),
        })).collect::<Vec<_>>(),
        "points": v.points.iter().map(|p| json!({
            "index": p.index,
            "target": v.axes.iter().zip(&p.target).map(|(a, x)| to_user(&a.coord, *x, s.surface)).collect::<Vec<_>>(),
            "reached": v.axes.iter().zip(&p.reached).map(|(a, x)| to_user(&a.coord, *x, s.surface)).collect::<Vec<_>>(),
            "energy": p.energy,
            "converged": p.converged,
            "reason": p.reason,
        })).collect::<Vec<_>>(),
        "all_converged": v.all_converged,
        "saddle_guess": guess_json,
        "saddle_guess_note": v.guess_note,
        "files": {
            "scan": scan_file.display().to_string(),
            "profile": tsv_file.display().to_string(),
        },
        "cost": cost_json(&stats, wall, s.jobs),
    });
    let rec_file = args.out.join("scan.json");
    write_json(&rec_file, &record)?;
    if !v.all_converged {
        text.push_str("NOT ALL POINTS CONVERGED: see scan.json (reason per point)\n");
    }
    text.push_str(&format!(
        "{} gradients, {:.1} s wall; written: {}, {}, {}\n",
        stats.gradient_evaluations,
        wall,
        scan_file.display(),
        tsv_file.display(),
        rec_file.display()
    ));
    Ok((text, v.all_converged))
}
