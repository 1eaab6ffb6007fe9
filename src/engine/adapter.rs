//! Adapters as data: one YAML file per engine describes how to run it and read its results.
//!
//! The format is documented key by key in DEVELOPERS.md, section "Adapters". In short: an
//! adapter names an executable and an argument list (small minijinja templates, each rendered
//! into exactly one argv entry), input files written from templates, environment variables,
//! declared settings with defaults and allowed values, one run description per quantity
//! (extra arguments and files, and extraction rules with units), failure signatures and
//! remedies tried in order on retry. Unknown keys are errors with file and line.
//!
//! Lookup: an engine called `NAME` is the file `NAME.yaml` found first in the directories of
//! `CAIRN_ADAPTERS` (colon separated), then `./adapters`, then the `adapters/` directory of the
//! source tree Cairn was built from.

use super::extract::{self, Layout, Occurrence};
use super::process::{self, RunSpec, SpawnError};
use super::{Engine, EngineFailure, FailureKind, Job, Outcome, Settings, StagedRun};
use crate::error::{Error, Result};
use crate::eval::{Answer, Quantity};
use crate::molecule::Molecule;
use crate::units::{EnergyUnit, LengthUnit, ANGSTROM_PER_BOHR};
use minijinja::{AutoEscape, UndefinedBehavior, Value};
use nalgebra::{DMatrix, DVector, Matrix3};
use regex::Regex;
use serde::Deserialize;
use sha2::{Digest, Sha256};
use std::collections::{BTreeMap, HashMap};
use std::path::{Path, PathBuf};
use std::sync::Arc;
use std::time::Duration;

// ---------------------------------------------------------------------------------------------
// The file format (serde side). Every struct denies unknown keys.

/// A YAML scalar read as text (strings, numbers and booleans are all accepted).
#[derive(Debug, Clone, PartialEq)]
pub struct Scalar(pub String);

impl<'de> Deserialize<'de> for Scalar {
    fn deserialize<D: serde::Deserializer<'de>>(d: D) -> std::result::Result<Self, D::Error> {
        #[derive(Deserialize)]
        #[serde(untagged)]
        enum Any {
            S(String),
            I(i64),
            F(f64),
            B(bool),
        }
        Ok(Scalar(match Any::deserialize(d)? {
            Any::S(s) => s,
            Any::I(i) => i.to_string(),
            Any::F(f) => f.to_string(),
            Any::B(b) => b.to_string(),
        }))
    }
}

#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct AdapterFile {
    pub name: String,
    pub version: Scalar,
    #[serde(default)]
    pub description: String,
    /// Program name (looked up on PATH) or path; a template.
    pub executable: String,
    #[serde(default)]
    pub install_hint: Option<String>,
    #[serde(default)]
    pub timeout_seconds: Option<f64>,
    /// `must_be_zero` (default) or `ignored` (success is decided from failure signatures and
    /// complete, validated output only).
    #[serde(default)]
    pub exit_status: ExitPolicy,
    /// Where scratch directories go when `CAIRN_SCRATCH` is not set: `disk` (default, the
    /// system temporary directory) or `memory` (a RAM-backed file system, for engines whose
    /// files are small).
    #[serde(default)]
    pub scratch: ScratchPlace,
    #[serde(default)]
    pub settings: BTreeMap<String, SettingSpec>,
    #[serde(default)]
    pub environment: BTreeMap<String, String>,
    #[serde(default)]
    pub input_files: BTreeMap<String, String>,
    #[serde(default)]
    pub arguments: Vec<ArgItem>,
    #[serde(default)]
    pub evaluation_frame: Option<FrameSpec>,
    pub quantities: Quantities,
    #[serde(default)]
    pub failures: Vec<FailureSpec>,
    #[serde(default)]
    pub remedies: Vec<RemedySpec>,
}

#[derive(Debug, Clone, Copy, Default, PartialEq, Eq, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum ExitPolicy {
    #[default]
    MustBeZero,
    Ignored,
}

#[derive(Debug, Clone, Copy, Default, PartialEq, Eq, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum ScratchPlace {
    #[default]
    Disk,
    Memory,
}

#[derive(Debug, Clone, Copy, Default, PartialEq, Eq, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum SettingKind {
    #[default]
    Text,
    Number,
    Integer,
}

#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SettingSpec {
    pub default: Scalar,
    #[serde(default)]
    pub allowed: Option<Vec<Scalar>>,
    #[serde(default)]
    pub kind: SettingKind,
    #[serde(default)]
    pub description: String,
}

/// One argument: a template rendered into exactly one argv entry, or a group of them used only
/// when an expression is true.
#[derive(Debug, Clone, Deserialize)]
#[serde(untagged)]
pub enum ArgItem {
    One(String),
    When(CondArgs),
}

#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct CondArgs {
    pub when: String,
    pub args: Vec<String>,
}

/// Evaluate in a fixed rotated frame: coordinates are rotated by R = Rz(a)·Ry(b)·Rz(c) before
/// the run; gradient and Hessian are rotated back.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct FrameSpec {
    pub euler_zyz_degrees: [f64; 3],
    /// Expression; the rotation applies only when it is true (default: always).
    #[serde(default)]
    pub when: Option<String>,
}

#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Quantities {
    #[serde(default)]
    pub energy: Option<RunSpecFile>,
    #[serde(default)]
    pub gradient: Option<RunSpecFile>,
    #[serde(default)]
    pub hessian: Option<RunSpecFile>,
}

#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RunSpecFile {
    #[serde(default)]
    pub arguments: Vec<ArgItem>,
    #[serde(default)]
    pub input_files: BTreeMap<String, String>,
    pub energy: Rule,
    #[serde(default)]
    pub gradient: Option<Rule>,
    #[serde(default)]
    pub hessian: Option<Rule>,
}

/// Where a value is read from and how.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Rule {
    /// `stdout`, `stderr`, or a file name in the scratch directory (a template).
    pub from: String,
    pub unit: String,
    #[serde(default)]
    pub regex: Option<String>,
    #[serde(default)]
    pub occurrence: Option<Occurrence>,
    #[serde(default)]
    pub block: Option<BlockRule>,
    #[serde(default)]
    pub numbers: Option<NumbersRule>,
}

#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct BlockRule {
    #[serde(default)]
    pub after: Option<String>,
    /// Lines to skip after the marker (template, e.g. "{{ natoms + 1 }}").
    #[serde(default)]
    pub skip: Option<Scalar>,
    /// Rows (template; default natoms).
    #[serde(default)]
    pub rows: Option<Scalar>,
    /// 0-based field indices taken from each row.
    pub columns: Vec<usize>,
}

#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct NumbersRule {
    #[serde(default)]
    pub after: Option<String>,
    #[serde(default)]
    pub skip: Option<Scalar>,
    /// Matrices only: `full` (default), `lower_triangle`, `upper_triangle`.
    #[serde(default)]
    pub layout: Option<Layout>,
}

