//! The validated study: every name resolved, every file read, every stage's options complete.

use super::raw::{LowFrequency, RefineMethod, Tunnelling};
use crate::engine::Settings;
use crate::molecule::Molecule;
use crate::thermo::StandardState;
use serde::{Deserialize, Serialize};
use std::path::PathBuf;

/// A study, checked: levels exist, geometry files were read, charges and multiplicities fit,
/// endpoints have the same atoms, every stage gets its input from the start or an earlier stage.
#[derive(Debug, Clone)]
pub struct Study {
    /// The study file as named by the user.
    pub file: PathBuf,
    /// The study file's text (for locating errors found later, e.g. a missing engine).
    pub source: String,
    /// Directory that relative geometry paths are resolved against (the study file's folder).
    pub base: PathBuf,
    /// `study:` from the file, else the file's stem.
    pub name: String,
    pub about: Option<String>,
    pub levels: Vec<Level>,
    pub defaults: Defaults,
    pub reactions: Vec<Reaction>,
}

impl Study {
    pub fn level(&self, name: &str) -> Option<&Level> {
        self.levels.iter().find(|l| l.name == name)
    }
    pub fn reaction(&self, name: &str) -> Option<&Reaction> {
        self.reactions.iter().find(|r| r.name == name)
    }
}

/// A named level of theory: an engine (adapter name) and its settings.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Level {
    pub name: String,
    pub engine: String,
    pub settings: Settings,
    /// Threads per engine run (the pool runs `--jobs` runs at once, each with this many).
    pub threads: u32,
    /// Its `slurm:` block (used by the Slurm executor; defaults when absent).
    pub slurm: Option<crate::slurm::SlurmOptions>,
}

impl Level {
    /// Canonical text of what this level computes with (engine and sorted settings); goes into
    /// species keys, so two levels that differ only in name share results.
    pub fn identity(&self) -> String {
        let mut s = format!("engine={}", self.engine);
        for (k, v) in &self.settings {
            s.push_str(&format!(";{k}={v}"));
        }
        s
    }
}

/// What every reaction gets unless it says otherwise.
#[derive(Debug, Clone, PartialEq)]
pub struct Defaults {
    pub charge: i32,
    pub multiplicity: u32,
    pub level: String,
    pub retries: u32,
    pub timeout_seconds: Option<f64>,
    /// Where engine evaluations run (`cairn run --executor` overrides it).
    pub executor: ExecutorKind,
}

/// Where engine evaluations run.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq, Serialize, Deserialize, clap::ValueEnum)]
#[serde(rename_all = "lowercase")]
pub enum ExecutorKind {
    /// A bounded pool of engine processes on this machine (`--jobs`).
    #[default]
    Local,
    /// One Slurm batch job per group of evaluations (see the levels' `slurm:` blocks).
    Slurm,
}
#[derive(Debug, Clone)]
pub struct Reaction {
    pub name: String,
    pub about: Option<String>,
    pub charge: i32,
    pub multiplicity: u32,
    /// The reaction's level (stages may use another one).
    pub level: String,
    pub start: Start,
    /// The stages that run for this reaction, in order.
    pub stages: Vec<Stage>,
    /// Pipeline stages that do not apply to this reaction's start (e.g. `band` for a reaction
    /// started from a saddle guess).
    pub not_applicable: Vec<StageKind>,
}

impl Reaction {
    /// The reactant (and product) this reaction starts from or is checked against, if any.
    pub fn ends(&self) -> (Option<&Geometry>, Option<&Geometry>) {
        match &self.start {
            Start::Ends { reactant, product } => (Some(reactant), Some(product)),
            Start::Guess { ends, .. } => match ends {
                Some((r, p)) => (Some(r), Some(p)),
                None => (None, None),
            },
            Start::Drive { reactant, .. } | Start::Alone { reactant } => (Some(reactant), None),
        }
    }

