//! Phase two of reading a study: from the raw model to a validated [`Study`].
//!
//! Every check stops at the first problem and reports it with file:line:column, the reaction
//! and the key. Nothing is written anywhere.

use super::locate::{key, Seg, Source, StudyError};
use super::model::*;
use super::raw::*;
use crate::molecule::Molecule;
use crate::thermo::StandardState;
use crate::units::{ANGSTROM_PER_BOHR, BOHR_PER_ANGSTROM};
use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

/// Built-in defaults of the stage options.
pub mod builtin {
    pub const RETRIES: u32 = 2;
    pub const RELAX_MAX_STEPS: u32 = 200;
    pub const BAND_IMAGES: u32 = 8;
    pub const BAND_CLIMBING: bool = true;
    pub const BAND_MAX_STEPS: u32 = 300;
    pub const SCAN_POINTS: u32 = 12;
    pub const SCAN_MAX_STEPS: u32 = 100;
    pub const WALK_MODE: u32 = 1;
    pub const WALK_MAX_STEPS: u32 = 100;
    pub const REFINE_MAX_STEPS: u32 = 100;
    pub const REFINE_FRESH_HESSIAN_EVERY: u32 = 10;
    /// cm⁻¹; modes softer than this are treated as numerical noise (common practice).
    pub const IMAGINARY_THRESHOLD_CM1: f64 = 50.0;
    /// √amu·bohr.
    pub const IRC_STEP: f64 = 0.1;
    pub const IRC_MAX_STEPS: u32 = 100;
    /// Å.
    pub const SAME_SPECIES_RMSD: f64 = 0.3;
    pub const VERIFY_MAX_STEPS: u32 = 200;
    /// K (the thermochemical reference temperature, 25 °C).
    pub const RATES_TEMPERATURES_K: [f64; 1] = [298.15];
    /// At most this many temperatures per `rates` stage.
    pub const RATES_MAX_TEMPERATURES: usize = 50;
}

/// Read and validate a study file.
pub fn load(path: &Path) -> Result<Study, StudyError> {
    let file = path.display().to_string();
    let text = std::fs::read_to_string(path).map_err(|e| StudyError {
        file: file.clone(),
        loc: None,
        reaction: None,
        key: None,
        message: format!("cannot read the study file: {e}"),
    })?;
    let base = path
        .parent()
        .map(Path::to_path_buf)
        .filter(|p| !p.as_os_str().is_empty())
        .unwrap_or_else(|| PathBuf::from("."));
    parse(&text, &file, &base)
}

/// Validate study text. `file` names it in errors; relative geometry paths are resolved
/// against `base`.
pub fn parse(text: &str, file: &str, base: &Path) -> Result<Study, StudyError> {
    let src = Source {
        file: file.to_string(),
        text: text.to_string(),
    };
    if text.trim().is_empty() {
        return Err(src.error(
            &[],
            None,
            None,
            "the study file is empty; see workflows-demo/demo.yaml for a commented example",
        ));
    }
    let raw: RawStudy = serde_yaml::from_str(text).map_err(|e| src.from_yaml(&e))?;
    Checker {
        src: &src,
        base,
        raw: &raw,
    }
    .check()
}

/// An error at `path` in an already validated study (e.g. its engine is missing).
pub fn error_in(
    study: &Study,
    path: &[Seg],
    reaction: Option<&str>,
    key: Option<&str>,
    message: impl Into<String>,
) -> StudyError {
    Source {
        file: study.file.display().to_string(),
        text: study.source.clone(),
    }
    .error(path, reaction, key, message)
}

/// Names of reactions and levels: they name folders and keys, so only a safe set.
pub fn check_name(name: &str) -> Result<(), String> {
    let ok_chars = name
        .chars()
        .all(|c| c.is_ascii_alphanumeric() || matches!(c, '.' | '_' | '-'));
    if name.is_empty() {
        return Err("a name cannot be empty".into());
    }
    if !ok_chars || name.contains("..") || name.starts_with('.') || name.starts_with('-') {
        return Err(format!(
            "name \"{name}\" is not allowed: use letters, digits, '.', '_' and '-' only, not starting with '.' or '-', and no \"..\" (names become folder names inside the output directory)"
        ));
    }
    if name.len() > 64 {
        return Err(format!(
            "name \"{name}\" is {} characters long; keep it to 64",
            name.len()
        ));
    }
    Ok(())
}

struct Checker<'a> {
    src: &'a Source,
    base: &'a Path,
    raw: &'a RawStudy,
}

/// Where the stages of a reaction come from, for locating errors.
#[derive(Clone, Copy)]
enum PipelineOrigin {
    Study,
    Reaction(usize),
}

impl PipelineOrigin {
    fn entry(self, j: usize) -> Vec<Seg> {
        match self {
            PipelineOrigin::Study => vec![key("pipeline"), Seg::Index(j)],
            PipelineOrigin::Reaction(i) => vec![
                key("reactions"),
                Seg::Index(i),
                key("pipeline"),
                Seg::Index(j),
            ],
        }
    }
    fn key_name(self) -> &'static str {
        "pipeline"
    }
}

/// What a reaction has available for its next stage.
#[derive(Default, Clone, Copy)]
struct Have {
    reactant: bool,
    product: bool,
    guess: bool,
    saddle: bool,
    modes: bool,
    irc: bool,
    verified: bool,
}