#[derive(Debug, Clone, Copy, Default, PartialEq, Eq, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum FailureClass {
    /// Worth retrying, with the next remedy.
    #[default]
    Retryable,
    /// The request cannot work (becomes `FailureKind::BadInput`, not retried).
    BadInput,
    /// The engine installation is broken (becomes `FailureKind::MissingExecutable`).
    Installation,
}

#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct FailureSpec {
    pub name: String,
    pub pattern: String,
    /// Where to look: any of `stdout`, `stderr` or file names (default: stdout and stderr).
    #[serde(default)]
    pub look_in: Option<Vec<String>>,
    #[serde(default)]
    pub class: FailureClass,
    /// Added to the failure message: what it means, what to do.
    #[serde(default)]
    pub advice: String,
}

#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RemedySpec {
    pub name: String,
    pub set: BTreeMap<String, Scalar>,
}

// ---------------------------------------------------------------------------------------------
// Lookup.

/// Directories searched for adapter files, in order.
pub fn search_dirs() -> Vec<PathBuf> {
    let mut dirs = vec![];
    if let Some(v) = std::env::var_os("CAIRN_ADAPTERS") {
        dirs.extend(std::env::split_paths(&v).filter(|p| !p.as_os_str().is_empty()));
    }
    dirs.push(PathBuf::from("adapters"));
    dirs.push(Path::new(env!("CARGO_MANIFEST_DIR")).join("adapters"));
    dirs
}

/// The adapter file for engine `name`, first one found in [`search_dirs`].
pub fn find_adapter_file(name: &str) -> Option<PathBuf> {
    if name.is_empty() || name.contains('/') || name.starts_with('.') {
        return None;
    }
    search_dirs()
        .into_iter()
        .map(|d| d.join(format!("{name}.yaml")))
        .find(|p| p.is_file())
}

/// One adapter file seen by [`list_adapters`].
#[derive(Debug, Clone)]
pub struct Listed {
    pub name: String,
    pub path: PathBuf,
    /// The parsed adapter, or why it does not load.
    pub adapter: std::result::Result<Arc<Adapter>, String>,
    /// False when an earlier directory has an adapter of the same name.
    pub active: bool,
}

/// Every `*.yaml` in the search directories, in search order.
pub fn list_adapters() -> Vec<Listed> {
    let mut out: Vec<Listed> = vec![];
    let mut seen_dirs: Vec<PathBuf> = vec![];
    for d in search_dirs() {
        let canon = d.canonicalize().unwrap_or(d.clone());
        if seen_dirs.contains(&canon) {
            continue;
        }
        seen_dirs.push(canon);
        let Ok(rd) = std::fs::read_dir(&d) else {
            continue;
        };
        let mut files: Vec<PathBuf> = rd
            .filter_map(|e| e.ok().map(|e| e.path()))
            .filter(|p| p.extension().is_some_and(|x| x == "yaml"))
            .collect();
        files.sort();
        for p in files {
            let name = p
                .file_stem()
                .map(|s| s.to_string_lossy().into_owned())
                .unwrap_or_default();
            let active = !out.iter().any(|l| l.name == name);
            let adapter = Adapter::load(&p).map(Arc::new).map_err(|e| e.to_string());
            out.push(Listed {
                name,
                path: p,
                adapter,
                active,
            });
        }
    }
    out
}

/// Load the adapter called `name` and apply `settings` (see [`super::find_engine`]).
pub fn load_engine(name: &str, settings: &Settings) -> Result<Arc<dyn Engine>> {
    load_engine_limited(name, settings, None)
}

/// [`load_engine`] with the adapter's time limit per run replaced by `timeout` when given
/// (a study's `timeout` per stage); the limit does not change results, so it is not part of
/// the engine's identity.
pub fn load_engine_limited(
    name: &str,
    settings: &Settings,
    timeout: Option<std::time::Duration>,
) -> Result<Arc<dyn Engine>> {
    let Some(path) = find_adapter_file(name) else {
        let dirs: Vec<String> = search_dirs()
            .iter()
            .map(|d| d.display().to_string())
            .collect();
        return Err(Error::invalid(format!(
            "no engine called '{name}': no file {name}.yaml in {} (set CAIRN_ADAPTERS to add \
             a directory; `cairn engines` lists what is available)",
            dirs.join(", ")
        )));
    };
    let adapter = Adapter::load(&path)?;
    let engine = AdapterEngine::new(Arc::new(adapter), settings)?;
    Ok(Arc::new(match timeout {
        Some(t) => engine.with_timeout(Some(t)),
        None => engine,
    }))
}

// ---------------------------------------------------------------------------------------------
// A loaded, checked adapter.

/// A parsed and checked adapter file.
#[derive(Debug, Clone)]
pub struct Adapter {
    pub file: AdapterFile,
    pub path: PathBuf,
    /// sha256 of the file content (hex).
    pub content_hash: String,
}

fn template_env() -> minijinja::Environment<'static> {
    let mut env = minijinja::Environment::new();
    env.set_undefined_behavior(UndefinedBehavior::Strict);
    env.set_auto_escape_callback(|_| AutoEscape::None);
    env.set_keep_trailing_newline(true);
    env
}

/// The template environment runs use: a template's source is its name, and the loader hands
/// the name back as the source, so each template is compiled once per process and reused by
/// every run (rendering is then a walk over the compiled template).
fn run_templates() -> &'static minijinja::Environment<'static> {
    static ENV: std::sync::OnceLock<minijinja::Environment<'static>> = std::sync::OnceLock::new();
    ENV.get_or_init(|| {
        let mut env = template_env();
        env.set_loader(|source| Ok(Some(source.to_string())));
        env
    })
}

/// A regular expression compiled once per process (the adapter's patterns are applied to every
/// run's output; compiling them each time cost more than matching).
fn cached_regex(pattern: &str) -> std::result::Result<Regex, regex::Error> {
    static CACHE: std::sync::OnceLock<std::sync::Mutex<HashMap<String, Regex>>> =
        std::sync::OnceLock::new();
    let cache = CACHE.get_or_init(Default::default);
    if let Some(re) = cache.lock().unwrap_or_else(|e| e.into_inner()).get(pattern) {
        return Ok(re.clone());
    }
    let re = Regex::new(pattern)?;
    cache
        .lock()
        .unwrap_or_else(|e| e.into_inner())
        .insert(pattern.to_string(), re.clone());
    Ok(re)
}

impl Adapter {
    /// Read and check an adapter file. Errors name the file and, where known, the line.
    pub fn load(path: &Path) -> Result<Adapter> {
        let text = std::fs::read_to_string(path)
            .map_err(|e| Error::io(format!("reading adapter file {}", path.display()), e))?;
        Adapter::from_text(&text, path)
    }

