//! The study file as written: a serde model with `deny_unknown_fields` everywhere.
//!
//! This is phase one of reading a study. serde_yaml reports shape errors (unknown key, wrong
//! type, missing key, unknown stage) with their line and column; everything that needs to look at
//! more than one value (unknown level, duplicate names, files, atoms) is checked in phase two
//! ([`super::load`]), which finds locations again with [`super::locate`].

use serde::de::{self, DeserializeSeed, IgnoredAny, MapAccess, Visitor};
use serde::{Deserialize, Deserializer, Serialize};
use std::collections::HashSet;
use std::fmt;

/// The whole file.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawStudy {
    /// A short name for the study (free text, printed by `cairn check`).
    #[serde(default)]
    pub study: Option<String>,
    /// One or two sentences about the study.
    #[serde(default)]
    pub about: Option<String>,
    pub levels: Levels,
    #[serde(default)]
    pub defaults: RawDefaults,
    pub pipeline: Vec<RawStage>,
    pub reactions: Vec<RawReaction>,
}

/// `levels:` — named levels of theory, in file order, names unique.
#[derive(Debug, Default)]
pub struct Levels(pub Vec<(String, RawLevel)>);

/// One level of theory: an engine (adapter) and its settings.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawLevel {
    pub engine: String,
    /// Adapter settings, e.g. `method: gfn2`. Scalars only; kept as written.
    #[serde(default, deserialize_with = "deserialize_settings")]
    pub settings: Vec<(String, String)>,
    /// Threads each engine run of this level may use (default 1).
    #[serde(default)]
    pub threads: Option<u32>,
    /// How this level's evaluations run as Slurm jobs (used with the Slurm executor).
    #[serde(default)]
    pub slurm: Option<RawSlurm>,
}

/// `levels.NAME.slurm:` — Slurm job settings for one level.
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields, rename_all = "kebab-case")]
pub struct RawSlurm {
    #[serde(default)]
    pub partition: Option<String>,
    #[serde(default)]
    pub account: Option<String>,
    /// Wall-time limit of one job, with its unit (rounded up to whole minutes).
    #[serde(default)]
    pub time_limit: Option<Duration>,
    /// Memory per job as sbatch's `--mem` takes it: `2000` (MB) or `2G`.
    #[serde(default)]
    pub memory: Option<Scalar>,
    #[serde(default)]
    pub cpus_per_task: Option<u32>,
    /// Extra `#SBATCH` lines, e.g. `--qos=short`.
    #[serde(default)]
    pub directives: Option<Vec<String>>,
    /// Shell lines run in the job before the worker, e.g. `module load xtb`.
    #[serde(default)]
    pub setup: Option<Vec<String>>,
    /// Evaluations per job.
    #[serde(default)]
    pub group: Option<u32>,
}

/// `defaults:` — what every reaction gets unless it says otherwise.
#[derive(Debug, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawDefaults {
    #[serde(default)]
    pub charge: Option<i32>,
    #[serde(default)]
    pub multiplicity: Option<u32>,
    #[serde(default)]
    pub level: Option<String>,
    /// Retry budget per engine call (attempts after the first).
    #[serde(default)]
    pub retries: Option<u32>,
    /// Wall-time limit per engine call.
    #[serde(default)]
    pub timeout: Option<Duration>,
    /// Where engine evaluations run: `local` (default) or `slurm`.
    #[serde(default)]
    pub executor: Option<super::model::ExecutorKind>,
}

/// One reaction.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawReaction {
    pub name: String,
    #[serde(default)]
    pub about: Option<String>,
    #[serde(default)]
    pub reactant: Option<String>,
    #[serde(default)]
    pub product: Option<String>,
    /// A saddle guess (chemical intuition).
    #[serde(default)]
    pub guess: Option<String>,
    /// A coordinate to drive from the reactant.
    #[serde(default)]
    pub drive: Option<RawDrive>,
    #[serde(default)]
    pub charge: Option<i32>,
    #[serde(default)]
    pub multiplicity: Option<u32>,
    #[serde(default)]
    pub level: Option<String>,
    /// Replaces the study's pipeline for this reaction.
    #[serde(default)]
    pub pipeline: Option<Vec<RawStage>>,
    /// Changes some options of some stages for this reaction.
    #[serde(default)]
    pub options: RawOptions,
}

