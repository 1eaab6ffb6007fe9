//! Shared pieces of `cairn relax`, `cairn saddle` and `cairn modes`: the engine/store options,
//! setting up the evaluator, and the result record (JSON file, XYZ file, readable summary).
//!
//! Exit status of these commands: 0 converged (or, for `modes`, analysed), 1 error (file,
//! input, engine), 2 usage error, 3 finished without converging (the record is still written).

use crate::algo::freq::Modes;
use crate::driver::{Evaluator, Stats, System};
use crate::engine::Engine;
use crate::error::{Error, Result};
use crate::geom::Frame;
use crate::molecule::Molecule;
use crate::units::{ANGSTROM_PER_BOHR, KCALMOL_PER_HARTREE};
use nalgebra::DVector;
use serde_json::{json, Map, Value};
use std::path::{Path, PathBuf};
use std::sync::Arc;

/// Exit status when a run finished without converging.
pub const EXIT_NOT_CONVERGED: i32 = 3;

/// Engine, store and output options shared by the commands (as in `cairn evaluate`).
#[derive(clap::Args, Debug, Clone)]
pub struct Common {
    #[command(flatten)]
    pub choice: crate::cli::evaluate::EngineChoice,
    /// Engine jobs run at once (finite-difference displacements run side by side).
    #[arg(long, default_value_t = 1, value_parser = clap::value_parser!(u64).range(1..))]
    pub jobs: u64,
    /// Output path prefix: writes PREFIX.xyz and PREFIX.json (default: the input file name
    /// without .xyz, plus .relaxed / .saddle / .modes).
    #[arg(long, value_name = "PREFIX")]
    pub out: Option<PathBuf>,
    /// Print the JSON record instead of the readable summary.
    #[arg(long)]
    pub json: bool,
}

/// Parse a convergence set name for clap.
pub fn parse_convergence(s: &str) -> std::result::Result<crate::algo::common::Convergence, String> {
    crate::algo::common::Convergence::named(s)
        .ok_or_else(|| format!("unknown convergence set '{s}' (normal, tight, very-tight)"))
}

/// Everything a command needs to run an algorithm.
pub struct Setup {
    pub input: PathBuf,
    pub molecule: Molecule,
    pub system: System,
    pub engine: Arc<dyn Engine>,
    pub evaluator: Evaluator,
    pub frame: Frame,
    pub store: PathBuf,
}

impl Setup {
    /// Read the geometry, check charge/multiplicity, find the engine, open the store.
    pub fn new(input: &Path, c: &Common) -> Result<Setup> {
        let mut molecule = crate::xyz::read(input)?;
        let system = c.choice.system_of(&mut molecule, input)?;
        let engine = c.choice.find()?;
        let surface = molecule.is_model_surface();
        if engine.is_model() != surface {
            return Err(Error::invalid(format!(
                "{}: engine '{}' {} but the file {}",
                input.display(),
                engine.name(),
                if engine.is_model() {
                    "is a model surface (it takes pseudo-atoms X)"
                } else {
                    "is a real engine"
                },
                if surface {
                    "holds only pseudo-atoms X"
                } else {
                    "holds real atoms"
                }
            )));
        }
        if !surface {
            if let Some(i) = molecule.elements.iter().position(|e| e.is_pseudo()) {
                return Err(Error::invalid(format!(
                    "{}: atom {} is the pseudo-atom X, which only model surfaces accept",
                    input.display(),
                    i + 1
                )));
            }
        }
        let store = c.choice.store_dir();
        let jobs = usize::try_from(c.jobs).unwrap_or(1);
        let evaluator = Evaluator::local(engine.clone(), &store, jobs)?;
        Ok(Setup {
            input: input.to_path_buf(),
            molecule,
            system,
            engine,
            evaluator,
            frame: if surface {
                Frame::Surface
            } else {
                Frame::Molecule
            },
            store,
        })
    }

    pub fn is_surface(&self) -> bool {
        self.frame == Frame::Surface
    }

    /// Output prefix: --out, else the input path without `.xyz` plus `.suffix`.
    pub fn prefix(&self, c: &Common, suffix: &str) -> PathBuf {
        if let Some(p) = &c.out {
            return p.clone();
        }
        let stem = self
            .input
            .file_stem()
            .map(|s| s.to_string_lossy().into_owned())
            .unwrap_or_else(|| "result".into());
        self.input.with_file_name(format!("{stem}.{suffix}"))
    }