    /// Parse adapter text; `path` is used for messages, for `adapter_dir` and for the name check.
    pub fn from_text(text: &str, path: &Path) -> Result<Adapter> {
        let shown = path.display().to_string();
        let file: AdapterFile = serde_yaml::from_str(text).map_err(|e| {
            let line = e.location().map(|l| l.line()).unwrap_or(0);
            let msg = e.to_string();
            // serde_yaml appends " at line L column C"; the line is already in the prefix.
            let msg = match msg.find(" at line ") {
                Some(i) => msg[..i].to_string(),
                None => msg,
            };
            Error::parse(&shown, line, msg)
        })?;
        let content_hash = hex::encode(Sha256::digest(text.as_bytes()));
        let a = Adapter {
            file,
            path: path.to_path_buf(),
            content_hash,
        };
        a.check().map_err(|m| {
            let line = find_line(text, &m.0);
            Error::parse(&shown, line, m.1)
        })?;
        Ok(a)
    }

    /// Static checks: name matches the file, settings defaults allowed, regexes compile,
    /// templates parse, quantities have the rules they need. Error: (key to locate, message).
    fn check(&self) -> std::result::Result<(), (String, String)> {
        let f = &self.file;
        if let Some(stem) = self.path.file_stem().and_then(|s| s.to_str()) {
            if stem != f.name {
                return Err((
                    "name:".into(),
                    format!(
                        "adapter name '{}' must match the file name '{stem}.yaml'",
                        f.name
                    ),
                ));
            }
        }
        for (k, s) in &f.settings {
            if let Err(m) = check_setting_value(k, s, &s.default.0) {
                return Err((format!("{k}:\ndefault:"), format!("default of setting {m}")));
            }
        }
        for (i, r) in f.remedies.iter().enumerate() {
            for (k, v) in &r.set {
                let Some(s) = f.settings.get(k) else {
                    return Err((
                        r.name.clone(),
                        format!(
                            "remedy {} ('{}') sets '{k}', which is not a declared setting",
                            i + 1,
                            r.name
                        ),
                    ));
                };
                check_setting_value(k, s, &v.0).map_err(|m| (r.name.clone(), m))?;
            }
        }
        for fs in &f.failures {
            Regex::new(&fs.pattern).map_err(|e| {
                (
                    fs.name.clone(),
                    format!("failure '{}': bad pattern: {e}", fs.name),
                )
            })?;
        }
        if f.quantities.gradient.is_none()
            && f.quantities.hessian.is_none()
            && f.quantities.energy.is_none()
        {
            return Err((
                "quantities:".into(),
                "quantities: describe at least one of energy, gradient, hessian".into(),
            ));
        }
        for (qname, q, needs) in [
            ("energy", &f.quantities.energy, None),
            ("gradient", &f.quantities.gradient, Some("gradient")),
            ("hessian", &f.quantities.hessian, Some("hessian")),
        ] {
            let Some(q) = q else { continue };
            let mut rules = vec![("energy", &q.energy)];
            if let Some(g) = &q.gradient {
                rules.push(("gradient", g));
            }
            if let Some(h) = &q.hessian {
                rules.push(("hessian", h));
            }
            if needs == Some("gradient") && q.gradient.is_none() {
                return Err((
                    format!("{qname}:"),
                    "quantities.gradient needs a 'gradient' rule".into(),
                ));
            }
            if needs == Some("hessian") && q.hessian.is_none() {
                return Err((
                    format!("{qname}:"),
                    "quantities.hessian needs a 'hessian' rule".into(),
                ));
            }
            for (what, r) in rules {
                let power = match what {
                    "energy" => 0,
                    "gradient" => 1,
                    _ => 2,
                };
                let loc = format!("quantities.{qname}.{what}");
                unit_factor(&r.unit, power).map_err(|m| (r.unit.clone(), format!("{loc}: {m}")))?;
                let kinds = [r.regex.is_some(), r.block.is_some(), r.numbers.is_some()];
                if kinds.iter().filter(|&&b| b).count() != 1 {
                    return Err((
                        r.from.clone(),
                        format!("{loc}: give exactly one of regex, block, numbers"),
                    ));
                }
                if what == "energy" && r.regex.is_none() {
                    return Err((
                        r.from.clone(),
                        format!("{loc}: an energy is read with 'regex'"),
                    ));
                }
                if what != "energy" && r.regex.is_some() {
                    return Err((
                        r.from.clone(),
                        format!("{loc}: a {what} is read with 'block' or 'numbers'"),
                    ));
                }
                for re in [
                    r.regex.as_deref(),
                    r.block.as_ref().and_then(|b| b.after.as_deref()),
                    r.numbers.as_ref().and_then(|b| b.after.as_deref()),
                ]
                .into_iter()
                .flatten()
                {
                    Regex::new(re)
                        .map_err(|e| (re.to_string(), format!("{loc}: bad regex: {e}")))?;
                }
            }
        }
        // Dry run: render every template for a small sample job, so typos in templates and
        // undefined variables show up when the adapter is loaded, not in the middle of a study.
        let defaults: BTreeMap<String, String> = f
            .settings
            .iter()
            .map(|(k, s)| (k.clone(), s.default.0.clone()))
            .collect();
        let sample = Job {
            elements: vec![crate::elements::Element(1), crate::elements::Element(1)],
            coords: DVector::from_vec(vec![0.0, 0.0, 0.0, 0.0, 0.0, 1.4]),
            charge: 0,
            multiplicity: 1,
            quantity: Quantity::Gradient,
            threads: 1,
        };
        for q in [Quantity::Energy, Quantity::Gradient, Quantity::Hessian] {
            if self.run_for(q).is_none() {
                continue;
            }
            let mut job = sample.clone();
            job.quantity = q;
            self.prepare(&job, &defaults, None)
                .map_err(|m| (String::new(), m))?;
        }
        Ok(())
    }

    /// The run description used for quantity `q` (energy falls back to the gradient run, then
    /// the Hessian run).
    pub fn run_for(&self, q: Quantity) -> Option<&RunSpecFile> {
        let qs = &self.file.quantities;
        match q {
            Quantity::Energy => qs
                .energy
                .as_ref()
                .or(qs.gradient.as_ref())
                .or(qs.hessian.as_ref()),
            Quantity::Gradient => qs.gradient.as_ref(),
            Quantity::Hessian => qs.hessian.as_ref(),
        }
    }

    /// Where this adapter's runs make their scratch directories: `CAIRN_SCRATCH` if set; else,
    /// with `scratch: memory`, a RAM-backed directory when there is one
    /// ([`process::memory_scratch_root`]); else `None`, the system temporary directory.
    pub fn scratch_root(&self) -> Option<PathBuf> {
        std::env::var_os("CAIRN_SCRATCH")
            .map(PathBuf::from)
            .or_else(|| match self.file.scratch {
                ScratchPlace::Memory => process::memory_scratch_root(),
                ScratchPlace::Disk => None,
            })
    }