/// `drive:` — a distance between two atoms, driven from its value in the reactant to `to`.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawDrive {
    /// Two atom numbers, counted from 1 as in the XYZ file.
    pub atoms: Vec<u64>,
    /// Final distance, Å.
    pub to: f64,
}

/// A time limit written with its unit: `90s`, `10m`, `2h`.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Duration(pub f64);

impl Duration {
    pub fn seconds(self) -> f64 {
        self.0
    }
}

impl<'de> Deserialize<'de> for Duration {
    fn deserialize<D: Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
        struct V;
        impl Visitor<'_> for V {
            type Value = Duration;
            fn expecting(&self, f: &mut fmt::Formatter) -> fmt::Result {
                f.write_str("a duration with its unit, like \"90s\", \"10m\" or \"2h\"")
            }
            fn visit_str<E: de::Error>(self, v: &str) -> Result<Duration, E> {
                parse_duration(v).map_err(E::custom)
            }
            fn visit_u64<E: de::Error>(self, v: u64) -> Result<Duration, E> {
                Err(E::custom(format!(
                    "duration {v} needs a unit: s, m or h (e.g. \"{v}s\")"
                )))
            }
            fn visit_i64<E: de::Error>(self, v: i64) -> Result<Duration, E> {
                Err(E::custom(format!(
                    "duration {v} needs a unit: s, m or h (e.g. \"{v}s\")"
                )))
            }
            fn visit_f64<E: de::Error>(self, v: f64) -> Result<Duration, E> {
                Err(E::custom(format!(
                    "duration {v} needs a unit: s, m or h (e.g. \"{v}s\")"
                )))
            }
        }
        d.deserialize_any(V)
    }
}

/// Parse `90s`, `1.5m`, `2h` into seconds.
pub fn parse_duration(v: &str) -> Result<Duration, String> {
    let t = v.trim();
    let (num, scale) = if let Some(n) = t.strip_suffix('s') {
        (n, 1.0)
    } else if let Some(n) = t.strip_suffix('m') {
        (n, 60.0)
    } else if let Some(n) = t.strip_suffix('h') {
        (n, 3600.0)
    } else {
        return Err(format!(
            "duration \"{v}\" needs a unit: s, m or h (e.g. \"90s\", \"10m\", \"2h\")"
        ));
    };
    match num.trim().parse::<f64>() {
        Ok(x) if x.is_finite() && x > 0.0 => Ok(Duration(x * scale)),
        _ => Err(format!(
            "duration \"{v}\" must be a positive number followed by s, m or h"
        )),
    }
}

