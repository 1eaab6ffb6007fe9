//! `cairn irc SADDLE.xyz --engine E`: the intrinsic reaction coordinate from a saddle, both
//! directions, each end minimised; with --reactant/--product, whether each end is one of them
//! (bond graphs, or nearness on a model surface).
//!
//! Exit status: 0 both branches reached minima; 1 error; 2 usage error; 3 a branch ran out of
//! steps or an end minimisation did not converge (results kept).

use super::band::{cost_json, engine_json, finish, out_dir, session, write_json, EngineArgs};
use crate::driver::{block_on, drive};
use crate::error::{Error, Result};
use crate::molecule::Molecule;
use crate::path::graph;
use crate::path::irc::{Irc, IrcBranch, IrcOptions};
use crate::path::report;
use serde_json::json;
use std::path::PathBuf;
use std::time::Instant;

/// Intrinsic reaction coordinate from a first-order saddle, both directions.
///
/// Mass-weighted steepest descent (local quadratic approximation; Hessian at the saddle, then
/// updated). Writes into --out: irc.xyz (reverse end → saddle → forward end, energies and arc
/// lengths in the comments), forward_end.xyz and reverse_end.xyz (minimised ends), irc.json.
/// Exit status: 0 both ends reached minima; 1 error; 2 usage error; 3 a branch out of steps.
#[derive(clap::Args, Debug)]
pub struct Args {
    /// Saddle geometry (XYZ, Å), e.g. refined by `cairn saddle`.
    pub saddle: PathBuf,
    #[command(flatten)]
    pub engine: EngineArgs,
    /// Reactant geometry to compare the ends with (same atoms).
    #[arg(long)]
    pub reactant: Option<PathBuf>,
    /// Product geometry to compare the ends with (same atoms).
    #[arg(long)]
    pub product: Option<PathBuf>,
    /// Step (arc length), amu^½ bohr (default 0.1; 0.01 on model surfaces).
    #[arg(long)]
    pub step: Option<f64>,
    /// Steps per direction (default 150; 1000 on model surfaces).
    #[arg(long)]
    pub max_steps: Option<usize>,
    /// Recompute the Hessian every K steps (default: only at the saddle, then updates; every
    /// step on model surfaces).
    #[arg(long, value_name = "K")]
    pub hessian_every: Option<usize>,
    /// Output directory.
    #[arg(long, default_value = "irc")]
    pub out: PathBuf,
}

pub fn run(args: Args) -> i32 {
    finish("irc", execute(&args))
}

fn compare(
    name: &str,
    path: &Option<PathBuf>,
    template: &Molecule,
) -> Result<Option<(String, Molecule)>> {
    let Some(p) = path else { return Ok(None) };
    let m = crate::xyz::read(p)?;
    crate::path::align::check_same_atoms(template, &m, ("the saddle", &p.display().to_string()))
        .map_err(|e| Error::invalid(format!("--{name}: {e}")))?;
    Ok(Some((p.display().to_string(), m)))
}