    /// The executable as it will be looked up (the `executable` template rendered with
    /// `adapter_dir`, `name` and `version` only), and where it was found, if anywhere.
    pub fn executable(&self) -> (String, Option<PathBuf>) {
        let ctx = minijinja::context! {
            adapter_dir => self.adapter_dir(),
            name => self.file.name.as_str(),
            version => self.file.version.0.as_str(),
        };
        match template_env().render_str(&self.file.executable, ctx) {
            Ok(p) => {
                let found = process::which(&p);
                (p, found)
            }
            Err(_) => (self.file.executable.clone(), None),
        }
    }

    fn adapter_dir(&self) -> String {
        let dir = self.path.parent().unwrap_or(Path::new("."));
        let abs = dir.canonicalize().unwrap_or_else(|_| dir.to_path_buf());
        abs.display().to_string()
    }

    /// The rotation to evaluate in, if any applies under `settings`.
    fn rotation(
        &self,
        env: &minijinja::Environment<'_>,
        ctx: &Value,
    ) -> std::result::Result<Option<Matrix3<f64>>, String> {
        let Some(fr) = &self.file.evaluation_frame else {
            return Ok(None);
        };
        if let Some(w) = &fr.when {
            if !eval_condition(env, w, ctx).map_err(|e| format!("evaluation_frame.when: {e}"))? {
                return Ok(None);
            }
        }
        let [a, b, c] = fr.euler_zyz_degrees.map(f64::to_radians);
        Ok(Some(rot_z(a) * rot_y(b) * rot_z(c)))
    }

    /// Everything needed to run `job`: command, files, environment, rules, rotation.
    fn prepare(
        &self,
        job: &Job,
        settings: &BTreeMap<String, String>,
        scratch_root: Option<&Path>,
    ) -> std::result::Result<Prepared, String> {
        let f = &self.file;
        let run = self.run_for(job.quantity).ok_or_else(|| {
            format!(
                "adapter '{}' cannot compute a {}",
                f.name,
                job.quantity.as_str()
            )
        })?;
        let env = run_templates();
        let n = job.elements.len();
        if job.coords.len() != 3 * n {
            return Err(format!(
                "{} coordinates for {n} atoms (expected {})",
                job.coords.len(),
                3 * n
            ));
        }
        // Settings first (for the frame condition), then the geometry.
        let mut base: BTreeMap<String, Value> = BTreeMap::new();
        for (k, v) in settings {
            base.insert(k.clone(), setting_value(f.settings.get(k), v));
        }
        base.insert("settings".into(), Value::from_serialize(settings));
        let rotation = self.rotation(env, &Value::from_serialize(&base))?;
        let coords = match &rotation {
            Some(r) => rotate_flat(&job.coords, r),
            None => job.coords.clone(),
        };
        let symbols: Vec<&str> = job.elements.iter().map(|e| e.symbol()).collect();
        let numbers: Vec<u32> = job.elements.iter().map(|e| e.z()).collect();
        let ang: Vec<[f64; 3]> = (0..n)
            .map(|i| {
                [
                    coords[3 * i] * ANGSTROM_PER_BOHR,
                    coords[3 * i + 1] * ANGSTROM_PER_BOHR,
                    coords[3 * i + 2] * ANGSTROM_PER_BOHR,
                ]
            })
            .collect();
        let bohr: Vec<[f64; 3]> = (0..n)
            .map(|i| [coords[3 * i], coords[3 * i + 1], coords[3 * i + 2]])
            .collect();
        let mut xyz = format!("{n}\ncairn {} evaluation\n", job.quantity.as_str());
        for (s, c) in symbols.iter().zip(&ang) {
            xyz.push_str(&format!(
                "{s:<3} {:22.14} {:22.14} {:22.14}\n",
                c[0], c[1], c[2]
            ));
        }
        let atoms: Vec<BTreeMap<&str, Value>> = (0..n)
            .map(|i| {
                BTreeMap::from([
                    ("symbol", Value::from(symbols[i])),
                    ("number", Value::from(numbers[i])),
                    ("x", Value::from(ang[i][0])),
                    ("y", Value::from(ang[i][1])),
                    ("z", Value::from(ang[i][2])),
                ])
            })
            .collect();
        let unpaired = i64::from(job.multiplicity) - 1;
        let mut ctx = base;
        ctx.insert("name".into(), Value::from(f.name.as_str()));
        ctx.insert("version".into(), Value::from(f.version.0.as_str()));
        ctx.insert("adapter_dir".into(), Value::from(self.adapter_dir()));
        ctx.insert("natoms".into(), Value::from(n));
        ctx.insert("charge".into(), Value::from(job.charge));
        ctx.insert("multiplicity".into(), Value::from(job.multiplicity));
        ctx.insert("unpaired".into(), Value::from(unpaired));
        ctx.insert("threads".into(), Value::from(job.threads.max(1)));
        ctx.insert("quantity".into(), Value::from(job.quantity.as_str()));
        ctx.insert("elements".into(), Value::from_serialize(&symbols));
        ctx.insert("atomic_numbers".into(), Value::from_serialize(&numbers));
        ctx.insert("coords_angstrom".into(), Value::from_serialize(&ang));
        ctx.insert("coords_bohr".into(), Value::from_serialize(&bohr));
        ctx.insert("atoms".into(), Value::from_serialize(&atoms));
        ctx.insert("xyz".into(), Value::from(xyz));
        let ctx = Value::from_serialize(&ctx);

        let render = |what: &str, t: &str| -> std::result::Result<String, String> {
            env.get_template(t)
                .and_then(|tpl| tpl.render(&ctx))
                .map_err(|e| format!("{what}: template '{t}': {}", describe(&e)))
        };
        let program = render("executable", &f.executable)?;
        let mut args = vec![];
        for (list, label) in [
            (&f.arguments, "arguments"),
            (&run.arguments, "quantity arguments"),
        ] {
            for item in list {
                match item {
                    ArgItem::One(t) => args.push(render(label, t)?),
                    ArgItem::When(c) => {
                        if eval_condition(env, &c.when, &ctx)
                            .map_err(|e| format!("{label}: when '{}': {e}", c.when))?
                        {
                            for t in &c.args {
                                args.push(render(label, t)?);
                            }
                        }
                    }
                }
            }
        }
        let mut files = vec![];
        for (name, t) in f.input_files.iter().chain(run.input_files.iter()) {
            files.push((
                render("input file name", name)?,
                render(&format!("input file {name}"), t)?,
            ));
        }
        let mut envs = BTreeMap::new();
        for (k, t) in &f.environment {
            envs.insert(k.clone(), render(&format!("environment {k}"), t)?);
        }
        let mut rules = vec![];
        for (target, r) in [
            (Target::Energy, Some(&run.energy)),
            (Target::Gradient, run.gradient.as_ref()),
            (Target::Hessian, run.hessian.as_ref()),
        ] {
            let Some(r) = r else { continue };
            let from = render("from", &r.from)?;
            let count = |s: &Option<Scalar>,
                         default: usize,
                         what: &str|
             -> std::result::Result<usize, String> {
                match s {
                    None => Ok(default),
                    Some(t) => {
                        let v = render(what, &t.0)?;
                        v.trim().parse::<usize>().map_err(|_| {
                            format!("{what}: '{}' rendered to '{v}', not a count", t.0)
                        })
                    }
                }
            };
            let how = if let Some(re) = &r.regex {
                How::Regex(
                    cached_regex(re).map_err(|e| e.to_string())?,
                    r.occurrence.unwrap_or(Occurrence::Last),
                )
            } else if let Some(b) = &r.block {
                How::Block {
                    after: b
                        .after
                        .as_deref()
                        .map(cached_regex)
                        .transpose()
                        .map_err(|e| e.to_string())?,
                    skip: count(&b.skip, 0, "block.skip")?,
                    rows: count(&b.rows, n, "block.rows")?,
                    columns: b.columns.clone(),
                }
            } else if let Some(nr) = &r.numbers {
                How::Numbers {
                    after: nr
                        .after
                        .as_deref()
                        .map(cached_regex)
                        .transpose()
                        .map_err(|e| e.to_string())?,
                    skip: count(&nr.skip, 0, "numbers.skip")?,
                    layout: nr.layout.unwrap_or(Layout::Full),
                }
            } else {
                return Err("extraction rule without regex, block or numbers".into());
            };
            let power = match target {
                Target::Energy => 0,
                Target::Gradient => 1,
                Target::Hessian => 2,
            };
            rules.push(Extraction {
                target,
                from,
                how,
                factor: unit_factor(&r.unit, power)?,
            });
        }
        let timeout = f
            .timeout_seconds
            .filter(|s| s.is_finite() && *s > 0.0)
            .map(Duration::from_secs_f64);
        let spec = RunSpec {
            program,
            args,
            env: envs,
            files,
            timeout,
            grace: Duration::from_secs(2),
            scratch_root: scratch_root.map(Path::to_path_buf),
            install_hint: f.install_hint.clone(),
        };
        Ok(Prepared {
            spec,
            rules,
            rotation,
        })
    }
}

