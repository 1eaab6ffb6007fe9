//! The plan: every reaction's stages as one dependency graph, with identical species shared.
//!
//! Tasks are either the relaxation of one species (a reactant or product, identified by its
//! content: elements, exact coordinate bits, charge, multiplicity, level and relaxation options,
//! so a reactant used by three reactions is relaxed once) or one stage of one reaction. Edges are
//! data dependencies. [`Plan::queue`] gives the pure ready-queue the runner drains.

use super::model::*;
use super::queue::ReadyQueue;
use petgraph::graph::NodeIndex;
use sha2::{Digest, Sha256};
use std::collections::BTreeMap;

/// One task of the plan.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Task {
    /// Relax species `species` (index into [`Plan::species`]).
    Relax { species: usize },
    /// Stage `stage` (index into the reaction's `stages`) of reaction `reaction`.
    Stage { reaction: usize, stage: usize },
}

/// Which end of a reaction a species is.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Role {
    Reactant,
    Product,
}

impl Role {
    pub fn name(self) -> &'static str {
        match self {
            Role::Reactant => "reactant",
            Role::Product => "product",
        }
    }
}

/// A species to relax, shared by every reaction that has it as an end.
#[derive(Debug, Clone)]
pub struct Species {
    /// Content key (hex SHA-256), see [`species_key`].
    pub key: String,
    pub formula: String,
    /// The geometry file as first written in the study.
    pub file: String,
    pub level: String,
    /// The relaxation (from the first reaction that uses it; part of the key, so all agree).
    pub stage: Stage,
    pub used_by: Vec<(usize, Role)>,
}

/// Engine calls, split by kind.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq)]
pub struct Calls {
    pub gradients: u64,
    pub hessians: u64,
}

impl Calls {
    pub fn total(self) -> u64 {
        self.gradients + self.hessians
    }
}

impl std::ops::Add for Calls {
    type Output = Calls;
    fn add(self, o: Calls) -> Calls {
        Calls {
            gradients: self.gradients + o.gradients,
            hessians: self.hessians + o.hessians,
        }
    }
}

/// A rough estimate of engine calls: what a stage typically takes, and the most it may take
/// (from its step limits). Typical counts are rules of thumb (common practice for small
/// molecules), not promises.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq)]
pub struct Estimate {
    pub typical: Calls,
    pub at_most: Calls,
}

impl std::ops::Add for Estimate {
    type Output = Estimate;
    fn add(self, o: Estimate) -> Estimate {
        Estimate {
            typical: self.typical + o.typical,
            at_most: self.at_most + o.at_most,
        }
    }
}

fn calls(gradients: u64, hessians: u64) -> Calls {
    Calls {
        gradients,
        hessians,
    }
}

/// Estimate for one stage (relax-ends counts one species).
pub fn estimate(stage: &Stage) -> Estimate {
    let cap = |max: u32, typical: u64| typical.min(u64::from(max));
    match stage.spec {
        StageSpec::RelaxEnds { max_steps } => Estimate {
            typical: calls(cap(max_steps, 30), 0),
            at_most: calls(u64::from(max_steps), 0),
        },
        StageSpec::Band {
            images, max_steps, ..
        } => Estimate {
            typical: calls(u64::from(images) * cap(max_steps, 80), 0),
            at_most: calls(u64::from(images) * u64::from(max_steps), 0),
        },
        StageSpec::Scan { points, max_steps } => Estimate {
            typical: calls(u64::from(points) * cap(max_steps, 15), 0),
            at_most: calls(u64::from(points) * u64::from(max_steps), 0),
        },
        StageSpec::Walk { max_steps, .. } => Estimate {
            typical: calls(0, cap(max_steps, 20)),
            at_most: calls(0, u64::from(max_steps)),
        },
        StageSpec::Refine {
            max_steps,
            fresh_hessian_every,
            ..
        } => {
            let fresh = |steps: u64| {
                1 + if fresh_hessian_every == 0 {
                    0
                } else {
                    steps / u64::from(fresh_hessian_every)
                }
            };
            let t = cap(max_steps, 20);
            Estimate {
                typical: calls(t, fresh(t)),
                at_most: calls(u64::from(max_steps), fresh(u64::from(max_steps))),
            }
        }
        StageSpec::Modes { .. } => Estimate {
            typical: calls(0, 1),
            at_most: calls(0, 1),
        },
        StageSpec::Irc { max_steps, .. } => Estimate {
            typical: calls(2 * cap(max_steps, 30), 0),
            at_most: calls(2 * u64::from(max_steps), 0),
        },
        StageSpec::Verify { max_steps, .. } => Estimate {
            typical: calls(2 * cap(max_steps, 30), 0),
            at_most: calls(2 * u64::from(max_steps), 0),
        },
        // Hessians at reactant, product and saddle (the saddle's is a store hit when `modes`
        // ran at the same level).
        StageSpec::Rates(_) => Estimate {
            typical: calls(0, 3),
            at_most: calls(0, 3),
        },
    }
}