/// Generates one options struct per stage, each with the options every stage has (`level`,
/// `retries`, `timeout`) followed by its own. Every field is optional so that the pipeline's
/// options and a reaction's options can be merged.
macro_rules! stage_options {
    ($(#[$doc:meta])* $name:ident { $($(#[$fdoc:meta])* $field:ident : $ty:ty),* $(,)? }) => {
        $(#[$doc])*
        #[derive(Debug, Clone, Default, PartialEq, Deserialize)]
        #[serde(deny_unknown_fields, rename_all = "kebab-case")]
        pub struct $name {
            /// Level of theory for this stage (a name from `levels:`).
            #[serde(default)]
            pub level: Option<String>,
            /// Retry budget per engine call (attempts after the first).
            #[serde(default)]
            pub retries: Option<u32>,
            /// Wall-time limit per engine call.
            #[serde(default)]
            pub timeout: Option<Duration>,
            $($(#[$fdoc])* #[serde(default)] pub $field: Option<$ty>,)*
        }

        impl $name {
            /// `other`'s options where given, else ours.
            pub fn merged(&self, other: &Self) -> Self {
                $name {
                    level: other.level.clone().or_else(|| self.level.clone()),
                    retries: other.retries.or(self.retries),
                    timeout: other.timeout.or(self.timeout),
                    $($field: other.$field.clone().or_else(|| self.$field.clone()),)*
                }
            }
        }
    };
}

stage_options!(
    /// `relax-ends`: minimise the reactant and product (each species once per study).
    RelaxOpts { max_steps: u32 }
);
stage_options!(
    /// `band`: a nudged elastic band between the (relaxed) ends.
    BandOpts {
        /// Movable images between the two ends.
        images: u32,
        /// Climbing image on the highest image.
        climbing: bool,
        max_steps: u32,
    }
);
stage_options!(
    /// `scan`: drive the reaction's coordinate in steps, relaxing everything else.
    ScanOpts {
        /// Number of scan points, including the start.
        points: u32,
        /// Minimiser steps per point.
        max_steps: u32,
    }
);
stage_options!(
    /// `walk`: walk uphill from the reactant along a normal mode.
    WalkOpts {
        /// Which mode to follow, 1 = the softest.
        mode: u32,
        max_steps: u32,
    }
);
stage_options!(
    /// `refine`: refine the saddle guess to a first-order saddle point.
    RefineOpts {
        method: RefineMethod,
        max_steps: u32,
        /// Recompute the exact Hessian every this many steps (0 = only at the start).
        fresh_hessian_every: u32,
    }
);
stage_options!(
    /// `modes`: Hessian and harmonic frequencies at the saddle.
    ModesOpts {
        /// Modes with |ν| below this (cm⁻¹) count as numerical noise, not as imaginary.
        imaginary_threshold: f64,
    }
);
stage_options!(
    /// `irc`: intrinsic reaction coordinate, both directions, from the saddle.
    IrcOpts {
        /// Step length in mass-weighted coordinates, √amu·bohr.
        step: f64,
        /// Steps per direction.
        max_steps: u32,
    }
);
stage_options!(
    /// `verify`: minimise the IRC ends, check that they connect the reaction's ends.
    VerifyOpts {
        /// Largest RMSD (Å) at which an IRC end counts as the same species as an end.
        same_species_rmsd: f64,
        max_steps: u32,
    }
);

stage_options!(
    /// `rates`: thermochemistry at the ends and the saddle (engine Hessians), barriers in
    /// enthalpy and Gibbs energy, transition-state-theory rate constants and half-lives.
    RatesOpts {
        /// Temperatures, K.
        temperatures: Vec<f64>,
        /// Standard state of the Gibbs energies: `1-bar` (ideal gas) or `1-molar`.
        standard_state: StandardStateName,
        /// Entropy of low-frequency modes: `quasi-rrho` (Grimme 2012) or `harmonic`.
        low_frequency: LowFrequency,
        /// Tunnelling correction: `none` or `wigner`.
        tunnelling: Tunnelling,
    }
);

/// Standard states as written in a study file.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Deserialize, Serialize)]
pub enum StandardStateName {
    #[serde(rename = "1-bar")]
    OneBar,
    #[serde(rename = "1-molar")]
    OneMolar,
}

/// Treatment of low-frequency modes in the entropy.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Deserialize, Serialize)]
#[serde(rename_all = "kebab-case")]
pub enum LowFrequency {
    /// Every mode a harmonic oscillator.
    Harmonic,
    /// Grimme's quasi-RRHO: soft modes' entropy blended into a free rotor's (ω0 = 100 cm⁻¹).
    QuasiRrho,
}

/// Tunnelling correction of the rate constants.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Deserialize, Serialize)]
#[serde(rename_all = "kebab-case")]
pub enum Tunnelling {
    /// No correction (κ = 1).
    #[serde(rename = "none")]
    Off,
    /// Wigner's κ = 1 + (hcν‡/k_BT)²/24.
    Wigner,
}

/// Saddle refinement methods.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Deserialize, Serialize)]
#[serde(rename_all = "kebab-case")]
pub enum RefineMethod {
    /// Partitioned rational-function optimisation (Baker 1986).
    Prfo,
}

/// A pipeline entry as written: a stage name alone (`- verify`) or a stage name with options
/// (`- band: {images: 9}`).
#[derive(Debug, Clone, PartialEq)]
pub enum RawStage {
    RelaxEnds(RelaxOpts),
    Band(BandOpts),
    Scan(ScanOpts),
    Walk(WalkOpts),
    Refine(RefineOpts),
    Modes(ModesOpts),
    Irc(IrcOpts),
    Verify(VerifyOpts),
    Rates(RatesOpts),
}

/// Stage names, in the order they usually run.
pub const STAGE_NAMES: [&str; 9] = [
    "relax-ends",
    "band",
    "scan",
    "walk",
    "refine",
    "modes",
    "irc",
    "verify",
    "rates",
];

impl RawStage {
    pub fn name(&self) -> &'static str {
        match self {
            RawStage::RelaxEnds(_) => "relax-ends",
            RawStage::Band(_) => "band",
            RawStage::Scan(_) => "scan",
            RawStage::Walk(_) => "walk",
            RawStage::Refine(_) => "refine",
            RawStage::Modes(_) => "modes",
            RawStage::Irc(_) => "irc",
            RawStage::Verify(_) => "verify",
            RawStage::Rates(_) => "rates",
        }
    }

    fn unit(name: &str) -> Option<RawStage> {
        Some(match name {
            "relax-ends" => RawStage::RelaxEnds(Default::default()),
            "band" => RawStage::Band(Default::default()),
            "scan" => RawStage::Scan(Default::default()),
            "walk" => RawStage::Walk(Default::default()),
            "refine" => RawStage::Refine(Default::default()),
            "modes" => RawStage::Modes(Default::default()),
            "irc" => RawStage::Irc(Default::default()),
            "verify" => RawStage::Verify(Default::default()),
            "rates" => RawStage::Rates(Default::default()),
            _ => return None,
        })
    }
}

fn unknown_stage(name: &str) -> String {
    format!(
        "unknown stage \"{name}\" (known: {})",
        STAGE_NAMES.join(", ")
    )
}

impl<'de> Deserialize<'de> for RawStage {
    fn deserialize<D: Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
        struct V;
        impl<'de> Visitor<'de> for V {
            type Value = RawStage;
            fn expecting(&self, f: &mut fmt::Formatter) -> fmt::Result {
                f.write_str("a stage name (e.g. `verify`) or a stage with options (e.g. `band: {images: 9}`)")
            }
            fn visit_str<E: de::Error>(self, v: &str) -> Result<RawStage, E> {
                RawStage::unit(v).ok_or_else(|| E::custom(unknown_stage(v)))
            }
            fn visit_map<A: MapAccess<'de>>(self, mut map: A) -> Result<RawStage, A::Error> {
                let name: String = match map.next_key()? {
                    Some(n) => n,
                    None => {
                        return Err(de::Error::custom(
                            "empty stage: write a stage name, e.g. `- refine`",
                        ))
                    }
                };
                let stage = match name.as_str() {
                    "relax-ends" => RawStage::RelaxEnds(options_or_default(&mut map)?),
                    "band" => RawStage::Band(options_or_default(&mut map)?),
                    "scan" => RawStage::Scan(options_or_default(&mut map)?),
                    "walk" => RawStage::Walk(options_or_default(&mut map)?),
                    "refine" => RawStage::Refine(options_or_default(&mut map)?),
                    "modes" => RawStage::Modes(options_or_default(&mut map)?),
                    "irc" => RawStage::Irc(options_or_default(&mut map)?),
                    "verify" => RawStage::Verify(options_or_default(&mut map)?),
                    "rates" => RawStage::Rates(options_or_default(&mut map)?),
                    other => return Err(de::Error::custom(unknown_stage(other))),
                };
                if let Some(extra) = map.next_key::<String>()? {
                    return Err(de::Error::custom(format!(
                        "one stage per list entry: \"{extra}\" follows \"{name}\" in the same entry; start it on its own line with `- {extra}`"
                    )));
                }
                Ok(stage)
            }
        }
        d.deserialize_any(V)
    }
}

/// `band:` with nothing after it (YAML null) means default options.
fn options_or_default<'de, A: MapAccess<'de>, T: Deserialize<'de> + Default>(
    map: &mut A,
) -> Result<T, A::Error> {
    Ok(map.next_value::<Option<T>>()?.unwrap_or_default())
}

