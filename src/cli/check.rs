//! `cairn check STUDY.yaml`: validate a study (file, geometries, levels, engines) and print
//! the plan. Writes nothing. Exits 0 when the study can run, 1 with the first error otherwise.

use crate::study::locate::key;
use crate::study::plan::{Estimate, Role};
use crate::study::{self, Plan, Study, StudyError};
use std::fmt::Write as _;
use std::path::PathBuf;

#[derive(clap::Args, Debug)]
pub struct Args {
    /// The study file (YAML).
    pub study: PathBuf,
}

/// Run the command; returns the exit status.
pub fn run(args: &Args) -> i32 {
    match check(&args.study) {
        Ok(report) => {
            print!("{report}");
            0
        }
        Err(e) => {
            eprintln!("error: {e}");
            1
        }
    }
}

/// Validate the study and its engines; return the plan as text.
pub fn check(path: &std::path::Path) -> Result<String, StudyError> {
    let study = study::load(path)?;
    let engines = check_engines(&study)?;
    let plan = Plan::new(&study);
    Ok(report(&study, &plan, &engines))
}

/// Every level's engine must be found: a built-in model surface, or an adapter file whose
/// settings are accepted and whose executable is on PATH. Returns one line per level.
fn check_engines(study: &Study) -> Result<Vec<String>, StudyError> {
    let mut out = Vec::new();
    for l in &study.levels {
        let fail = |msg: String| {
            study::load::error_in(
                study,
                &[key("levels"), key(&l.name), key("engine")],
                None,
                Some(&format!("levels.{}.engine", l.name)),
                msg,
            )
        };
        let engine = crate::engine::find_engine(&l.engine, &l.settings)
            .map_err(|e| fail(format!("engine \"{}\" is not usable: {e}", l.engine)))?;
        if engine.is_model() {
            out.push(format!("{} (built-in model surface)", l.engine));
            continue;
        }
        let path = crate::engine::adapter::find_adapter_file(&l.engine).ok_or_else(|| {
            fail(format!(
                "engine \"{}\" has no adapter file (`cairn engines` lists what is available)",
                l.engine
            ))
        })?;
        let adapter = crate::engine::adapter::Adapter::load(&path)
            .map_err(|e| fail(format!("engine \"{}\" is not usable: {e}", l.engine)))?;
        let (exe, found) = adapter.executable();
        let scratch = match adapter.scratch_root() {
            Some(r) if crate::engine::process::memory_scratch_root().as_ref() == Some(&r) => {
                format!("{} (RAM)", r.display())
            }
            Some(r) => r.display().to_string(),
            None => std::env::temp_dir().display().to_string(),
        };
        match found {
            Some(p) => out.push(format!(
                "{} {} (adapter {}), executable {}, scratch in {scratch}",
                l.engine,
                adapter.file.version.0,
                path.display(),
                p.display()
            )),
            None => {
                let hint = adapter
                    .file
                    .install_hint
                    .as_deref()
                    .map(|h| format!("; install it: {h}"))
                    .unwrap_or_default();
                return Err(fail(format!(
                    "engine \"{}\": its executable '{exe}' is not found on PATH{hint}",
                    l.engine
                )));
            }
        }
    }
    Ok(out)
}

fn about(e: &Estimate) -> String {
    let t = e.typical;
    let mut parts = Vec::new();
    if t.gradients > 0 {
        parts.push(format!(
            "{} gradient{}",
            t.gradients,
            if t.gradients == 1 { "" } else { "s" }
        ));
    }
    if t.hessians > 0 {
        parts.push(format!(
            "{} Hessian{}",
            t.hessians,
            if t.hessians == 1 { "" } else { "s" }
        ));
    }
    if parts.is_empty() {
        parts.push("0 calls".into());
    }
    parts.join(" + ")
}