impl Checker<'_> {
    fn err(
        &self,
        path: &[Seg],
        reaction: Option<&str>,
        k: Option<&str>,
        msg: impl Into<String>,
    ) -> StudyError {
        self.src.error(path, reaction, k, msg)
    }

    fn check(&self) -> Result<Study, StudyError> {
        let raw = self.raw;
        // Levels.
        if raw.levels.0.is_empty() {
            return Err(self.err(
                &[key("levels")],
                None,
                Some("levels"),
                "no levels of theory; define at least one, e.g. `fast: {engine: xtb, settings: {method: gfn2}}`",
            ));
        }
        let mut levels = Vec::new();
        for (name, l) in &raw.levels.0 {
            check_name(name).map_err(|m| {
                self.err(
                    &[Seg::KeyItself(name.clone(), 0)],
                    None,
                    Some(&format!("levels.{name}")),
                    m,
                )
            })?;
            if l.engine.trim().is_empty() {
                return Err(self.err(
                    &[key("levels"), key(name), key("engine")],
                    None,
                    Some(&format!("levels.{name}.engine")),
                    "the engine name is empty; name an adapter, e.g. `xtb`",
                ));
            }
            let mut settings = BTreeMap::new();
            for (k, v) in &l.settings {
                settings.insert(k.clone(), v.clone());
            }
            let threads = l.threads.unwrap_or(1);
            if !(1..=256).contains(&threads) {
                return Err(self.err(
                    &[key("levels"), key(name), key("threads")],
                    None,
                    Some(&format!("levels.{name}.threads")),
                    format!("{threads} threads per engine run; give a number from 1 to 256"),
                ));
            }
            let slurm = match &l.slurm {
                Some(raw) => Some(self.check_slurm(name, raw)?),
                None => None,
            };
            levels.push(Level {
                name: name.clone(),
                engine: l.engine.trim().to_string(),
                settings,
                threads,
                slurm,
            });
        }
        let level_names: Vec<&str> = levels.iter().map(|l| l.name.as_str()).collect();
        let known_levels = level_names.join(", ");
        let level_exists = |n: &str| level_names.contains(&n);

        // Defaults.
        let d = &raw.defaults;
        let level = match &d.level {
            Some(l) if level_exists(l) => l.clone(),
            Some(l) => {
                return Err(self.err(
                    &[key("defaults"), key("level")],
                    None,
                    Some("defaults.level"),
                    format!("unknown level \"{l}\" (known: {known_levels})"),
                ))
            }
            None if levels.len() == 1 => levels[0].name.clone(),
            None => {
                return Err(self.err(
                    &[key("defaults")],
                    None,
                    Some("defaults.level"),
                    format!(
                        "missing: with more than one level ({known_levels}), say which one reactions use by default"
                    ),
                ))
            }
        };
        if d.multiplicity == Some(0) {
            return Err(self.err(
                &[key("defaults"), key("multiplicity")],
                None,
                Some("defaults.multiplicity"),
                "multiplicity must be at least 1 (1 = singlet, 2 = doublet, ...)",
            ));
        }
        if let Some(r) = d.retries {
            self.check_retries(
                r,
                &[key("defaults"), key("retries")],
                None,
                "defaults.retries",
            )?;
        }
        let defaults = Defaults {
            charge: d.charge.unwrap_or(0),
            multiplicity: d.multiplicity.unwrap_or(1),
            level,
            retries: d.retries.unwrap_or(builtin::RETRIES),
            timeout_seconds: d.timeout.map(|t| t.seconds()),
            executor: d.executor.unwrap_or_default(),
        };

        // The study's pipeline.
        self.check_pipeline(
            &raw.pipeline,
            PipelineOrigin::Study,
            None,
            &level_exists,
            &known_levels,
        )?;

        // Reactions.
        if raw.reactions.is_empty() {
            return Err(self.err(
                &[key("reactions")],
                None,
                Some("reactions"),
                "no reactions; list at least one",
            ));
        }
        let mut reactions: Vec<Reaction> = Vec::new();
        let mut first_use: BTreeMap<&str, usize> = BTreeMap::new();
        for (i, r) in raw.reactions.iter().enumerate() {
            let here = |k: &str| vec![key("reactions"), Seg::Index(i), key(k)];
            check_name(&r.name)
                .map_err(|m| self.err(&here("name"), Some(&r.name), Some("name"), m))?;
            if let Some(&j) = first_use.get(r.name.as_str()) {
                let line = super::locate::locate(
                    &self.src.text,
                    &[key("reactions"), Seg::Index(j), key("name")],
                )
                .map(|l| format!(" (line {})", l.line))
                .unwrap_or_default();
                return Err(self.err(
                    &here("name"),
                    Some(&r.name),
                    Some("name"),
                    format!(
                        "duplicate reaction name: reaction {} already uses it{line}; names must be unique",
                        j + 1
                    ),
                ));
            }
            first_use.insert(&r.name, i);
            reactions.push(self.check_reaction(i, r, &defaults, &level_exists, &known_levels)?);
        }

        let name = raw
            .study
            .clone()
            .filter(|s| !s.trim().is_empty())
            .unwrap_or_else(|| {
                Path::new(&self.src.file)
                    .file_stem()
                    .map(|s| s.to_string_lossy().into_owned())
                    .unwrap_or_else(|| "study".into())
            });
        Ok(Study {
            file: PathBuf::from(&self.src.file),
            source: self.src.text.clone(),
            base: self.base.to_path_buf(),
            name,
            about: raw.about.clone(),
            levels,
            defaults,
            reactions,
        })
    }

    /// A level's `slurm:` block: values sbatch would refuse or that could break the generated
    /// script are errors here, at their line.
    fn check_slurm(
        &self,
        level: &str,
        raw: &super::raw::RawSlurm,
    ) -> Result<crate::slurm::SlurmOptions, StudyError> {
        let at = |k: &str| vec![key("levels"), key(level), key("slurm"), key(k)];
        let full = |k: &str| format!("levels.{level}.slurm.{k}");
        let word = |k: &str, v: &Option<String>| -> Result<Option<String>, StudyError> {
            match v {
                Some(t)
                    if t.trim().is_empty()
                        || t.chars().any(|c| c.is_whitespace() || c.is_control()) =>
                {
                    Err(self.err(
                        &at(k),
                        None,
                        Some(&full(k)),
                        format!("\"{t}\" is not a Slurm {k} name: one word, no spaces"),
                    ))
                }
                other => Ok(other.clone()),
            }
        };
        let partition = word("partition", &raw.partition)?;
        let account = word("account", &raw.account)?;
        let memory = match &raw.memory {
            Some(m) => {
                let t = m.0.trim();
                let digits = t.trim_end_matches(['K', 'M', 'G', 'T', 'k', 'm', 'g', 't']);
                if digits.is_empty()
                    || !digits.chars().all(|c| c.is_ascii_digit())
                    || t.len() > digits.len() + 1
                {
                    return Err(self.err(
                        &at("memory"),
                        None,
                        Some(&full("memory")),
                        format!("memory \"{t}\" is not what sbatch --mem takes: a whole number of MB (2000) or with a unit K, M, G, T (2G)"),
                    ));
                }
                Some(t.to_string())
            }
            None => None,
        };
        if raw.cpus_per_task == Some(0) {
            return Err(self.err(
                &at("cpus-per-task"),
                None,
                Some(&full("cpus-per-task")),
                "cpus-per-task must be at least 1",
            ));
        }
        let group = raw.group.unwrap_or(1);
        if !(1..=10_000).contains(&group) {
            return Err(self.err(
                &at("group"),
                None,
                Some(&full("group")),
                format!("group {group} is out of range: evaluations per job, 1 to 10000"),
            ));
        }
        let lines = |k: &str,
                     v: &Option<Vec<String>>,
                     directive: bool|
         -> Result<Vec<String>, StudyError> {
            let v = v.clone().unwrap_or_default();
            for (i, l) in v.iter().enumerate() {
                let here = vec![
                    key("levels"),
                    key(level),
                    key("slurm"),
                    key(k),
                    Seg::Index(i),
                ];
                let fk = format!("{} entry {}", full(k), i + 1);
                if l.contains('\n') || l.contains('\r') {
                    return Err(self.err(
                        &here,
                        None,
                        Some(&fk),
                        "one line per entry; split it into several entries",
                    ));
                }
                if directive && !l.trim_start().starts_with('-') {
                    return Err(self.err(&here, None, Some(&fk), format!("\"{l}\" is not an sbatch option; write it as on the sbatch command line, e.g. `--qos=short` (Cairn adds `#SBATCH`)")));
                }
            }
            Ok(v.into_iter().map(|l| l.trim().to_string()).collect())
        };
        Ok(crate::slurm::SlurmOptions {
            partition,
            account,
            time_limit_minutes: raw
                .time_limit
                .map(|d| ((d.seconds() / 60.0).ceil() as u64).max(1)),
            memory,
            cpus_per_task: raw.cpus_per_task,
            directives: lines("directives", &raw.directives, true)?,
            setup: lines("setup", &raw.setup, false)?,
            group: group as usize,
        })
    }

    fn check_retries(
        &self,
        r: u32,
        path: &[Seg],
        reaction: Option<&str>,
        k: &str,
    ) -> Result<(), StudyError> {
        if r > 20 {
            return Err(self.err(
                path,
                reaction,
                Some(k),
                format!("{r} retries is more than the 20 allowed; engine failures that survive a few retries need a look, not more retries"),
            ));
        }
        Ok(())
    }

    /// A pipeline on its own: not empty, each stage once, option values in range, levels known.
    fn check_pipeline(
        &self,
        stages: &[RawStage],
        origin: PipelineOrigin,
        reaction: Option<&str>,
        level_exists: &dyn Fn(&str) -> bool,
        known_levels: &str,
    ) -> Result<(), StudyError> {
        let base_path = match origin {
            PipelineOrigin::Study => vec![key("pipeline")],
            PipelineOrigin::Reaction(i) => {
                vec![key("reactions"), Seg::Index(i), key("pipeline")]
            }
        };
        if stages.is_empty() {
            return Err(self.err(
                &base_path,
                reaction,
                Some(origin.key_name()),
                format!(
                    "the pipeline is empty; list its stages, e.g. [relax-ends, band, refine, modes, irc, verify] (stages: {})",
                    STAGE_NAMES.join(", ")
                ),
            ));
        }
        for (j, s) in stages.iter().enumerate() {
            if let Some(k) = stages[..j].iter().position(|t| t.name() == s.name()) {
                return Err(self.err(
                    &origin.entry(j),
                    reaction,
                    Some(origin.key_name()),
                    format!(
                        "stage \"{}\" appears twice (entries {} and {}); each stage runs once per reaction",
                        s.name(),
                        k + 1,
                        j + 1
                    ),
                ));
            }
            let mut path = origin.entry(j);
            path.push(key(s.name()));
            let key_prefix = match origin {
                PipelineOrigin::Study => format!("pipeline.{}", s.name()),
                PipelineOrigin::Reaction(_) => format!("pipeline.{}", s.name()),
            };
            self.check_stage_values(s, &path, reaction, &key_prefix, level_exists, known_levels)?;
        }
        Ok(())
    }

    /// Option values of one stage (as written in a pipeline entry or in a reaction's options).
    fn check_stage_values(
        &self,
        s: &RawStage,
        path: &[Seg],
        reaction: Option<&str>,
        key_prefix: &str,
        level_exists: &dyn Fn(&str) -> bool,
        known_levels: &str,
    ) -> Result<(), StudyError> {
        let at = |k: &str| {
            let mut p = path.to_vec();
            p.push(key(k));
            p
        };
        let full = |k: &str| format!("{key_prefix}.{k}");
        let (level, retries) = common_of(s);
        if let Some(l) = level {
            if !level_exists(l) {
                return Err(self.err(
                    &at("level"),
                    reaction,
                    Some(&full("level")),
                    format!("unknown level \"{l}\" (known: {known_levels})"),
                ));
            }
        }
        if let Some(r) = retries {
            self.check_retries(r, &at("retries"), reaction, &full("retries"))?;
        }
        let range_u = |k: &str, v: Option<u32>, lo: u32, hi: u32, what: &str| match v {
            Some(x) if x < lo || x > hi => Err(self.err(
                &at(k),
                reaction,
                Some(&full(k)),
                format!("{x} is out of range: {what} must be between {lo} and {hi}"),
            )),
            _ => Ok(()),
        };
        let range_f = |k: &str, v: Option<f64>, lo: f64, hi: f64, zero_ok: bool, what: &str| match v
        {
            Some(x) if !((if zero_ok { x >= lo } else { x > lo }) && x <= hi) => {
                let low = if zero_ok { "at least" } else { "above" };
                Err(self.err(
                    &at(k),
                    reaction,
                    Some(&full(k)),
                    format!("{x} is out of range: {what} must be {low} {lo} and at most {hi}"),
                ))
            }
            _ => Ok(()),
        };
        const MAX: u32 = 100_000;
        match s {
            RawStage::RelaxEnds(o) => range_u("max-steps", o.max_steps, 1, MAX, "max-steps"),
            RawStage::Band(o) => {
                range_u("images", o.images, 3, 64, "the number of band images")?;
                range_u("max-steps", o.max_steps, 1, MAX, "max-steps")
            }
            RawStage::Scan(o) => {
                range_u("points", o.points, 3, 500, "the number of scan points")?;
                range_u("max-steps", o.max_steps, 1, MAX, "max-steps")
            }
            RawStage::Walk(o) => {
                range_u("mode", o.mode, 1, 3 * 1000, "the mode number (1 = softest)")?;
                range_u("max-steps", o.max_steps, 1, MAX, "max-steps")
            }
            RawStage::Refine(o) => {
                range_u("max-steps", o.max_steps, 1, MAX, "max-steps")?;
                range_u(
                    "fresh-hessian-every",
                    o.fresh_hessian_every,
                    0,
                    MAX,
                    "fresh-hessian-every",
                )
            }
            RawStage::Modes(o) => range_f(
                "imaginary-threshold",
                o.imaginary_threshold,
                0.0,
                1000.0,
                true,
                "the imaginary-frequency threshold (cm⁻¹)",
            ),
            RawStage::Irc(o) => {
                range_f("step", o.step, 0.0, 1.0, false, "the IRC step (√amu·bohr)")?;
                range_u("max-steps", o.max_steps, 1, MAX, "max-steps")
            }
            RawStage::Verify(o) => {
                range_f(
                    "same-species-rmsd",
                    o.same_species_rmsd,
                    0.0,
                    5.0,
                    false,
                    "the same-species RMSD (Å)",
                )?;
                range_u("max-steps", o.max_steps, 1, MAX, "max-steps")
            }
            RawStage::Rates(o) => {
                if let Some(ts) = &o.temperatures {
                    if ts.is_empty() || ts.len() > builtin::RATES_MAX_TEMPERATURES {
                        return Err(self.err(
                            &at("temperatures"),
                            reaction,
                            Some(&full("temperatures")),
                            format!(
                                "{} temperatures given; list between 1 and {} (K), e.g. [298.15, 373.15]",
                                ts.len(),
                                builtin::RATES_MAX_TEMPERATURES
                            ),
                        ));
                    }
                    if let Some(t) = ts
                        .iter()
                        .find(|t| !(t.is_finite() && **t > 0.0 && **t <= 5000.0))
                    {
                        return Err(self.err(
                            &at("temperatures"),
                            reaction,
                            Some(&full("temperatures")),
                            format!("{t} K is out of range: temperatures must be above 0 K and at most 5000 K"),
                        ));
                    }
                }
                Ok(())
            }
        }
    }

    fn check_reaction(
        &self,
        i: usize,
        r: &RawReaction,
        defaults: &Defaults,
        level_exists: &dyn Fn(&str) -> bool,
        known_levels: &str,
    ) -> Result<Reaction, StudyError> {
        let name = r.name.as_str();
        let rn = Some(name);
        let here = |k: &str| vec![key("reactions"), Seg::Index(i), key(k)];
        let whole = vec![key("reactions"), Seg::Index(i)];

        let level = match &r.level {
            Some(l) if level_exists(l) => l.clone(),
            Some(l) => {
                return Err(self.err(
                    &here("level"),
                    rn,
                    Some("level"),
                    format!("unknown level \"{l}\" (known: {known_levels})"),
                ))
            }
            None => defaults.level.clone(),
        };
        if r.multiplicity == Some(0) {
            return Err(self.err(
                &here("multiplicity"),
                rn,
                Some("multiplicity"),
                "multiplicity must be at least 1 (1 = singlet, 2 = doublet, ...)",
            ));
        }
        let charge = r.charge.unwrap_or(defaults.charge);
        let multiplicity = r.multiplicity.unwrap_or(defaults.multiplicity);

        // The start.
        let start_help = "a reaction starts from one of: `reactant` + `product`; `guess` (a saddle guess, optionally with `reactant` + `product` to reach); `reactant` + `drive`; or `reactant` alone (walk uphill)";
        let read = |k: &str, written: &str| -> Result<Geometry, StudyError> {
            self.read_geometry(i, name, k, written, charge, multiplicity, r)
        };
        let start = match (&r.reactant, &r.product, &r.guess, &r.drive) {
            (Some(re), Some(pr), None, None) => {
                let reactant = read("reactant", re)?;
                let product = read("product", pr)?;
                self.same_atoms(i, name, "product", &reactant, &product)?;
                Start::Ends { reactant, product }
            }
            (None, None, Some(g), None) => Start::Guess {
                guess: read("guess", g)?,
                ends: None,
            },
            (Some(re), Some(pr), Some(g), None) => {
                let guess = read("guess", g)?;
                let reactant = read("reactant", re)?;
                let product = read("product", pr)?;
                self.same_atoms(i, name, "reactant", &guess, &reactant)?;
                self.same_atoms(i, name, "product", &guess, &product)?;
                Start::Guess {
                    guess,
                    ends: Some((reactant, product)),
                }
            }
            (Some(re), None, None, Some(d)) => {
                let reactant = read("reactant", re)?;
                let drive = self.check_drive(i, name, d, &reactant)?;
                Start::Drive { reactant, drive }
            }
            (Some(re), None, None, None) => Start::Alone {
                reactant: read("reactant", re)?,
            },
            (_, _, Some(_), _) if r.reactant.is_some() != r.product.is_some() => {
                let missing = if r.reactant.is_some() {
                    "product"
                } else {
                    "reactant"
                };
                return Err(self.err(
                    &whole,
                    rn,
                    Some(missing),
                    format!("a guess can come with both ends to reach or with none; add `{missing}` or remove the other end"),
                ));
            }
            (_, _, _, Some(_)) => {
                let clash = if r.guess.is_some() {
                    "guess"
                } else if r.product.is_some() {
                    "product"
                } else {
                    "reactant"
                };
                let msg = if clash == "reactant" {
                    "`drive` needs a `reactant` to start the scan from".to_string()
                } else {
                    format!("`drive` goes with a reactant alone, not with `{clash}`; {start_help}")
                };
                return Err(self.err(&here("drive"), rn, Some("drive"), msg));
            }
            (None, Some(_), None, None) => {
                return Err(self.err(
                    &here("product"),
                    rn,
                    Some("reactant"),
                    format!("missing: a product needs a reactant; {start_help}"),
                ))
            }
            _ => return Err(self.err(&whole, rn, None, format!("no start given: {start_help}"))),
        };

        // Its pipeline.
        let (stages_raw, origin) = match &r.pipeline {
            Some(p) => {
                self.check_pipeline(
                    p,
                    PipelineOrigin::Reaction(i),
                    rn,
                    level_exists,
                    known_levels,
                )?;
                (p.as_slice(), PipelineOrigin::Reaction(i))
            }
            None => (self.raw.pipeline.as_slice(), PipelineOrigin::Study),
        };
        // Its option changes.
        for s in r.options.stage_names() {
            if !stages_raw.iter().any(|t| t.name() == s) {
                let names: Vec<&str> = stages_raw.iter().map(|t| t.name()).collect();
                return Err(self.err(
                    &[key("reactions"), Seg::Index(i), key("options"), key(s)],
                    rn,
                    Some(&format!("options.{s}")),
                    format!(
                        "stage \"{s}\" is not in this reaction's pipeline ({})",
                        names.join(", ")
                    ),
                ));
            }
            let opt_stage = options_as_stage(&r.options, s);
            if let Some(st) = opt_stage {
                self.check_stage_values(
                    &st,
                    &[key("reactions"), Seg::Index(i), key("options"), key(s)],
                    rn,
                    &format!("options.{s}"),
                    level_exists,
                    known_levels,
                )?;
            }
        }

        // Applicable stages and the flow of data between them.
        let mut have = Have::default();
        match &start {
            Start::Ends { .. } => {
                have.reactant = true;
                have.product = true;
            }
            Start::Guess { ends, .. } => {
                have.guess = true;
                have.reactant = ends.is_some();
                have.product = ends.is_some();
            }
            Start::Drive { .. } | Start::Alone { .. } => have.reactant = true,
        }
        let mut stages = Vec::new();
        let mut not_applicable = Vec::new();
        for (j, s0) in stages_raw.iter().enumerate() {
            let s = r.options.apply(s0);
            let kind = kind_of(&s);
            let applies = match kind {
                StageKind::RelaxEnds => have.reactant,
                StageKind::Band => matches!(start, Start::Ends { .. }),
                StageKind::Scan => matches!(start, Start::Drive { .. }),
                StageKind::Walk => matches!(start, Start::Alone { .. }),
                _ => true,
            };
            if !applies {
                not_applicable.push(kind);
                continue;
            }
            let missing = match kind {
                StageKind::Refine if !have.guess => Some((
                    "a saddle guess",
                    match start {
                        Start::Ends { .. } => "put `band` before `refine`",
                        Start::Drive { .. } => "put `scan` before `refine`",
                        _ => "put `walk` before `refine`",
                    },
                )),
                StageKind::Modes if !have.saddle => {
                    Some(("a refined saddle point", "put `refine` before `modes`"))
                }
                StageKind::Irc if !have.saddle => {
                    Some(("a refined saddle point", "put `refine` before `irc`"))
                }
                StageKind::Irc if !have.modes => Some((
                    "the saddle's normal modes (to leave the saddle along the imaginary mode)",
                    "put `modes` before `irc`",
                )),
                StageKind::Verify if !have.irc => {
                    Some(("an IRC from the saddle", "put `irc` before `verify`"))
                }
                StageKind::Verify if !have.modes => Some((
                    "the saddle's normal modes (to count imaginary modes)",
                    "put `modes` before `verify`",
                )),
                StageKind::Rates if !have.verified => Some((
                    "both ends of the step and a checked saddle (from `verify`)",
                    "put `verify` before `rates`",
                )),
                _ => None,
            };
            if let Some((what, fix)) = missing {
                let order: Vec<&str> = stages_raw.iter().map(|t| t.name()).collect();
                return Err(self.err(
                    &origin.entry(j),
                    rn,
                    Some(origin.key_name()),
                    format!(
                        "stage \"{}\" needs {what}, but no earlier stage makes one for a reaction started from {} (pipeline: {}); {fix}",
                        kind.name(),
                        start.describe(),
                        order.join(", ")
                    ),
                ));
            }
            match kind {
                StageKind::Band | StageKind::Scan | StageKind::Walk => have.guess = true,
                StageKind::Refine => have.saddle = true,
                StageKind::Modes => have.modes = true,
                StageKind::Irc => have.irc = true,
                StageKind::Verify => have.verified = true,
                _ => {}
            }
            if kind == StageKind::Rates && base_is_model_surface(&start) {
                return Err(self.err(
                    &origin.entry(j),
                    rn,
                    Some(origin.key_name()),
                    "stage \"rates\" needs real atoms (masses, moments of inertia), but this reaction is on a model surface (pseudo-atom X); leave `rates` out of its pipeline",
                ));
            }
            stages.push(resolve(&s, &level, defaults));
        }

        // Walk mode must exist for this molecule.
        if let Start::Alone { reactant } = &start {
            for st in &stages {
                if let StageSpec::Walk { mode, .. } = st.spec {
                    let n = 3 * reactant.molecule.len();
                    if mode as usize > n.saturating_sub(5).max(1) {
                        return Err(self.err(
                            &here("reactant"),
                            rn,
                            Some("walk.mode"),
                            format!(
                                "mode {mode} does not exist: {} has {} atoms, so at most {} vibrational modes",
                                reactant.written,
                                reactant.molecule.len(),
                                n.saturating_sub(5).max(1)
                            ),
                        ));
                    }
                }
            }
        }

        Ok(Reaction {
            name: name.to_string(),
            about: r.about.clone(),
            charge,
            multiplicity,
            level,
            start,
            stages,
            not_applicable,
        })
    }

    #[allow(clippy::too_many_arguments)]
    fn read_geometry(
        &self,
        i: usize,
        reaction: &str,
        k: &str,
        written: &str,
        charge: i32,
        multiplicity: u32,
        r: &RawReaction,
    ) -> Result<Geometry, StudyError> {
        let path_in_yaml = vec![key("reactions"), Seg::Index(i), key(k)];
        let rn = Some(reaction);
        if written.trim().is_empty() {
            return Err(self.err(&path_in_yaml, rn, Some(k), "the file name is empty"));
        }
        let path = self.base.join(written);
        let text = std::fs::read(&path).map_err(|e| {
            let why = match e.kind() {
                std::io::ErrorKind::NotFound => "no such file".to_string(),
                _ => e.to_string(),
            };
            self.err(
                &path_in_yaml,
                rn,
                Some(k),
                format!(
                    "cannot read geometry file \"{written}\" ({why}; looked at {}); paths are relative to the study file's folder",
                    path.display()
                ),
            )
        })?;
        let text = String::from_utf8(text).map_err(|_| {
            self.err(
                &path_in_yaml,
                rn,
                Some(k),
                format!("geometry file \"{written}\" is not text (expected an XYZ file)"),
            )
        })?;
        let mut frames = crate::xyz::parse_frames(&text, written).map_err(|e| {
            self.err(
                &path_in_yaml,
                rn,
                Some(k),
                format!("cannot use geometry file \"{written}\": {e}"),
            )
        })?;
        if frames.len() > 1 {
            return Err(self.err(
                &path_in_yaml,
                rn,
                Some(k),
                format!(
                    "geometry file \"{written}\" holds {} frames; a {k} is one geometry",
                    frames.len()
                ),
            ));
        }
        let mut molecule: Molecule = frames.swap_remove(0);
        molecule.charge = charge;
        molecule.multiplicity = multiplicity;
        molecule.check_charge_multiplicity().map_err(|e| {
            let (at_key, shown) = if r.multiplicity.is_some() {
                ("multiplicity", "multiplicity")
            } else if r.charge.is_some() {
                ("charge", "charge")
            } else {
                (k, k)
            };
            self.err(
                &[key("reactions"), Seg::Index(i), key(at_key)],
                rn,
                Some(shown),
                format!(
                    "charge {charge} and multiplicity {multiplicity} do not fit {k} \"{written}\": {e}"
                ),
            )
        })?;
        Ok(Geometry {
            written: written.to_string(),
            path,
            molecule,
        })
    }

    /// Both geometries must have the same elements in the same order.
    fn same_atoms(
        &self,
        i: usize,
        reaction: &str,
        k: &str,
        a: &Geometry,
        b: &Geometry,
    ) -> Result<(), StudyError> {
        let at = vec![key("reactions"), Seg::Index(i), key(k)];
        let rn = Some(reaction);
        let (ma, mb) = (&a.molecule, &b.molecule);
        for (n, (ea, eb)) in ma.elements.iter().zip(&mb.elements).enumerate() {
            if ea != eb {
                return Err(self.err(
                    &at,
                    rn,
                    Some(k),
                    format!(
                        "atom {} is {} in \"{}\" but {} in \"{}\"; both need the same atoms in the same order",
                        n + 1,
                        ea.symbol(),
                        a.written,
                        eb.symbol(),
                        b.written
                    ),
                ));
            }
        }
        if ma.len() != mb.len() {
            return Err(self.err(
                &at,
                rn,
                Some(k),
                format!(
                    "\"{}\" has {} atoms ({}) but \"{}\" has {} ({}); both need the same atoms in the same order",
                    a.written,
                    ma.len(),
                    ma.formula(),
                    b.written,
                    mb.len(),
                    mb.formula()
                ),
            ));
        }
        Ok(())
    }

    fn check_drive(
        &self,
        i: usize,
        reaction: &str,
        d: &RawDrive,
        reactant: &Geometry,
    ) -> Result<Drive, StudyError> {
        let rn = Some(reaction);
        let at = |k: &str| vec![key("reactions"), Seg::Index(i), key("drive"), key(k)];
        let n = reactant.molecule.len();
        if d.atoms.len() != 2 {
            return Err(self.err(
                &at("atoms"),
                rn,
                Some("drive.atoms"),
                format!(
                    "a driven distance needs exactly two atom numbers, got {}",
                    d.atoms.len()
                ),
            ));
        }
        let mut idx = [0usize; 2];
        for (slot, &a) in idx.iter_mut().zip(&d.atoms) {
            if a == 0 || a as usize > n {
                return Err(self.err(
                    &at("atoms"),
                    rn,
                    Some("drive.atoms"),
                    format!(
                        "atom {a} does not exist: atoms are numbered 1 to {n} as in \"{}\"",
                        reactant.written
                    ),
                ));
            }
            *slot = a as usize - 1;
        }
        if idx[0] == idx[1] {
            return Err(self.err(
                &at("atoms"),
                rn,
                Some("drive.atoms"),
                "the two atoms of a driven distance must differ",
            ));
        }
        let c = &reactant.molecule.coords;
        let from_bohr = match (c.get(idx[0]), c.get(idx[1])) {
            (Some(p), Some(q)) => {
                ((p[0] - q[0]).powi(2) + (p[1] - q[1]).powi(2) + (p[2] - q[2]).powi(2)).sqrt()
            }
            _ => 0.0,
        };
        if !(d.to.is_finite() && d.to >= 0.3 && d.to <= 20.0) {
            return Err(self.err(
                &at("to"),
                rn,
                Some("drive.to"),
                format!("{} Å is not a sensible target distance (0.3 to 20 Å)", d.to),
            ));
        }
        let from_a = from_bohr * ANGSTROM_PER_BOHR;
        if (d.to - from_a).abs() < 0.1 {
            return Err(self.err(
                &at("to"),
                rn,
                Some("drive.to"),
                format!(
                    "the distance is already {from_a:.3} Å in \"{}\"; drive it somewhere at least 0.1 Å away",
                    reactant.written
                ),
            ));
        }
        Ok(Drive {
            atoms: idx,
            from_bohr,
            to_bohr: d.to * BOHR_PER_ANGSTROM,
        })
    }
}