/// Content key of a species relaxation: everything that changes its result.
///
/// | part | why |
/// |---|---|
/// | elements (atomic numbers, in order) | the molecule |
/// | exact bits of every coordinate (bohr) | the starting point; equal text in XYZ gives equal bits |
/// | charge, multiplicity | the electronic state |
/// | level identity (engine and settings) | the model chemistry |
/// | relaxation options (max steps) | where the minimiser may stop |
pub fn species_key(g: &Geometry, level: &Level, stage: &Stage) -> String {
    let m = &g.molecule;
    let mut h = Sha256::new();
    h.update(b"cairn-species-v1\n");
    h.update(level.identity().as_bytes());
    h.update(format!("\ncharge={}\nmultiplicity={}\n", m.charge, m.multiplicity).as_bytes());
    if let StageSpec::RelaxEnds { max_steps } = stage.spec {
        h.update(format!("relax.max_steps={max_steps}\n").as_bytes());
    }
    for (e, c) in m.elements.iter().zip(&m.coords) {
        h.update(
            format!(
                "{} {:016x} {:016x} {:016x}\n",
                e.z(),
                c[0].to_bits(),
                c[1].to_bits(),
                c[2].to_bits()
            )
            .as_bytes(),
        );
    }
    hex::encode(h.finalize())
}

/// The whole study as tasks with dependencies.
#[derive(Debug, Clone)]
pub struct Plan {
    /// Tasks in insertion order (dependencies always come first), each with what it needs.
    pub tasks: Vec<(Task, Vec<NodeIndex>)>,
    pub species: Vec<Species>,
    /// Per reaction, per stage: the task index (None for `relax-ends`, which is species tasks).
    pub stage_task: Vec<Vec<Option<NodeIndex>>>,
    /// Per reaction: its species (reactant first) when it has `relax-ends`.
    pub reaction_species: Vec<Vec<(Role, usize)>>,
}