/// `options:` in a reaction: per stage, the options to change.
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields, rename_all = "kebab-case")]
pub struct RawOptions {
    #[serde(default)]
    pub relax_ends: Option<RelaxOpts>,
    #[serde(default)]
    pub band: Option<BandOpts>,
    #[serde(default)]
    pub scan: Option<ScanOpts>,
    #[serde(default)]
    pub walk: Option<WalkOpts>,
    #[serde(default)]
    pub refine: Option<RefineOpts>,
    #[serde(default)]
    pub modes: Option<ModesOpts>,
    #[serde(default)]
    pub irc: Option<IrcOpts>,
    #[serde(default)]
    pub verify: Option<VerifyOpts>,
    #[serde(default)]
    pub rates: Option<RatesOpts>,
}

impl RawOptions {
    /// Names of the stages this reaction changes options of.
    pub fn stage_names(&self) -> Vec<&'static str> {
        [
            ("relax-ends", self.relax_ends.is_some()),
            ("band", self.band.is_some()),
            ("scan", self.scan.is_some()),
            ("walk", self.walk.is_some()),
            ("refine", self.refine.is_some()),
            ("modes", self.modes.is_some()),
            ("irc", self.irc.is_some()),
            ("verify", self.verify.is_some()),
            ("rates", self.rates.is_some()),
        ]
        .into_iter()
        .filter_map(|(name, given)| given.then_some(name))
        .collect()
    }

    /// `stage` with this reaction's options laid over it.
    pub fn apply(&self, stage: &RawStage) -> RawStage {
        match stage {
            RawStage::RelaxEnds(o) => RawStage::RelaxEnds(over(o, &self.relax_ends)),
            RawStage::Band(o) => RawStage::Band(over(o, &self.band)),
            RawStage::Scan(o) => RawStage::Scan(over(o, &self.scan)),
            RawStage::Walk(o) => RawStage::Walk(over(o, &self.walk)),
            RawStage::Refine(o) => RawStage::Refine(over(o, &self.refine)),
            RawStage::Modes(o) => RawStage::Modes(over(o, &self.modes)),
            RawStage::Irc(o) => RawStage::Irc(over(o, &self.irc)),
            RawStage::Verify(o) => RawStage::Verify(over(o, &self.verify)),
            RawStage::Rates(o) => RawStage::Rates(over(o, &self.rates)),
        }
    }
}