/// Line (1-based) of a key for messages: `needle` is one or more fragments separated by `\n`;
/// each is searched from the line where the previous one was found. 0 when not found.
fn find_line(text: &str, needle: &str) -> usize {
    let lines: Vec<&str> = text.lines().collect();
    let mut at = 0;
    let mut found = false;
    for part in needle.split('\n').map(str::trim).filter(|p| !p.is_empty()) {
        match lines.iter().skip(at).position(|l| l.contains(part)) {
            Some(i) => {
                at += i;
                found = true;
            }
            None => return 0,
        }
    }
    if found {
        at + 1
    } else {
        0
    }
}

fn describe(e: &minijinja::Error) -> String {
    let mut s = e.kind().to_string();
    if let Some(d) = e.detail() {
        s.push_str(": ");
        s.push_str(d);
    }
    s
}

fn eval_condition(
    env: &minijinja::Environment<'_>,
    expr: &str,
    ctx: &Value,
) -> std::result::Result<bool, String> {
    let e = env.compile_expression(expr).map_err(|e| describe(&e))?;
    let v = e.eval(ctx).map_err(|e| describe(&e))?;
    Ok(v.is_true())
}

/// A setting as a template value: numbers become numbers (so `accuracy * 10` works).
fn setting_value(spec: Option<&SettingSpec>, v: &str) -> Value {
    match spec.map(|s| s.kind) {
        Some(SettingKind::Integer) => v.parse::<i64>().map(Value::from).unwrap_or(Value::from(v)),
        Some(SettingKind::Number) => v.parse::<f64>().map(Value::from).unwrap_or(Value::from(v)),
        _ => Value::from(v),
    }
}

/// Check a setting value; returns the canonical text (numbers normalised) or a message.
fn check_setting_value(key: &str, s: &SettingSpec, v: &str) -> std::result::Result<String, String> {
    let canon = match s.kind {
        SettingKind::Text => v.to_string(),
        SettingKind::Number => match v.trim().parse::<f64>() {
            Ok(x) if x.is_finite() => x.to_string(),
            _ => return Err(format!("'{key}' must be a number, got '{v}'")),
        },
        SettingKind::Integer => match v.trim().parse::<i64>() {
            Ok(x) => x.to_string(),
            _ => return Err(format!("'{key}' must be an integer, got '{v}'")),
        },
    };
    if let Some(allowed) = &s.allowed {
        let ok = allowed.iter().any(|a| match s.kind {
            SettingKind::Text => a.0 == canon,
            _ => a.0.trim().parse::<f64>().ok() == canon.parse::<f64>().ok(),
        });
        if !ok {
            let list: Vec<&str> = allowed.iter().map(|a| a.0.as_str()).collect();
            return Err(format!(
                "'{key}' must be one of {}, got '{v}'",
                list.join(", ")
            ));
        }
    }
    Ok(canon)
}

/// Factor that converts values in `unit` to atomic units (Eh / bohr^power).
///
/// `unit` is an energy unit (`hartree` or `eh`, `kcal/mol`, `kj/mol`, `ev`) followed, for
/// gradients, by `/bohr` or `/angstrom`, and for Hessians by `/bohr^2` or `/angstrom^2`.
pub fn unit_factor(unit: &str, power: i32) -> std::result::Result<f64, String> {
    let u = unit.trim().to_ascii_lowercase();
    let energies = [
        ("hartree", EnergyUnit::Hartree),
        ("eh", EnergyUnit::Hartree),
        ("kcal/mol", EnergyUnit::KcalMol),
        ("kj/mol", EnergyUnit::KjMol),
        ("ev", EnergyUnit::Ev),
    ];
    let want = match power {
        0 => "an energy unit (hartree, kcal/mol, kj/mol, ev)",
        1 => "a gradient unit (e.g. hartree/bohr, kcal/mol/angstrom)",
        _ => "a Hessian unit (e.g. hartree/bohr^2, ev/angstrom^2)",
    };
    for (name, e) in energies {
        let Some(rest) = u.strip_prefix(name) else {
            continue;
        };
        let (len, p) = match rest {
            "" => (LengthUnit::Bohr, 0),
            "/bohr" => (LengthUnit::Bohr, 1),
            "/angstrom" => (LengthUnit::Angstrom, 1),
            "/bohr^2" | "/bohr2" => (LengthUnit::Bohr, 2),
            "/angstrom^2" | "/angstrom2" => (LengthUnit::Angstrom, 2),
            _ => continue,
        };
        if p != power {
            return Err(format!("unit '{unit}' is not {want}"));
        }
        return Ok(len.per_bohr().powi(p) / e.per_hartree());
    }
    Err(format!("unknown unit '{unit}'; expected {want}"))
}