    /// Geometry rows in Å (surface units for a model surface).
    pub fn geometry_rows(&self, x: &DVector<f64>) -> Vec<[f64; 3]> {
        let scale = if self.is_surface() {
            1.0
        } else {
            ANGSTROM_PER_BOHR
        };
        (0..x.len() / 3)
            .map(|i| [x[3 * i] * scale, x[3 * i + 1] * scale, x[3 * i + 2] * scale])
            .collect()
    }

    pub fn energy_label(&self) -> &'static str {
        if self.is_surface() {
            "(surface units)"
        } else {
            "Eh"
        }
    }

    /// The start of every record: what was run on what.
    pub fn base_record(&self, command: &str) -> Map<String, Value> {
        let symbols: Vec<&str> = self.molecule.elements.iter().map(|e| e.symbol()).collect();
        let units = if self.is_surface() {
            json!({"energy": "surface units", "geometry": "surface units",
                   "frequencies": "cm-1 (nominal, unit masses)", "hessian_eigenvalues": "surface units"})
        } else {
            json!({"energy": "hartree", "geometry": "angstrom", "frequencies": "cm-1",
                   "reduced_masses": "u"})
        };
        let mut m = Map::new();
        m.insert("command".into(), json!(command));
        m.insert("input".into(), json!(self.input.display().to_string()));
        m.insert("engine".into(), json!(self.engine.name()));
        m.insert("engine_identity".into(), json!(self.engine.identity()));
        m.insert("symbols".into(), json!(symbols));
        m.insert("charge".into(), json!(self.system.charge()));
        m.insert("multiplicity".into(), json!(self.system.multiplicity()));
        m.insert("units".into(), units);
        m
    }
}

/// The fields every result has.
pub struct Outcome<'a> {
    pub converged: bool,
    pub reason: &'a str,
    pub energy: f64,
    pub x: &'a DVector<f64>,
    pub gradient_evaluations: usize,
    pub hessian_evaluations: usize,
    pub iterations: usize,
    pub stats: Stats,
}

/// Add the common result fields to a record.
pub fn add_outcome(rec: &mut Map<String, Value>, s: &Setup, o: &Outcome<'_>) {
    rec.insert("converged".into(), json!(o.converged));
    rec.insert("reason".into(), json!(o.reason));
    rec.insert("energy_hartree".into(), json!(o.energy));
    rec.insert("geometry".into(), json!(s.geometry_rows(o.x)));
    rec.insert("gradient_evaluations".into(), json!(o.gradient_evaluations));
    rec.insert("hessian_evaluations".into(), json!(o.hessian_evaluations));
    rec.insert("iterations".into(), json!(o.iterations));
    rec.insert("engine_runs".into(), json!(o.stats.engine_runs));
    rec.insert("store_hits".into(), json!(o.stats.store_hits));
    rec.insert("store".into(), json!(s.store.display().to_string()));
}

/// Add a harmonic analysis to a record.
pub fn add_modes(rec: &mut Map<String, Value>, s: &Setup, m: &Modes) {
    rec.insert("frequencies_cm1".into(), json!(m.frequencies_cm1));
    rec.insert("n_imaginary".into(), json!(m.n_imaginary));
    rec.insert("linear".into(), json!(m.linear));
    if s.is_surface() {
        rec.insert("hessian_eigenvalues".into(), json!(m.eigenvalues));
    } else {
        rec.insert("reduced_masses_amu".into(), json!(m.reduced_masses));
    }
    let modes: Vec<Vec<[f64; 3]>> = m
        .modes
        .iter()
        .map(|v| {
            (0..v.len() / 3)
                .map(|i| [v[3 * i], v[3 * i + 1], v[3 * i + 2]])
                .collect()
        })
        .collect();
    rec.insert("normal_modes".into(), json!(modes));
}