trait Merge {
    fn merge(&self, other: &Self) -> Self;
}
macro_rules! impl_merge {
    ($($t:ty),*) => {$(impl Merge for $t { fn merge(&self, o: &Self) -> Self { self.merged(o) } })*};
}
impl_merge!(
    RelaxOpts, BandOpts, ScanOpts, WalkOpts, RefineOpts, ModesOpts, IrcOpts, VerifyOpts, RatesOpts
);

fn over<T: Merge + Clone>(base: &T, top: &Option<T>) -> T {
    match top {
        Some(t) => base.merge(t),
        None => base.clone(),
    }
}

// ---- levels: an ordered map with unique names, duplicates reported at the key ----

impl<'de> Deserialize<'de> for Levels {
    fn deserialize<D: Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
        struct V;
        impl<'de> Visitor<'de> for V {
            type Value = Levels;
            fn expecting(&self, f: &mut fmt::Formatter) -> fmt::Result {
                f.write_str("a map from level names to {engine, settings}")
            }
            fn visit_map<A: MapAccess<'de>>(self, mut map: A) -> Result<Levels, A::Error> {
                let mut seen = HashSet::new();
                let mut out = Vec::new();
                while let Some(name) = map.next_key_seed(UniqueKey {
                    seen: &seen,
                    what: "level",
                })? {
                    let level: RawLevel = map.next_value()?;
                    seen.insert(name.clone());
                    out.push((name, level));
                }
                Ok(Levels(out))
            }
        }
        d.deserialize_map(V)
    }
}