fn rot_z(a: f64) -> Matrix3<f64> {
    let (s, c) = a.sin_cos();
    Matrix3::new(c, -s, 0.0, s, c, 0.0, 0.0, 0.0, 1.0)
}

fn rot_y(a: f64) -> Matrix3<f64> {
    let (s, c) = a.sin_cos();
    Matrix3::new(c, 0.0, s, 0.0, 1.0, 0.0, -s, 0.0, c)
}

fn rotate_flat(x: &DVector<f64>, r: &Matrix3<f64>) -> DVector<f64> {
    let mut out = x.clone();
    for i in 0..x.len() / 3 {
        let v = r * nalgebra::Vector3::new(x[3 * i], x[3 * i + 1], x[3 * i + 2]);
        out[3 * i] = v[0];
        out[3 * i + 1] = v[1];
        out[3 * i + 2] = v[2];
    }
    out
}

fn block_rotation(r: &Matrix3<f64>, n: usize) -> DMatrix<f64> {
    let mut b = DMatrix::zeros(3 * n, 3 * n);
    for a in 0..n {
        for i in 0..3 {
            for j in 0..3 {
                b[(3 * a + i, 3 * a + j)] = r[(i, j)];
            }
        }
    }
    b
}

#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Target {
    Energy,
    Gradient,
    Hessian,
}

#[derive(Debug)]
enum How {
    Regex(Regex, Occurrence),
    Block {
        after: Option<Regex>,
        skip: usize,
        rows: usize,
        columns: Vec<usize>,
    },
    Numbers {
        after: Option<Regex>,
        skip: usize,
        layout: Layout,
    },
}

#[derive(Debug)]
struct Extraction {
    target: Target,
    from: String,
    how: How,
    factor: f64,
}

#[derive(Debug)]
struct Prepared {
    spec: RunSpec,
    rules: Vec<Extraction>,
    rotation: Option<Matrix3<f64>>,
}

// ---------------------------------------------------------------------------------------------
// The engine.

/// An engine run through an adapter file, with its effective settings.
#[derive(Debug, Clone)]
pub struct AdapterEngine {
    adapter: Arc<Adapter>,
    /// Effective settings: every declared setting, defaults filled in, values canonical.
    settings: BTreeMap<String, String>,
    scratch_root: Option<PathBuf>,
    /// Time limit override (`Some(None)`: none at all).
    timeout: Option<Option<Duration>>,
}

impl AdapterEngine {
    /// Apply `settings` (unknown keys and disallowed values are errors). The scratch root is
    /// `CAIRN_SCRATCH` if set; else, for an adapter with `scratch: memory`, a RAM-backed
    /// directory when there is one ([`process::memory_scratch_root`]); else the system temporary
    /// directory.
    pub fn new(adapter: Arc<Adapter>, settings: &Settings) -> Result<AdapterEngine> {
        let f = &adapter.file;
        let shown = adapter.path.display();
        let mut eff = BTreeMap::new();
        for (k, s) in &f.settings {
            eff.insert(k.clone(), s.default.0.clone());
        }
        for (k, v) in settings {
            let Some(spec) = f.settings.get(k) else {
                let known: Vec<&str> = f.settings.keys().map(String::as_str).collect();
                return Err(Error::invalid(format!(
                    "engine '{}' ({shown}) has no setting '{k}'; its settings are: {}",
                    f.name,
                    if known.is_empty() {
                        "none".to_string()
                    } else {
                        known.join(", ")
                    }
                )));
            };
            let canon = check_setting_value(k, spec, v)
                .map_err(|m| Error::invalid(format!("engine '{}' ({shown}): {m}", f.name)))?;
            eff.insert(k.clone(), canon);
        }
        for (k, v) in eff.iter_mut() {
            if let Some(spec) = f.settings.get(k) {
                if let Ok(c) = check_setting_value(k, spec, v) {
                    *v = c;
                }
            }
        }
        let scratch_root = adapter.scratch_root();
        Ok(AdapterEngine {
            adapter,
            settings: eff,
            scratch_root,
            timeout: None,
        })
    }

    /// Override the adapter's `timeout_seconds` (`None`: no limit).
    pub fn with_timeout(mut self, limit: Option<Duration>) -> Self {
        self.timeout = Some(limit);
        self
    }

    /// Make scratch directories under `root` instead.
    pub fn with_scratch_root(mut self, root: impl Into<PathBuf>) -> Self {
        self.scratch_root = Some(root.into());
        self
    }

    pub fn adapter(&self) -> &Adapter {
        &self.adapter
    }

    /// The effective settings (defaults filled in).
    pub fn settings(&self) -> &BTreeMap<String, String> {
        &self.settings
    }

    /// Settings with remedies 1..=attempt applied in order (attempts beyond the list use all).
    fn settings_for_attempt(&self, attempt: usize) -> (BTreeMap<String, String>, Vec<String>) {
        let mut s = self.settings.clone();
        let mut applied = vec![];
        for r in self.adapter.file.remedies.iter().take(attempt) {
            for (k, v) in &r.set {
                let canon = self
                    .adapter
                    .file
                    .settings
                    .get(k)
                    .and_then(|spec| check_setting_value(k, spec, &v.0).ok())
                    .unwrap_or_else(|| v.0.clone());
                s.insert(k.clone(), canon);
            }
            applied.push(r.name.clone());
        }
        (s, applied)
    }

    fn fail(&self, kind: FailureKind, message: String, output: Option<PathBuf>) -> EngineFailure {
        EngineFailure {
            kind,
            message: format!("engine '{}': {message}", self.adapter.file.name),
            output,
        }
    }
}

impl Engine for AdapterEngine {
    fn name(&self) -> &str {
        &self.adapter.file.name
    }

    fn identity(&self) -> String {
        let f = &self.adapter.file;
        let settings: Vec<String> = self
            .settings
            .iter()
            .map(|(k, v)| format!("{k}={v}"))
            .collect();
        format!(
            "adapter:{}:{}:sha256={}:{}",
            f.name,
            f.version.0,
            &self.adapter.content_hash,
            settings.join(";")
        )
    }

    fn evaluate(&self, job: &Job, attempt: usize) -> std::result::Result<Outcome, EngineFailure> {
        let mut run = self.stage_run(job, attempt)?;
        let fin = run.launch();
        self.finish_run(job, run, fin)
    }