fn base_is_model_surface(start: &Start) -> bool {
    match start {
        Start::Ends { reactant, .. }
        | Start::Drive { reactant, .. }
        | Start::Alone { reactant } => reactant.molecule.is_model_surface(),
        Start::Guess { guess, .. } => guess.molecule.is_model_surface(),
    }
}

fn common_of(s: &RawStage) -> (Option<&str>, Option<u32>) {
    match s {
        RawStage::RelaxEnds(o) => (o.level.as_deref(), o.retries),
        RawStage::Band(o) => (o.level.as_deref(), o.retries),
        RawStage::Scan(o) => (o.level.as_deref(), o.retries),
        RawStage::Walk(o) => (o.level.as_deref(), o.retries),
        RawStage::Refine(o) => (o.level.as_deref(), o.retries),
        RawStage::Modes(o) => (o.level.as_deref(), o.retries),
        RawStage::Irc(o) => (o.level.as_deref(), o.retries),
        RawStage::Verify(o) => (o.level.as_deref(), o.retries),
        RawStage::Rates(o) => (o.level.as_deref(), o.retries),
    }
}

fn timeout_of(s: &RawStage) -> Option<Duration> {
    match s {
        RawStage::RelaxEnds(o) => o.timeout,
        RawStage::Band(o) => o.timeout,
        RawStage::Scan(o) => o.timeout,
        RawStage::Walk(o) => o.timeout,
        RawStage::Refine(o) => o.timeout,
        RawStage::Modes(o) => o.timeout,
        RawStage::Irc(o) => o.timeout,
        RawStage::Verify(o) => o.timeout,
        RawStage::Rates(o) => o.timeout,
    }
}

