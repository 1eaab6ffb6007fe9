//! The plan: species shared by content, dependencies in order, the ready queue drains it.

use cairn::study::plan::{Role, Task};
use cairn::study::queue::TaskState;
use cairn::study::{self, Plan, StageKind};
use std::path::PathBuf;

fn data(f: &str) -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
        .join("tests/data/studies")
        .join(f)
}

#[test]
fn species_are_shared_across_reactions() {
    let s = study::load(&data("mb.yaml")).unwrap();
    let plan = Plan::new(&s);
    // Ends: A (twice), B, C (twice) -> 3 relaxations instead of 5.
    assert_eq!(plan.species.len(), 3);
    assert_eq!(plan.relaxations_saved(), 2);
    let relax_tasks = plan
        .tasks
        .iter()
        .filter(|(t, _)| matches!(t, Task::Relax { .. }))
        .count();
    assert_eq!(relax_tasks, 3);
    let a = &plan.species[0];
    assert_eq!(a.file, "geometries/mb-a.xyz");
    assert_eq!(a.used_by, vec![(0, Role::Reactant), (1, Role::Reactant)]);
    let c = plan
        .species
        .iter()
        .find(|sp| sp.file == "geometries/mb-c.xyz")
        .unwrap();
    assert_eq!(c.used_by, vec![(1, Role::Product), (2, Role::Reactant)]);
    // 3 relaxations + stages: a-to-b 5, a-to-c 5, c-uphill 5, s1-guess 4.
    assert_eq!(plan.tasks.len(), 3 + 5 + 5 + 5 + 4);
}

#[test]
fn identical_content_in_two_files_is_one_species_but_charge_or_level_splits_it() {
    let dir = tempfile::tempdir().unwrap();
    let hcn = std::fs::read_to_string(data("geometries/hcn.xyz")).unwrap();
    let hnc = std::fs::read_to_string(data("geometries/hnc.xyz")).unwrap();
    std::fs::write(dir.path().join("hcn.xyz"), &hcn).unwrap();
    std::fs::write(dir.path().join("hcn-copy.xyz"), &hcn).unwrap();
    std::fs::write(dir.path().join("hnc.xyz"), &hnc).unwrap();
    let text = "\
levels:
  fast: {engine: xtb, settings: {method: gfn2}}
  other: {engine: xtb, settings: {method: gfn1}}
defaults: {level: fast}
pipeline: [relax-ends, band, refine, modes, irc, verify]
reactions:
  - {name: one, reactant: hcn.xyz, product: hnc.xyz}
  - {name: two, reactant: hcn-copy.xyz, product: hnc.xyz}
  - {name: cation, reactant: hcn.xyz, product: hnc.xyz, charge: 1, multiplicity: 2}
  - {name: gfn1, reactant: hcn.xyz, product: hnc.xyz, level: other}
";
    let s = study::parse(text, "t.yaml", dir.path()).unwrap();
    let plan = Plan::new(&s);
    // one/two share HCN and HNC; the cation and the other level each have their own pair.
    assert_eq!(plan.species.len(), 6);
    assert_eq!(plan.relaxations_saved(), 2);
    assert_eq!(plan.reaction_species[0], plan.reaction_species[1]);
    assert_ne!(plan.reaction_species[0], plan.reaction_species[2]);
    assert_ne!(plan.reaction_species[0], plan.reaction_species[3]);
}