    fn stage(
        self: Arc<Self>,
        job: Job,
        attempt: usize,
    ) -> std::result::Result<Box<dyn StagedRun>, EngineFailure> {
        let run = self.stage_run(&job, attempt)?;
        Ok(Box::new(AdapterRun {
            engine: self,
            job,
            run,
            fin: None,
        }))
    }
}

/// An adapter run between its phases: prepared (inputs written), then finished.
struct Staging {
    prepared: Prepared,
    remedies: Vec<String>,
    staged: Option<process::Staged>,
}

impl Staging {
    fn launch(&mut self) -> std::result::Result<process::Finished, SpawnError> {
        match self.staged.take() {
            Some(st) => process::launch(&self.prepared.spec, st),
            None => Err(SpawnError::Other(
                "the run was started twice; this is a bug in Cairn".into(),
                None,
            )),
        }
    }
}

/// [`AdapterEngine::stage`]'s phases.
struct AdapterRun {
    engine: Arc<AdapterEngine>,
    job: Job,
    run: Staging,
    fin: Option<std::result::Result<process::Finished, SpawnError>>,
}

impl StagedRun for AdapterRun {
    fn execute(&mut self) {
        self.fin = Some(self.run.launch());
    }

    fn finish(self: Box<Self>) -> std::result::Result<Outcome, EngineFailure> {
        let AdapterRun {
            engine,
            job,
            mut run,
            fin,
        } = *self;
        let fin = match fin {
            Some(f) => f,
            None => run.launch(),
        };
        engine.finish_run(&job, run, fin)
    }
}

impl AdapterEngine {
    /// Everything before the engine starts: checks, templates, scratch directory and inputs.
    fn stage_run(&self, job: &Job, attempt: usize) -> std::result::Result<Staging, EngineFailure> {
        let n = job.elements.len();
        if job.elements.iter().any(|e| e.is_pseudo()) {
            return Err(self.fail(
                FailureKind::BadInput,
                "the pseudo-atom X belongs to model surfaces; a real engine needs real elements"
                    .into(),
                None,
            ));
        }
        if job.coords.len() != 3 * n || job.coords.iter().any(|v| !v.is_finite()) {
            return Err(self.fail(
                FailureKind::BadInput,
                format!(
                    "coordinates must be {} finite numbers for {n} atoms (got {})",
                    3 * n,
                    job.coords.len()
                ),
                None,
            ));
        }
        let mol = Molecule {
            elements: job.elements.clone(),
            coords: (0..n)
                .map(|i| {
                    [
                        job.coords[3 * i],
                        job.coords[3 * i + 1],
                        job.coords[3 * i + 2],
                    ]
                })
                .collect(),
            charge: job.charge,
            multiplicity: job.multiplicity,
            comment: String::new(),
        };
        if let Err(e) = mol.check_charge_multiplicity() {
            return Err(self.fail(FailureKind::BadInput, e.to_string(), None));
        }
        let (settings, remedies) = self.settings_for_attempt(attempt);
        let mut prepared = self
            .adapter
            .prepare(job, &settings, self.scratch_root.as_deref())
            .map_err(|m| {
                self.fail(
                    FailureKind::BadInput,
                    format!("adapter {}: {m}", self.adapter.path.display()),
                    None,
                )
            })?;
        if let Some(limit) = self.timeout {
            prepared.spec.timeout = limit;
        }
        let staged = match process::stage(&prepared.spec) {
            Ok(s) => s,
            Err(SpawnError::Missing(m)) => {
                return Err(self.fail(FailureKind::MissingExecutable, m, None))
            }
            Err(SpawnError::Other(m, kept)) => return Err(self.fail(FailureKind::Crash, m, kept)),
        };
        Ok(Staging {
            prepared,
            remedies,
            staged: Some(staged),
        })
    }

    /// Everything after the engine ended: failure signatures, the numbers, the checks.
    fn finish_run(
        &self,
        job: &Job,
        run: Staging,
        fin: std::result::Result<process::Finished, SpawnError>,
    ) -> std::result::Result<Outcome, EngineFailure> {
        let Staging {
            prepared,
            remedies,
            staged: _,
        } = run;
        let n = job.elements.len();
        let mut fin = match fin {
            Ok(f) => f,
            Err(SpawnError::Missing(m)) => {
                return Err(self.fail(FailureKind::MissingExecutable, m, None))
            }
            Err(SpawnError::Other(m, kept)) => return Err(self.fail(FailureKind::Crash, m, kept)),
        };
        let mut raw = format!(
            "command: {}\nstatus: {}\nseconds: {:.3}\n",
            prepared.spec.command_line(),
            fin.exit,
            fin.seconds
        );
        if !remedies.is_empty() {
            raw.push_str(&format!("remedies: {}\n", remedies.join(", ")));
        }
        raw.push_str("--- stdout ---\n");
        raw.push_str(&fin.stdout);
        raw.push_str("--- stderr ---\n");
        raw.push_str(&fin.stderr);

        if fin.timed_out {
            let limit = prepared
                .spec
                .timeout
                .map(|d| d.as_secs_f64())
                .unwrap_or(0.0);
            let kept = fin.keep();
            return Err(self.fail(
                FailureKind::Timeout,
                format!(
                    "no result within the time limit of {limit} s (timeout_seconds in {}); the \
                     process group was killed",
                    self.adapter.path.display()
                ),
                Some(kept),
            ));
        }

        // Failure signatures first: a known failure is named even if some output exists.
        for fs in &self.adapter.file.failures {
            let Ok(re) = cached_regex(&fs.pattern) else {
                continue;
            };
            let places: Vec<String> = fs
                .look_in
                .clone()
                .unwrap_or_else(|| vec!["stdout".into(), "stderr".into()]);
            let hit = places.iter().any(|p| match p.as_str() {
                "stdout" => re.is_match(&fin.stdout),
                "stderr" => re.is_match(&fin.stderr),
                file => std::fs::read_to_string(fin.dir().join(file))
                    .map(|t| re.is_match(&t))
                    .unwrap_or(false),
            });
            if hit {
                let kind = match fs.class {
                    FailureClass::Retryable => FailureKind::Signature(fs.name.clone()),
                    FailureClass::BadInput => FailureKind::BadInput,
                    FailureClass::Installation => FailureKind::MissingExecutable,
                };
                let advice = if fs.advice.is_empty() {
                    String::new()
                } else {
                    format!(": {}", fs.advice)
                };
                let kept = fin.keep();
                return Err(self.fail(
                    kind,
                    format!("failure '{}' ({}){advice}", fs.name, fin.exit),
                    Some(kept),
                ));
            }
        }

        // Read the numbers.
        let parsed = read_answer(&prepared, &fin, n, &mut raw).and_then(|a| {
            a.validate(job.quantity, 3 * n)?;
            Ok(a)
        });
        let answer = match parsed {
            Ok(a) => a,
            Err(m) => {
                let kept = fin.keep();
                let kind = if fin.exit.success() {
                    FailureKind::BadOutput
                } else {
                    FailureKind::Crash
                };
                let msg = if fin.exit.success() {
                    format!("unusable output: {m}")
                } else {
                    format!("{} and the output is unusable: {m}", fin.exit)
                };
                return Err(self.fail(kind, msg, Some(kept)));
            }
        };
        if !fin.exit.success() && self.adapter.file.exit_status == ExitPolicy::MustBeZero {
            let kept = fin.keep();
            return Err(self.fail(
                FailureKind::Crash,
                format!(
                    "{} (output looked complete, but this adapter requires exit status 0)",
                    fin.exit
                ),
                Some(kept),
            ));
        }
        if !fin.exit.success() {
            raw.push_str(&format!(
                "note: {} ignored: the output is complete and valid (exit_status: ignored)\n",
                fin.exit
            ));
        }
        let answer = match prepared.rotation {
            Some(r) => rotate_answer_back(answer, &r, n),
            None => answer,
        };
        Ok(Outcome {
            answer,
            raw_output: raw,
            remedies,
            seconds: fin.seconds,
        })
    }
}