fn kind_of(s: &RawStage) -> StageKind {
    match s {
        RawStage::RelaxEnds(_) => StageKind::RelaxEnds,
        RawStage::Band(_) => StageKind::Band,
        RawStage::Scan(_) => StageKind::Scan,
        RawStage::Walk(_) => StageKind::Walk,
        RawStage::Refine(_) => StageKind::Refine,
        RawStage::Modes(_) => StageKind::Modes,
        RawStage::Irc(_) => StageKind::Irc,
        RawStage::Verify(_) => StageKind::Verify,
        RawStage::Rates(_) => StageKind::Rates,
    }
}

/// A reaction's options for one stage, as a stage (for checking its values).
fn options_as_stage(o: &RawOptions, name: &str) -> Option<RawStage> {
    Some(match name {
        "relax-ends" => RawStage::RelaxEnds(o.relax_ends.clone()?),
        "band" => RawStage::Band(o.band.clone()?),
        "scan" => RawStage::Scan(o.scan.clone()?),
        "walk" => RawStage::Walk(o.walk.clone()?),
        "refine" => RawStage::Refine(o.refine.clone()?),
        "modes" => RawStage::Modes(o.modes.clone()?),
        "irc" => RawStage::Irc(o.irc.clone()?),
        "verify" => RawStage::Verify(o.verify.clone()?),
        "rates" => RawStage::Rates(o.rates.clone()?),
        _ => return None,
    })
}