    /// Number of atoms (all geometries of a reaction have the same atoms).
    pub fn atom_count(&self) -> usize {
        match &self.start {
            Start::Ends { reactant, .. }
            | Start::Drive { reactant, .. }
            | Start::Alone { reactant } => reactant.molecule.len(),
            Start::Guess { guess, .. } => guess.molecule.len(),
        }
    }
}

/// How a reaction starts.
#[derive(Debug, Clone)]
pub enum Start {
    /// Reactant and product: a band finds the saddle guess.
    Ends {
        reactant: Geometry,
        product: Geometry,
    },
    /// A saddle guess from chemical intuition; optionally the ends the IRC should reach.
    Guess {
        guess: Geometry,
        ends: Option<(Geometry, Geometry)>,
    },
    /// A reactant and a distance to drive: a scan finds the saddle guess.
    Drive { reactant: Geometry, drive: Drive },
    /// A reactant alone: walk uphill along a soft mode.
    Alone { reactant: Geometry },
}

impl Start {
    /// Words for people: "reactant + product", ...
    pub fn describe(&self) -> &'static str {
        match self {
            Start::Ends { .. } => "reactant + product",
            Start::Guess { ends: None, .. } => "saddle guess",
            Start::Guess { ends: Some(_), .. } => "saddle guess (+ reactant, product to reach)",
            Start::Drive { .. } => "reactant + driven distance",
            Start::Alone { .. } => "reactant alone (walk uphill)",
        }
    }
}

/// A geometry from a file: where it came from and the molecule (bohr, with the reaction's
/// charge and multiplicity set).
#[derive(Debug, Clone)]
pub struct Geometry {
    /// The path as written in the study file.
    pub written: String,
    /// The path resolved against the study file's folder.
    pub path: PathBuf,
    pub molecule: Molecule,
}

/// A driven distance between two atoms.
#[derive(Debug, Clone, PartialEq)]
pub struct Drive {
    /// Atom indices, 0-based.
    pub atoms: [usize; 2],
    /// Distance in the reactant, bohr.
    pub from_bohr: f64,
    /// Target distance, bohr.
    pub to_bohr: f64,
}

/// The stage kinds.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum StageKind {
    RelaxEnds,
    Band,
    Scan,
    Walk,
    Refine,
    Modes,
    Irc,
    Verify,
    Rates,
}

impl StageKind {
    pub fn name(self) -> &'static str {
        match self {
            StageKind::RelaxEnds => "relax-ends",
            StageKind::Band => "band",
            StageKind::Scan => "scan",
            StageKind::Walk => "walk",
            StageKind::Refine => "refine",
            StageKind::Modes => "modes",
            StageKind::Irc => "irc",
            StageKind::Verify => "verify",
            StageKind::Rates => "rates",
        }
    }
}

impl std::fmt::Display for StageKind {
    fn fmt(&self, f: &mut std::fmt::Formatter) -> std::fmt::Result {
        f.write_str(self.name())
    }
}

/// One stage with its options complete (built-in defaults, then the pipeline's options, then
/// the reaction's).
#[derive(Debug, Clone, PartialEq)]
pub struct Stage {
    /// Level of theory (a name from `levels`).
    pub level: String,
    /// Attempts after the first, per engine call.
    pub retries: u32,
    /// Wall-time limit per engine call, seconds (None = no limit).
    pub timeout_seconds: Option<f64>,
    pub spec: StageSpec,
}

impl Stage {
    pub fn kind(&self) -> StageKind {
        self.spec.kind()
    }
}