fn read_answer(
    p: &Prepared,
    fin: &process::Finished,
    n: usize,
    raw: &mut String,
) -> std::result::Result<Answer, String> {
    let mut cache: BTreeMap<String, String> = BTreeMap::new();
    let mut energy = None;
    let mut gradient = None;
    let mut hessian = None;
    for r in &p.rules {
        let text = match r.from.as_str() {
            "stdout" => fin.stdout.clone(),
            "stderr" => fin.stderr.clone(),
            file => match cache.get(file) {
                Some(t) => t.clone(),
                None => {
                    let t = std::fs::read_to_string(fin.dir().join(file))
                        .map_err(|e| format!("cannot read output file '{file}': {e}"))?;
                    raw.push_str(&format!("--- file {file} ---\n{t}"));
                    cache.insert(file.to_string(), t.clone());
                    t
                }
            },
        };
        let what = match r.target {
            Target::Energy => "energy",
            Target::Gradient => "gradient",
            Target::Hessian => "Hessian",
        };
        let ctx = |m: String| format!("{what} from {}: {m}", r.from);
        match (&r.how, r.target) {
            (How::Regex(re, occ), _) => {
                energy = Some(extract::regex_number(&text, re, *occ).map_err(ctx)? * r.factor);
            }
            (
                How::Block {
                    after,
                    skip,
                    rows,
                    columns,
                },
                t,
            ) => {
                let v =
                    extract::block(&text, after.as_ref(), *skip, *rows, columns).map_err(ctx)?;
                store_numbers(t, v, n, Layout::Full, r.factor, &mut gradient, &mut hessian)
                    .map_err(ctx)?;
            }
            (
                How::Numbers {
                    after,
                    skip,
                    layout,
                },
                t,
            ) => {
                let count = match t {
                    Target::Hessian => layout.count(3 * n),
                    _ => 3 * n,
                };
                let v = extract::numbers(&text, after.as_ref(), *skip, count).map_err(ctx)?;
                store_numbers(t, v, n, *layout, r.factor, &mut gradient, &mut hessian)
                    .map_err(ctx)?;
            }
        }
    }
    let energy = energy.ok_or("no energy rule")?;
    Ok(Answer {
        energy,
        gradient,
        hessian,
    })
}

fn store_numbers(
    t: Target,
    v: Vec<f64>,
    n: usize,
    layout: Layout,
    factor: f64,
    gradient: &mut Option<DVector<f64>>,
    hessian: &mut Option<DMatrix<f64>>,
) -> std::result::Result<(), String> {
    match t {
        Target::Gradient => {
            if v.len() != 3 * n {
                return Err(format!("{} numbers, expected {}", v.len(), 3 * n));
            }
            *gradient = Some(DVector::from_vec(v) * factor);
        }
        Target::Hessian => {
            *hessian = Some(layout.unpack(3 * n, &v)? * factor);
        }
        Target::Energy => return Err("an energy is read with a regex".into()),
    }
    Ok(())
}

/// Gradient and Hessian from the rotated evaluation frame back to the caller's frame:
/// x_eval = R x, so g = Rᵀ g_eval and H = Bᵀ H_eval B with B = diag(R, …, R).
fn rotate_answer_back(a: Answer, r: &Matrix3<f64>, n: usize) -> Answer {
    let rt = r.transpose();
    let gradient = a.gradient.map(|g| rotate_flat(&g, &rt));
    let hessian = a.hessian.map(|h| {
        let b = block_rotation(r, n);
        b.transpose() * h * b
    });
    Answer {
        energy: a.energy,
        gradient,
        hessian,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn units() {
        assert_eq!(unit_factor("hartree", 0).unwrap(), 1.0);
        assert_eq!(unit_factor("Eh/bohr", 1).unwrap(), 1.0);
        // 1 kcal/mol/Å = 8.43297e-4 Eh/bohr (engines.md unit constants; CODATA 2018).
        assert!((unit_factor("kcal/mol/angstrom", 1).unwrap() - 8.43297e-4).abs() < 1e-9);
        // 1 kcal/mol/Å² = 4.4626e-4 Eh/bohr² (engines.md unit constants).
        assert!((unit_factor("kcal/mol/angstrom^2", 2).unwrap() - 4.4626e-4).abs() < 1e-8);
        assert!(unit_factor("hartree/bohr", 2).is_err());
        assert!(unit_factor("furlong", 0).is_err());
    }

    #[test]
    fn euler_rotation_is_orthogonal_and_back_rotation_inverts() {
        let r = rot_z(0.3) * rot_y(1.1) * rot_z(-0.7);
        assert!((r.transpose() * r - Matrix3::identity()).norm() < 1e-14);
        let x = DVector::from_vec(vec![1.0, 2.0, 3.0, -1.0, 0.5, 0.25]);
        let back = rotate_flat(&rotate_flat(&x, &r), &r.transpose());
        assert!((back - &x).norm() < 1e-14);
        // A quadratic form E = ½ xᵀ H x: gradient and Hessian computed in the rotated frame,
        // rotated back, equal the ones computed directly.
        let h = DMatrix::from_fn(6, 6, |i, j| 1.0 / (1.0 + i as f64 + j as f64));
        let b = block_rotation(&r, 2);
        let h_eval = &b * &h * b.transpose();
        let xe = rotate_flat(&x, &r);
        let a = Answer {
            energy: 0.0,
            gradient: Some(&h_eval * &xe),
            hessian: Some(h_eval),
        };
        let back = rotate_answer_back(a, &r, 2);
        assert!((back.gradient.unwrap() - &h * &x).norm() < 1e-12);
        assert!((back.hessian.unwrap() - h).norm() < 1e-12);
    }
}