/// Reads a map key and fails (at the key's own position) if it was seen before.
struct UniqueKey<'a> {
    seen: &'a HashSet<String>,
    what: &'static str,
}

impl<'de> DeserializeSeed<'de> for UniqueKey<'_> {
    type Value = String;
    fn deserialize<D: Deserializer<'de>>(self, d: D) -> Result<String, D::Error> {
        d.deserialize_str(self)
    }
}

impl Visitor<'_> for UniqueKey<'_> {
    type Value = String;
    fn expecting(&self, f: &mut fmt::Formatter) -> fmt::Result {
        write!(f, "a {} name", self.what)
    }
    fn visit_str<E: de::Error>(self, v: &str) -> Result<String, E> {
        if self.seen.contains(v) {
            Err(E::custom(format!(
                "{} \"{v}\" is defined twice; give each {} its own name",
                self.what, self.what
            )))
        } else {
            Ok(v.to_string())
        }
    }
}

/// Settings: a map of scalars, kept as text in file order. Nested maps or lists are errors.
pub fn deserialize_settings<'de, D: Deserializer<'de>>(
    d: D,
) -> Result<Vec<(String, String)>, D::Error> {
    struct V;
    impl<'de> Visitor<'de> for V {
        type Value = Vec<(String, String)>;
        fn expecting(&self, f: &mut fmt::Formatter) -> fmt::Result {
            f.write_str("a map of settings, e.g. {method: gfn2}")
        }
        fn visit_unit<E: de::Error>(self) -> Result<Self::Value, E> {
            Ok(Vec::new())
        }
        fn visit_map<A: MapAccess<'de>>(self, mut map: A) -> Result<Self::Value, A::Error> {
            let mut seen = HashSet::new();
            let mut out = Vec::new();
            while let Some(k) = map.next_key_seed(UniqueKey {
                seen: &seen,
                what: "setting",
            })? {
                let v: Scalar = map.next_value()?;
                seen.insert(k.clone());
                out.push((k, v.0));
            }
            Ok(out)
        }
    }
    d.deserialize_any(V)
}

/// Any YAML scalar, as text.
#[derive(Debug, Clone)]
pub struct Scalar(pub String);

impl<'de> Deserialize<'de> for Scalar {
    fn deserialize<D: Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
        struct V;
        impl<'de> Visitor<'de> for V {
            type Value = Scalar;
            fn expecting(&self, f: &mut fmt::Formatter) -> fmt::Result {
                f.write_str("a single value (text, number or true/false), not a list or map")
            }
            fn visit_str<E: de::Error>(self, v: &str) -> Result<Scalar, E> {
                Ok(Scalar(v.to_string()))
            }
            fn visit_bool<E: de::Error>(self, v: bool) -> Result<Scalar, E> {
                Ok(Scalar(v.to_string()))
            }
            fn visit_i64<E: de::Error>(self, v: i64) -> Result<Scalar, E> {
                Ok(Scalar(v.to_string()))
            }
            fn visit_u64<E: de::Error>(self, v: u64) -> Result<Scalar, E> {
                Ok(Scalar(v.to_string()))
            }
            fn visit_f64<E: de::Error>(self, v: f64) -> Result<Scalar, E> {
                Ok(Scalar(v.to_string()))
            }
            fn visit_map<A: MapAccess<'de>>(self, mut map: A) -> Result<Scalar, A::Error> {
                while map.next_entry::<IgnoredAny, IgnoredAny>()?.is_some() {}
                Err(de::Error::custom(
                    "a setting takes a single value (text, number or true/false), not a map",
                ))
            }
            fn visit_seq<A: de::SeqAccess<'de>>(self, mut seq: A) -> Result<Scalar, A::Error> {
                while seq.next_element::<IgnoredAny>()?.is_some() {}
                Err(de::Error::custom(
                    "a setting takes a single value (text, number or true/false), not a list",
                ))
            }
        }
        d.deserialize_any(V)
    }
}