/// Readable lines for a harmonic analysis.
pub fn modes_text(s: &Setup, m: &Modes, threshold_cm1: f64) -> String {
    let mut t = String::new();
    if s.is_surface() {
        t.push_str(&format!(
            "Hessian eigenvalues (surface units): {}\n",
            m.eigenvalues
                .iter()
                .map(|v| format!("{v:.4}"))
                .collect::<Vec<_>>()
                .join(", ")
        ));
        t.push_str(&format!("negative eigenvalues: {}\n", m.n_imaginary));
        return t;
    }
    if m.frequencies_cm1.is_empty() {
        t.push_str("frequencies   none (no internal degrees of freedom)\n");
        return t;
    }
    t.push_str(&format!(
        "frequencies   cm-1 (imaginary shown as negative), {} removed as translations/rotations{}\n",
        m.n_external,
        if m.linear { ", linear" } else { "" }
    ));
    t.push_str(&format!(
        "   {:>4} {:>12} {:>16}\n",
        "mode", "cm-1", "reduced mass u"
    ));
    for (k, (f, mu)) in m.frequencies_cm1.iter().zip(&m.reduced_masses).enumerate() {
        t.push_str(&format!("   {:>4} {:>12.2} {:>16.4}\n", k + 1, f, mu));
    }
    t.push_str(&format!(
        "imaginary     {} (counting |ν| > {threshold_cm1} cm-1)\n",
        m.n_imaginary
    ));
    t
}

/// Readable header and geometry for an outcome.
pub fn outcome_text(s: &Setup, command: &str, o: &Outcome<'_>) -> String {
    let mut t = String::new();
    let status = match (command, o.converged) {
        ("modes", _) => "done",
        (_, true) => "converged",
        (_, false) => "NOT converged",
    };
    t.push_str(&format!("cairn {command}: {status}\n"));
    t.push_str(&format!("reason        {}\n", o.reason));
    t.push_str(&format!(
        "engine        {} ({})\n",
        s.engine.name(),
        s.engine.identity()
    ));
    t.push_str(&format!(
        "molecule      {}: {}, {} atom{}, charge {}, multiplicity {}\n",
        s.input.display(),
        s.molecule.formula(),
        s.molecule.len(),
        if s.molecule.len() == 1 { "" } else { "s" },
        s.system.charge(),
        s.system.multiplicity()
    ));
    if s.is_surface() {
        t.push_str(&format!("energy        {:.9} (surface units)\n", o.energy));
    } else {
        t.push_str(&format!(
            "energy        {:.10} Eh ({:.3} kcal/mol)\n",
            o.energy,
            o.energy * KCALMOL_PER_HARTREE
        ));
    }
    t.push_str(&format!(
        "work          {} steps; {} gradients, {} Hessians ({} engine runs, {} from the store {})\n",
        o.iterations,
        o.gradient_evaluations,
        o.hessian_evaluations,
        o.stats.engine_runs,
        o.stats.store_hits,
        s.store.display()
    ));
    t.push_str(&format!(
        "geometry      {}\n",
        if s.is_surface() {
            "surface units"
        } else {
            "Å"
        }
    ));
    for (e, r) in s.molecule.elements.iter().zip(s.geometry_rows(o.x)) {
        t.push_str(&format!(
            "   {:<2} {:>16.10} {:>16.10} {:>16.10}\n",
            e.symbol(),
            r[0],
            r[1],
            r[2]
        ));
    }
    t
}

/// Write PREFIX.xyz (geometry x) and PREFIX.json (the record); add the file names to the
/// record. Returns the record as pretty JSON text.
pub fn write_outputs(
    s: &Setup,
    prefix: &Path,
    x: &DVector<f64>,
    comment: &str,
    rec: &mut Map<String, Value>,
) -> Result<String> {
    let xyz_path = PathBuf::from(format!("{}.xyz", prefix.display()));
    let json_path = PathBuf::from(format!("{}.json", prefix.display()));
    let mut m = s.molecule.with_flat(x);
    m.comment = comment.to_string();
    crate::xyz::write(&xyz_path, &m)?;
    rec.insert("xyz_file".into(), json!(xyz_path.display().to_string()));
    rec.insert("json_file".into(), json!(json_path.display().to_string()));
    let mut text = serde_json::to_string_pretty(&Value::Object(rec.clone()))
        .map_err(|e| Error::invalid(format!("cannot encode the record as JSON: {e}")))?;
    text.push('\n');
    crate::xyz::write_atomic(&json_path, &text)?;
    Ok(text)
}

/// Print the record or the summary and return the exit status.
pub fn finish(json_out: bool, record: &str, summary: &str, ok: bool) -> i32 {
    if json_out {
        print!("{record}");
    } else {
        print!("{summary}");
    }
    if ok {
        0
    } else {
        EXIT_NOT_CONVERGED
    }
}