/// Complete a stage's options: built-in defaults under the merged options.
fn resolve(s: &RawStage, reaction_level: &str, d: &Defaults) -> Stage {
    use builtin::*;
    let (level, retries) = common_of(s);
    let spec = match s {
        RawStage::RelaxEnds(o) => StageSpec::RelaxEnds {
            max_steps: o.max_steps.unwrap_or(RELAX_MAX_STEPS),
        },
        RawStage::Band(o) => StageSpec::Band {
            images: o.images.unwrap_or(BAND_IMAGES),
            climbing: o.climbing.unwrap_or(BAND_CLIMBING),
            max_steps: o.max_steps.unwrap_or(BAND_MAX_STEPS),
        },
        RawStage::Scan(o) => StageSpec::Scan {
            points: o.points.unwrap_or(SCAN_POINTS),
            max_steps: o.max_steps.unwrap_or(SCAN_MAX_STEPS),
        },
        RawStage::Walk(o) => StageSpec::Walk {
            mode: o.mode.unwrap_or(WALK_MODE),
            max_steps: o.max_steps.unwrap_or(WALK_MAX_STEPS),
        },
        RawStage::Refine(o) => StageSpec::Refine {
            method: o.method.unwrap_or(RefineMethod::Prfo),
            max_steps: o.max_steps.unwrap_or(REFINE_MAX_STEPS),
            fresh_hessian_every: o.fresh_hessian_every.unwrap_or(REFINE_FRESH_HESSIAN_EVERY),
        },
        RawStage::Modes(o) => StageSpec::Modes {
            imaginary_threshold_cm1: o.imaginary_threshold.unwrap_or(IMAGINARY_THRESHOLD_CM1),
        },
        RawStage::Irc(o) => StageSpec::Irc {
            step: o.step.unwrap_or(IRC_STEP),
            max_steps: o.max_steps.unwrap_or(IRC_MAX_STEPS),
        },
        RawStage::Verify(o) => StageSpec::Verify {
            same_species_rmsd_angstrom: o.same_species_rmsd.unwrap_or(SAME_SPECIES_RMSD),
            max_steps: o.max_steps.unwrap_or(VERIFY_MAX_STEPS),
        },
        RawStage::Rates(o) => StageSpec::Rates(RatesSpec {
            temperatures_k: o
                .temperatures
                .clone()
                .unwrap_or_else(|| RATES_TEMPERATURES_K.to_vec()),
            standard_state: match o.standard_state {
                Some(StandardStateName::OneMolar) => StandardState::OneMolar,
                _ => StandardState::OneBar,
            },
            low_frequency: o.low_frequency.unwrap_or(LowFrequency::QuasiRrho),
            tunnelling: o.tunnelling.unwrap_or(Tunnelling::Off),
        }),
    };
    Stage {
        level: level.unwrap_or(reaction_level).to_string(),
        retries: retries.unwrap_or(d.retries),
        timeout_seconds: timeout_of(s).map(|t| t.seconds()).or(d.timeout_seconds),
        spec,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn names() {
        for ok in ["hcn-isomer", "a.b_c-1", "R1", "x"] {
            assert!(check_name(ok).is_ok(), "{ok}");
        }
        for bad in [
            "../x", "a/b", "..", ".hidden", "a..b", "", "-x", "sp ace", "é", "a\\b",
        ] {
            assert!(check_name(bad).is_err(), "{bad}");
        }
    }
}