#[test]
fn dependencies_follow_the_data() {
    let s = study::load(&data("mb.yaml")).unwrap();
    let plan = Plan::new(&s);
    let node = |r: usize, k: StageKind| {
        let si = s.reactions[r]
            .stages
            .iter()
            .position(|st| st.kind() == k)
            .unwrap();
        plan.stage_task[r][si].unwrap()
    };
    let deps = |n: petgraph::graph::NodeIndex| plan.tasks[n.index()].1.clone();
    // a-to-b: band needs both relaxed ends; irc needs refine and modes; verify needs irc,
    // refine, modes and the relaxed ends.
    let sp: Vec<_> = plan.reaction_species[0]
        .iter()
        .map(|(_, k)| {
            plan.tasks
                .iter()
                .position(|(t, _)| *t == Task::Relax { species: *k })
                .map(petgraph::graph::NodeIndex::new)
                .unwrap()
        })
        .collect();
    assert_eq!(deps(node(0, StageKind::Band)), sp);
    assert_eq!(
        deps(node(0, StageKind::Refine)),
        vec![node(0, StageKind::Band)]
    );
    assert_eq!(
        deps(node(0, StageKind::Irc)),
        vec![node(0, StageKind::Refine), node(0, StageKind::Modes)]
    );
    let mut v = deps(node(0, StageKind::Verify));
    v.sort();
    let mut want = vec![
        node(0, StageKind::Refine),
        node(0, StageKind::Irc),
        node(0, StageKind::Modes),
    ];
    want.extend(&sp);
    want.sort();
    assert_eq!(v, want);
    // The saddle-guess reaction has nothing to wait for.
    assert!(deps(node(3, StageKind::Refine)).is_empty());
}

#[test]
fn the_queue_runs_every_task_once_after_its_inputs() {
    let s = study::load(&data("mb.yaml")).unwrap();
    let plan = Plan::new(&s);
    let mut q = plan.queue(&s);
    let mut done = Vec::new();
    let mut first_wave = Vec::new();
    while let Some(n) = q.next_ready() {
        first_wave.push(n);
    }
    // Ready at once: the 3 species relaxations and the saddle guess's refine.
    assert_eq!(first_wave.len(), 4);
    let mut running = first_wave;
    while let Some(n) = running.pop() {
        for d in &plan.tasks[n.index()].1 {
            assert!(done.contains(d), "task {n:?} before its input {d:?}");
        }
        done.push(n);
        q.complete(n).unwrap();
        while let Some(m) = q.next_ready() {
            running.push(m);
        }
    }
    assert_eq!(done.len(), plan.tasks.len());
    assert_eq!(q.count(TaskState::Done), plan.tasks.len());
    assert!(q.is_finished());
}

#[test]
fn a_failed_shared_species_blocks_every_reaction_that_needs_it() {
    let s = study::load(&data("mb.yaml")).unwrap();
    let plan = Plan::new(&s);
    let mut q = plan.queue(&s);
    // Fail the relaxation of minimum A (used by a-to-b and a-to-c).
    let a_task = plan
        .tasks
        .iter()
        .position(|(t, _)| *t == Task::Relax { species: 0 })
        .map(petgraph::graph::NodeIndex::new)
        .unwrap();
    let mut ready = Vec::new();
    while let Some(n) = q.next_ready() {
        ready.push(n);
    }
    assert!(ready.contains(&a_task));
    let blocked = q.fail(a_task).unwrap();
    let blocked_reactions: std::collections::BTreeSet<usize> = blocked
        .iter()
        .filter_map(|n| match plan.tasks[n.index()].0 {
            Task::Stage { reaction, .. } => Some(reaction),
            _ => None,
        })
        .collect();
    assert_eq!(blocked_reactions, [0, 1].into_iter().collect());
    assert_eq!(blocked.len(), 10, "all 5 stages of both reactions");
}

#[test]
fn output_paths_never_leave_dir() {
    let top = tempfile::tempdir().unwrap();
    let dir = top.path().join("run");
    std::fs::create_dir(&dir).unwrap();
    let out = cairn::study::OutputDir::new(&dir);
    for name in ["../outside", "a/b", "..", "/tmp/x", "x/../../y"] {
        assert!(out.summary(name).is_err(), "{name}");
        if name.contains("..") || name.starts_with('/') {
            assert!(
                out.write(&format!("{name}/summary.json"), "{}").is_err(),
                "{name}"
            );
        }
        // The study reader refuses such names before any path is made.
        assert!(cairn::study::load::check_name(name).is_err(), "{name}");
    }
    let entries: Vec<_> = std::fs::read_dir(top.path()).unwrap().collect();
    assert_eq!(entries.len(), 1, "only DIR itself exists next to DIR");
    assert!(
        std::fs::read_dir(&dir).unwrap().next().is_none(),
        "and DIR is still empty"
    );
}