/// Stage-specific options, complete.
#[derive(Debug, Clone, PartialEq)]
pub enum StageSpec {
    RelaxEnds {
        max_steps: u32,
    },
    Band {
        /// Movable images between the ends.
        images: u32,
        climbing: bool,
        max_steps: u32,
    },
    Scan {
        /// Points including the start.
        points: u32,
        /// Minimiser steps per point.
        max_steps: u32,
    },
    Walk {
        /// 1 = softest mode.
        mode: u32,
        max_steps: u32,
    },
    Refine {
        method: RefineMethod,
        max_steps: u32,
        /// Recompute the exact Hessian every this many steps (0 = only at the start).
        fresh_hessian_every: u32,
    },
    Modes {
        /// |ν| below this counts as noise, cm⁻¹.
        imaginary_threshold_cm1: f64,
    },
    Irc {
        /// √amu·bohr.
        step: f64,
        /// Per direction.
        max_steps: u32,
    },
    Verify {
        /// Å.
        same_species_rmsd_angstrom: f64,
        max_steps: u32,
    },
    Rates(RatesSpec),
}

/// Options of the `rates` stage, complete.
#[derive(Debug, Clone, PartialEq)]
pub struct RatesSpec {
    /// Temperatures, K (at least one).
    pub temperatures_k: Vec<f64>,
    pub standard_state: StandardState,
    pub low_frequency: LowFrequency,
    pub tunnelling: Tunnelling,
}

impl StageSpec {
    pub fn kind(&self) -> StageKind {
        match self {
            StageSpec::RelaxEnds { .. } => StageKind::RelaxEnds,
            StageSpec::Band { .. } => StageKind::Band,
            StageSpec::Scan { .. } => StageKind::Scan,
            StageSpec::Walk { .. } => StageKind::Walk,
            StageSpec::Refine { .. } => StageKind::Refine,
            StageSpec::Modes { .. } => StageKind::Modes,
            StageSpec::Irc { .. } => StageKind::Irc,
            StageSpec::Verify { .. } => StageKind::Verify,
            StageSpec::Rates(_) => StageKind::Rates,
        }
    }

    /// The options as one line with units, for `cairn check`.
    pub fn describe(&self) -> String {
        match self {
            StageSpec::RelaxEnds { max_steps } => format!("max {max_steps} steps"),
            StageSpec::Band {
                images,
                climbing,
                max_steps,
            } => format!(
                "{images} images, climbing image {}, max {max_steps} steps",
                if *climbing { "on" } else { "off" }
            ),
            StageSpec::Scan { points, max_steps } => {
                format!("{points} points, max {max_steps} steps per point")
            }
            StageSpec::Walk { mode, max_steps } => {
                format!("mode {mode}, max {max_steps} steps")
            }
            StageSpec::Refine {
                method,
                max_steps,
                fresh_hessian_every,
            } => {
                let m = match method {
                    RefineMethod::Prfo => "P-RFO",
                };
                let h = if *fresh_hessian_every == 0 {
                    "exact Hessian at the start only".to_string()
                } else {
                    format!("exact Hessian every {fresh_hessian_every} steps")
                };
                format!("{m}, max {max_steps} steps, {h}")
            }
            StageSpec::Modes {
                imaginary_threshold_cm1,
            } => format!("imaginary if |ν| > {imaginary_threshold_cm1} cm⁻¹"),
            StageSpec::Irc { step, max_steps } => {
                format!("step {step} √amu·bohr, max {max_steps} steps each way")
            }
            StageSpec::Verify {
                same_species_rmsd_angstrom,
                max_steps,
            } => format!(
                "same species within RMSD {same_species_rmsd_angstrom} Å, max {max_steps} steps per end"
            ),
            StageSpec::Rates(r) => {
                let temps: Vec<String> = r.temperatures_k.iter().map(|t| format!("{t}")).collect();
                format!(
                    "T = {} K, standard state {}, low frequencies {}, tunnelling {}",
                    temps.join(", "),
                    r.standard_state.label(),
                    match r.low_frequency {
                        LowFrequency::Harmonic => "harmonic",
                        LowFrequency::QuasiRrho => "quasi-RRHO",
                    },
                    match r.tunnelling {
                        Tunnelling::Off => "none",
                        Tunnelling::Wigner => "Wigner",
                    }
                )
            }
        }
    }
}