fn execute(args: &Args) -> Result<(String, bool)> {
    let t0 = Instant::now();
    let mut saddle = crate::xyz::read(&args.saddle)?;
    let sname = args.saddle.display().to_string();
    let reactant = compare("reactant", &args.reactant, &saddle)?;
    let product = compare("product", &args.product, &saddle)?;
    let s = session(&args.engine, &mut saddle, &args.saddle)?;
    let mut opts = IrcOptions::for_frame(s.frame);
    if let Some(v) = args.step {
        if !(v > 0.0 && v.is_finite()) {
            return Err(Error::invalid(format!("--step must be positive, got {v}")));
        }
        opts.step = v;
    }
    if let Some(v) = args.max_steps {
        opts.max_steps = v.max(1);
    }
    if let Some(v) = args.hessian_every {
        opts.hessian_every = v;
    }
    let masses: Vec<f64> = if s.surface {
        vec![1.0; saddle.len()]
    } else {
        saddle.masses()
    };
    let mut irc =
        Irc::new(saddle.flat(), &masses, s.frame, opts.clone()).map_err(|e| Error::invalid(e.0))?;
    out_dir(&args.out)?;
    let (v, stats) = block_on(drive(&mut irc, &s.ev, &s.system))?;
    let wall = t0.elapsed().as_secs_f64();

    // The path, reverse end first.
    let e0 = v.saddle_energy;
    let mut frames = Vec::new();
    let label = |dir: &str, arc: f64, e: f64| {
        format!(
            "{dir} arc = {arc:.4} {} E = {} rel = {}",
            if s.surface {
                "(surface units)"
            } else {
                "amu^1/2 bohr"
            },
            report::energy(e, s.surface),
            report::relative(e, e0, s.surface)
        )
    };
    if let Some(m) = &v.reverse.minimum {
        frames.push((
            m.x.clone(),
            label("reverse end (minimised)", -v.reverse.arc_length(), m.energy),
        ));
    }
    for p in v.reverse.points.iter().rev() {
        frames.push((p.x.clone(), label("reverse", -p.arc, p.energy)));
    }
    frames.push((v.saddle.clone(), label("saddle", 0.0, e0)));
    for p in &v.forward.points {
        frames.push((p.x.clone(), label("forward", p.arc, p.energy)));
    }
    if let Some(m) = &v.forward.minimum {
        frames.push((
            m.x.clone(),
            label("forward end (minimised)", v.forward.arc_length(), m.energy),
        ));
    }
    let path_file = args.out.join("irc.xyz");
    crate::xyz::write_atomic(&path_file, &report::frames_xyz(&saddle, &frames))?;

    let mut text = format!("IRC from {sname}, engine {}\n", s.engine.name());
    let mut ok = true;
    let mut ends = serde_json::Map::new();
    for (key, br) in [("forward", &v.forward), ("reverse", &v.reverse)] {
        let Some(end) = br.end_geometry().cloned() else {
            return Err(Error::Algorithm(format!("IRC {key}: no point was reached")));
        };
        let end_e = br
            .minimum
            .as_ref()
            .map(|m| m.energy)
            .or_else(|| br.end().map(|p| p.energy))
            .unwrap_or(f64::NAN);
        let file = args.out.join(format!("{key}_end.xyz"));
        crate::xyz::write_atomic(
            &file,
            &crate::xyz::format_frame(
                &saddle.with_flat(&end),
                &format!("IRC {key} end E = {}", report::energy(end_e, s.surface)),
            ),
        )?;
        let end_mol = saddle.with_flat(&end);
        let matches_r = reactant
            .as_ref()
            .map(|(_, m)| graph::same_species(&end_mol, m));
        let matches_p = product
            .as_ref()
            .map(|(_, m)| graph::same_species(&end_mol, m));
        ok &= br.reached_minimum && br.minimum.as_ref().is_none_or(|m| m.converged);
        text.push_str(&format!(
            "{}\n  end: E = {} ({} below the saddle), arc length {:.4} {}{}{}\n",
            br.reason,
            report::energy(end_e, s.surface),
            report::relative(e0, end_e, s.surface),
            br.arc_length(),
            if s.surface {
                "(surface units)"
            } else {
                "amu^1/2 bohr"
            },
            matches_r
                .map(|b| format!(", matches the reactant: {}", yes(b)))
                .unwrap_or_default(),
            matches_p
                .map(|b| format!(", matches the product: {}", yes(b)))
                .unwrap_or_default(),
        ));
        ends.insert(
            format!("{key}_end"),
            json!({
                "geometry": report::geometry_json(&saddle, &end),
                "energy": end_e,
                "file": file.display().to_string(),
                "matches_reactant": matches_r,
                "matches_product": matches_p,
                "bond_changes_from_saddle": graph::bond_changes(&saddle.elements, &v.saddle, &end)
                    .iter().map(|c| c.to_string()).collect::<Vec<_>>(),
            }),
        );
        ends.insert(key.to_string(), branch_json(br, &saddle));
    }
    let mut record = json!({
        "command": "irc",
        "saddle": sname,
        "engine": engine_json(&s),
        "saddle_energy": e0,
        "saddle_eigenvalue_mass_weighted": v.saddle_eigenvalue,
        "arc_length_unit": if s.surface { "surface units" } else { "amu^1/2 bohr" },
        "step": opts.step,
        "reactant": reactant.as_ref().map(|r| r.0.clone()),
        "product": product.as_ref().map(|p| p.0.clone()),
        "connects_reactant_and_product": match (&ends.get("forward_end"), &ends.get("reverse_end")) {
            (Some(f), Some(r)) if reactant.is_some() && product.is_some() => {
                let t = |v: &serde_json::Value, k: &str| v.get(k).and_then(|b| b.as_bool()).unwrap_or(false);
                Some((t(f, "matches_reactant") && t(r, "matches_product")) || (t(f, "matches_product") && t(r, "matches_reactant")))
            }
            _ => None,
        },
        "files": { "path": path_file.display().to_string() },
        "cost": cost_json(&stats, wall, s.jobs),
    });
    if let Some(obj) = record.as_object_mut() {
        obj.extend(ends);
    }
    let rec_file = args.out.join("irc.json");
    write_json(&rec_file, &record)?;
    text.push_str(&format!(
        "{} gradients, {} Hessians, {:.1} s wall; written: {}, {}\n",
        stats.gradient_evaluations,
        stats.hessian_evaluations,
        wall,
        path_file.display(),
        rec_file.display()
    ));
    Ok((text, ok))
}

fn yes(b: bool) -> &'static str {
    if b {
        "yes"
    } else {
        "no"
    }
}

fn branch_json(b: &IrcBranch, template: &Molecule) -> serde_json::Value {
    let _ = template;
    json!({
        "reason": b.reason,
        "reached_minimum": b.reached_minimum,
        "steps": b.points.len(),
        "arc_length": b.arc_length(),
        "arc": b.points.iter().map(|p| p.arc).collect::<Vec<_>>(),
        "energies": b.points.iter().map(|p| p.energy).collect::<Vec<_>>(),
        "end_minimisation": b.minimum.as_ref().map(|m| json!({
            "converged": m.converged,
            "reason": m.reason,
            "energy": m.energy,
            "distance_from_last_point": m.distance,
        })),
    })
}