impl Plan {
    /// Build the plan for a validated study. Pure: no files, no engines.
    pub fn new(study: &Study) -> Plan {
        let mut tasks: Vec<(Task, Vec<NodeIndex>)> = Vec::new();
        let mut species: Vec<Species> = Vec::new();
        let mut by_key: BTreeMap<String, (usize, NodeIndex)> = BTreeMap::new();
        let mut stage_task = Vec::new();
        let mut reaction_species = Vec::new();
        let push = |tasks: &mut Vec<(Task, Vec<NodeIndex>)>, t: Task, deps: Vec<NodeIndex>| {
            tasks.push((t, deps));
            NodeIndex::new(tasks.len() - 1)
        };
        for (ri, r) in study.reactions.iter().enumerate() {
            let mut ends_node: Vec<NodeIndex> = Vec::new();
            let mut my_species = Vec::new();
            let mut guess = None;
            let mut saddle = None;
            let mut modes = None;
            let mut irc = None;
            let mut verify = None;
            let mut per_stage = Vec::new();
            for (si, st) in r.stages.iter().enumerate() {
                if st.kind() == StageKind::RelaxEnds {
                    let (re, pr) = r.ends();
                    for (role, g) in [(Role::Reactant, re), (Role::Product, pr)] {
                        let g = match g {
                            Some(g) => g,
                            None => continue,
                        };
                        let level = match study.level(&st.level) {
                            Some(l) => l,
                            None => continue, // validated: cannot happen
                        };
                        let key = species_key(g, level, st);
                        let (idx, node) = match by_key.get(&key) {
                            Some(&(idx, node)) => (idx, node),
                            None => {
                                let node = push(
                                    &mut tasks,
                                    Task::Relax {
                                        species: species.len(),
                                    },
                                    vec![],
                                );
                                species.push(Species {
                                    key: key.clone(),
                                    formula: g.molecule.formula(),
                                    file: g.written.clone(),
                                    level: st.level.clone(),
                                    stage: st.clone(),
                                    used_by: vec![],
                                });
                                by_key.insert(key, (species.len() - 1, node));
                                (species.len() - 1, node)
                            }
                        };
                        if let Some(s) = species.get_mut(idx) {
                            s.used_by.push((ri, role));
                        }
                        my_species.push((role, idx));
                        ends_node.push(node);
                    }
                    per_stage.push(None);
                    continue;
                }
                let mut deps: Vec<NodeIndex> = Vec::new();
                match st.kind() {
                    StageKind::Band | StageKind::Scan | StageKind::Walk => {
                        deps.extend(&ends_node);
                    }
                    StageKind::Refine => deps.extend(guess),
                    StageKind::Modes => deps.extend(saddle),
                    StageKind::Irc => {
                        deps.extend(saddle);
                        deps.extend(modes);
                    }
                    StageKind::Verify => {
                        deps.extend(saddle);
                        deps.extend(irc);
                        deps.extend(modes);
                        deps.extend(&ends_node);
                    }
                    StageKind::Rates => {
                        deps.extend(saddle);
                        deps.extend(modes);
                        deps.extend(verify);
                        deps.extend(&ends_node);
                    }
                    StageKind::RelaxEnds => {}
                }
                let node = push(
                    &mut tasks,
                    Task::Stage {
                        reaction: ri,
                        stage: si,
                    },
                    deps,
                );
                match st.kind() {
                    StageKind::Band | StageKind::Scan | StageKind::Walk => guess = Some(node),
                    StageKind::Refine => saddle = Some(node),
                    StageKind::Modes => modes = Some(node),
                    StageKind::Irc => irc = Some(node),
                    StageKind::Verify => verify = Some(node),
                    _ => {}
                }
                per_stage.push(Some(node));
            }
            stage_task.push(per_stage);
            reaction_species.push(my_species);
        }
        Plan {
            tasks,
            species,
            stage_task,
            reaction_species,
        }
    }

    /// A fresh ready-queue over the plan's tasks (node indices equal task indices). The cost
    /// of a task is its typical engine-call estimate.
    pub fn queue(&self, study: &Study) -> ReadyQueue<Task> {
        let mut q = ReadyQueue::new();
        for (t, deps) in &self.tasks {
            let cost = self.task_estimate(study, t).typical.total().max(1);
            // Dependencies always precede the task, so `add` cannot fail here.
            let _ = q.add(t.clone(), cost, deps);
        }
        q.finish_adding();
        q
    }

    pub fn task_estimate(&self, study: &Study, t: &Task) -> Estimate {
        match *t {
            Task::Relax { species } => self
                .species
                .get(species)
                .map(|s| estimate(&s.stage))
                .unwrap_or_default(),
            Task::Stage { reaction, stage } => study
                .reactions
                .get(reaction)
                .and_then(|r| r.stages.get(stage))
                .map(estimate)
                .unwrap_or_default(),
        }
    }

    /// A reaction's estimate if it ran alone (its species counted in full).
    pub fn reaction_estimate(&self, study: &Study, reaction: usize) -> Estimate {
        let r = match study.reactions.get(reaction) {
            Some(r) => r,
            None => return Estimate::default(),
        };
        let mut e = Estimate::default();
        for st in &r.stages {
            let one = estimate(st);
            if st.kind() == StageKind::RelaxEnds {
                let n = self.reaction_species.get(reaction).map_or(0, Vec::len) as u64;
                e = e + Estimate {
                    typical: calls(one.typical.gradients * n, one.typical.hessians * n),
                    at_most: calls(one.at_most.gradients * n, one.at_most.hessians * n),
                };
            } else {
                e = e + one;
            }
        }
        e
    }

    /// The whole study, shared species counted once.
    pub fn total_estimate(&self, study: &Study) -> Estimate {
        self.tasks
            .iter()
            .map(|(t, _)| self.task_estimate(study, t))
            .fold(Estimate::default(), |a, b| a + b)
    }

    /// Species used by more than one reaction (or twice by one).
    pub fn shared_species(&self) -> impl Iterator<Item = &Species> {
        self.species.iter().filter(|s| s.used_by.len() > 1)
    }

    /// How many species relaxations sharing saved.
    pub fn relaxations_saved(&self) -> usize {
        self.species
            .iter()
            .map(|s| s.used_by.len().saturating_sub(1))
            .sum()
    }
}