/// The plan as text: levels, reactions with their stages and estimates, shared species, totals.
pub fn report(study: &Study, plan: &Plan, engines: &[String]) -> String {
    let mut s = String::new();
    let _ = writeln!(s, "study \"{}\" ({})", study.name, study.file.display());
    if let Some(a) = &study.about {
        for line in a.trim().lines() {
            let _ = writeln!(s, "  {}", line.trim());
        }
    }
    let _ = writeln!(s, "\nlevels");
    let wl = study.levels.iter().map(|l| l.name.len()).max().unwrap_or(0);
    for (l, id) in study.levels.iter().zip(engines) {
        let settings: Vec<String> = l.settings.iter().map(|(k, v)| format!("{k}={v}")).collect();
        let settings = if settings.is_empty() {
            String::new()
        } else {
            format!("; settings {}", settings.join(", "))
        };
        let _ = writeln!(s, "  {:<wl$}  {id}{settings}", l.name);
        if let Some(o) = &l.slurm {
            let _ = writeln!(
                s,
                "  {:<wl$}  slurm: {}",
                "",
                crate::slurm::describe_options(o)
            );
        }
    }
    let _ = writeln!(
        s,
        "\ndefaults: charge {}, multiplicity {}, level {}, {} retries per engine call, timeout {}",
        study.defaults.charge,
        study.defaults.multiplicity,
        study.defaults.level,
        study.defaults.retries,
        study
            .defaults
            .timeout_seconds
            .map_or("none".to_string(), |t| format!("{t} s"))
    );
    let _ = writeln!(
        s,
        "executor: {}",
        match study.defaults.executor {
            study::ExecutorKind::Local => "local (engine processes on this machine)",
            study::ExecutorKind::Slurm => "slurm (each group of evaluations is one batch job)",
        }
    );
    let _ = writeln!(s, "\nreactions ({})", study.reactions.len());
    for (ri, r) in study.reactions.iter().enumerate() {
        let first = match &r.start {
            study::Start::Ends { reactant, .. }
            | study::Start::Drive { reactant, .. }
            | study::Start::Alone { reactant } => &reactant.molecule,
            study::Start::Guess { guess, .. } => &guess.molecule,
        };
        let _ = writeln!(
            s,
            "  {}: from {}; {} ({} atom{}), charge {}, multiplicity {}, level {}",
            r.name,
            r.start.describe(),
            first.formula(),
            first.len(),
            if first.len() == 1 { "" } else { "s" },
            r.charge,
            r.multiplicity,
            r.level
        );
        if let study::Start::Drive { drive, .. } = &r.start {
            let a = crate::units::ANGSTROM_PER_BOHR;
            let _ = writeln!(
                s,
                "    drive: atoms {}-{} from {:.3} Å to {:.3} Å",
                drive.atoms[0] + 1,
                drive.atoms[1] + 1,
                drive.from_bohr * a,
                drive.to_bohr * a
            );
        }
        for (si, st) in r.stages.iter().enumerate() {
            let level = if st.level != r.level {
                format!(" [level {}]", st.level)
            } else {
                String::new()
            };
            let what = if st.kind() == study::StageKind::RelaxEnds {
                let names: Vec<String> = plan
                    .reaction_species
                    .get(ri)
                    .map(|v| {
                        v.iter()
                            .filter_map(|(role, k)| {
                                plan.species.get(*k).map(|sp| {
                                    let shared = if sp.used_by.len() > 1 { ", shared" } else { "" };
                                    format!("{} {} ({}{shared})", role.name(), sp.formula, sp.file)
                                })
                            })
                            .collect()
                    })
                    .unwrap_or_default();
                format!("{}; {}", names.join(", "), st.spec.describe())
            } else {
                st.spec.describe()
            };
            let est = match plan
                .stage_task
                .get(ri)
                .and_then(|v| v.get(si))
                .copied()
                .flatten()
            {
                Some(node) => plan
                    .tasks
                    .get(node.index())
                    .map(|(t, _)| plan.task_estimate(study, t))
                    .unwrap_or_default(),
                None => {
                    let n = plan.reaction_species.get(ri).map_or(0, Vec::len) as u64;
                    let one = study::plan::estimate(st);
                    Estimate {
                        typical: study::plan::Calls {
                            gradients: one.typical.gradients * n,
                            hessians: one.typical.hessians * n,
                        },
                        at_most: one.at_most,
                    }
                }
            };
            let _ = writeln!(
                s,
                "    {:<10}  {what}{level}  (~{})",
                st.kind().name(),
                about(&est)
            );
        }
        if !r.not_applicable.is_empty() {
            let names: Vec<&str> = r.not_applicable.iter().map(|k| k.name()).collect();
            let _ = writeln!(s, "    (not for this start: {})", names.join(", "));
        }
        let e = plan.reaction_estimate(study, ri);
        let _ = writeln!(
            s,
            "    estimate: about {} engine calls ({}), at most {}",
            e.typical.total(),
            about(&e),
            e.at_most.total()
        );
    }
    let shared: Vec<_> = plan.shared_species().collect();
    if !shared.is_empty() {
        let _ = writeln!(s, "\nshared species (relaxed once)");
        for sp in shared {
            let users: Vec<String> = sp
                .used_by
                .iter()
                .filter_map(|(ri, role)| {
                    study
                        .reactions
                        .get(*ri)
                        .map(|r| format!("{} ({})", r.name, role_name(*role)))
                })
                .collect();
            let _ = writeln!(
                s,
                "  {} ({}) at level {}: {}",
                sp.formula,
                sp.file,
                sp.level,
                users.join(", ")
            );
        }
    }
    let t = plan.total_estimate(study);
    let _ = writeln!(
        s,
        "\ntotal: {} tasks; {} species relaxations ({} saved by sharing)",
        plan.tasks.len(),
        plan.species.len(),
        plan.relaxations_saved()
    );
    let _ = writeln!(
        s,
        "estimate: about {} engine calls ({}), at most {}; a rough guide, not a promise",
        t.typical.total(),
        about(&t),
        t.at_most.total()
    );
    s
}

fn role_name(r: Role) -> &'static str {
    r.name()
}
