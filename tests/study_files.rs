//! Study files: the bad ones each give one clear error with file:line:column, the reaction and
//! the key; the good ones load; `cairn check` writes nothing.

use std::path::{Path, PathBuf};
use std::process::Command;

fn data(f: &str) -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
        .join("tests/data/studies")
        .join(f)
}

/// (file, the exact important part of the one error it must give).
const BAD: &[(&str, &str)] = &[
    (
        "bad-missing-geometry.yaml",
        "bad-missing-geometry.yaml:23:14: reaction \"hcn-isomer\": key \"product\": cannot read geometry file \"geometries/hnc-missing.xyz\" (no such file;",
    ),
    (
        "bad-unknown-key.yaml",
        "bad-unknown-key.yaml:23:5: reaction \"hcn-isomer\": key \"prodcut\": unknown key (known keys here: name, about, reactant, product, guess, drive, charge, multiplicity, level, pipeline, options)",
    ),
    (
        "bad-unknown-level.yaml",
        "bad-unknown-level.yaml:26:12: reaction \"hcn-uphill\": key \"level\": unknown level \"fastt\" (known: fast, accurate)",
    ),
    (
        "bad-multiplicity.yaml",
        "bad-multiplicity.yaml:26:19: reaction \"hcn-uphill\": key \"multiplicity\": charge 0 and multiplicity 2 do not fit reactant \"geometries/hcn.xyz\": CHN with charge 0 has 14 electrons, which cannot form multiplicity 2",
    ),
    (
        "bad-charge.yaml",
        "bad-charge.yaml:26:13: reaction \"hcn-uphill\": key \"charge\": charge 15 and multiplicity 1 do not fit reactant \"geometries/hcn.xyz\": CHN with charge 15 would have -1 electrons",
    ),
    (
        "bad-mismatched-atoms.yaml",
        "bad-mismatched-atoms.yaml:23:14: reaction \"hcn-isomer\": key \"product\": atom 1 is H in \"geometries/hcn.xyz\" but N in \"geometries/nch.xyz\"; both need the same atoms in the same order",
    ),
    (
        "bad-atom-count.yaml",
        "bad-atom-count.yaml:23:14: reaction \"hcn-isomer\": key \"product\": atom 1 is H in \"geometries/hcn.xyz\" but O in \"geometries/water.xyz\"",
    ),
    (
        "bad-dotdot-name.yaml",
        "bad-dotdot-name.yaml:24:11: reaction \"../hcn-uphill\": key \"name\": name \"../hcn-uphill\" is not allowed: use letters, digits, '.', '_' and '-' only",
    ),
    (
        "bad-slash-name.yaml",
        "bad-slash-name.yaml:24:11: reaction \"runs/hcn-uphill\": key \"name\": name \"runs/hcn-uphill\" is not allowed",
    ),
    (
        "bad-duplicate-names.yaml",
        "bad-duplicate-names.yaml:24:11: reaction \"hcn-isomer\": key \"name\": duplicate reaction name: reaction 1 already uses it (line 21)",
    ),
    (
        "bad-empty-pipeline.yaml",
        "bad-empty-pipeline.yaml:12:11: key \"pipeline\": the pipeline is empty",
    ),
    (
        "bad-unreadable-geometry.yaml",
        "bad-unreadable-geometry.yaml:25:15: reaction \"hcn-uphill\": key \"reactant\": cannot use geometry file \"geometries/broken.xyz\": geometries/broken.xyz:4: bad y coordinate '0.0200O000' for atom 2 (C)",
    ),
    (
        "bad-stage-order.yaml",
        "bad-stage-order.yaml:14:5: reaction \"hcn-isomer\": key \"pipeline\": stage \"refine\" needs a saddle guess, but no earlier stage makes one for a reaction started from reactant + product (pipeline: relax-ends, refine, band, walk, modes, irc, verify); put `band` before `refine`",
    ),
    (
        "bad-missing-modes.yaml",
        "bad-missing-modes.yaml:17:5: reaction \"hcn-isomer\": key \"pipeline\": stage \"irc\" needs the saddle's normal modes",
    ),
    (
        "bad-unknown-stage.yaml",
        "bad-unknown-stage.yaml:15:5: key \"pipeline entry 3\": unknown stage \"wlak\" (known: relax-ends, band, scan, walk, refine, modes, irc, verify, rates)",
    ),
    (
        "bad-stage-option.yaml",
        "bad-stage-option.yaml:14:12: key \"pipeline entry 2.band.imags\": unknown key (known keys here: level, retries, timeout, images, climbing, max-steps)",
    ),
    (
        "bad-option-range.yaml",
        "bad-option-range.yaml:14:20: key \"pipeline.band.images\": 2 is out of range: the number of band images must be between 3 and 64",
    ),
    (
        "bad-duplicate-level.yaml",
        "bad-duplicate-level.yaml:5:3: key \"levels\": level \"fast\" is defined twice",
    ),
    (
        "bad-no-start.yaml",
        "bad-no-start.yaml:24:5: reaction \"hcn-uphill\": no start given: a reaction starts from one of:",
    ),
    (
        "bad-options-not-in-pipeline.yaml",
        "bad-options-not-in-pipeline.yaml:27:13: reaction \"hcn-uphill\": key \"options.scan\": stage \"scan\" is not in this reaction's pipeline",
    ),
    (
        "bad-timeout-unit.yaml",
        "bad-timeout-unit.yaml:12:12: key \"defaults.timeout\": duration 600 needs a unit: s, m or h",
    ),
    (
        "bad-threads.yaml",
        "bad-threads.yaml:8:14: key \"levels.accurate.threads\": 0 threads per engine run; give a number from 1 to 256",
    ),
    (
        "bad-yaml-syntax.yaml",
        "bad-yaml-syntax.yaml:22:4: YAML syntax error: did not find expected '-' indicator",
    ),
    (
        "bad-rates-unknown-key.yaml",
        "bad-rates-unknown-key.yaml:19:37: key \"pipeline entry 7.rates.tunneling\": unknown key (known keys here: level, retries, timeout, temperatures, standard-state, low-frequency, tunnelling)",
    ),
    (
        "bad-rates-order.yaml",
        "bad-rates-order.yaml:17:5: reaction \"hcn-isomer\": key \"pipeline\": stage \"rates\" needs both ends of the step and a checked saddle (from `verify`), but no earlier stage makes one for a reaction started from reactant + product (pipeline: relax-ends, band, refine, modes, rates, irc, verify); put `verify` before `rates`",
    ),
    (
        "bad-rates-temperature.yaml",
        "bad-rates-temperature.yaml:19:27: key \"pipeline.rates.temperatures\": 0 K is out of range: temperatures must be above 0 K and at most 5000 K",
    ),
    (
        "bad-rates-standard-state.yaml",
        "bad-rates-standard-state.yaml:19:29: key \"pipeline entry 7.rates.standard-state\": unknown variant `1-atm`, expected `1-bar` or `1-molar`",
    ),
    (
        "bad-rates-model-surface.yaml",
        "bad-rates-model-surface.yaml:12:5: reaction \"a-to-c\": key \"pipeline\": stage \"rates\" needs real atoms (masses, moments of inertia), but this reaction is on a model surface (pseudo-atom X); leave `rates` out of its pipeline",
    ),
    (
        "bad-slurm-unknown-key.yaml",
        "bad-slurm-unknown-key.yaml:6:13: key \"levels.fast.slurm.partiton\": unknown key (known keys here: partition, account, time-limit, memory, cpus-per-task, directives, setup, group)",
    ),
    (
        "bad-slurm-memory.yaml",
        "bad-slurm-memory.yaml:8:15: key \"levels.fast.slurm.memory\": memory \"2GB\" is not what sbatch --mem takes",
    ),
    (
        "bad-slurm-directive.yaml",
        "bad-slurm-directive.yaml:9:11: key \"levels.fast.slurm.directives entry 2\": \"qos=long\" is not an sbatch option",
    ),
    (
        "bad-slurm-setup-newline.yaml",
        "bad-slurm-setup-newline.yaml:7:15: key \"levels.fast.slurm.setup entry 1\": one line per entry",
    ),
    (
        "bad-slurm-partition.yaml",
        "bad-slurm-partition.yaml:6:24: key \"levels.fast.slurm.partition\": \"debug short\" is not a Slurm partition name",
    ),
    (
        "bad-slurm-time-limit.yaml",
        "bad-slurm-time-limit.yaml:6:25: key \"levels.fast.slurm.time-limit\": duration 30 needs a unit: s, m or h",
    ),
    (
        "bad-executor.yaml",
        "bad-executor.yaml:7:13: key \"defaults.executor\": unknown variant `cloud`, expected `local` or `slurm`",
    ),
];

#[test]
fn every_bad_study_gives_its_one_error() {
    for (file, want) in BAD {
        let err = match cairn::study::load(&data(file)) {
            Ok(_) => panic!("{file} was accepted"),
            Err(e) => e.to_string(),
        };
        assert!(err.contains(want), "{file}:\n  got:  {err}\n  want: {want}");
        assert_eq!(err.lines().count(), 1, "one error, on one line: {err}");
    }
    // Every bad fixture is in the table.
    let mut on_disk: Vec<String> = std::fs::read_dir(data(""))
        .unwrap()
        .map(|e| e.unwrap().file_name().into_string().unwrap())
        .filter(|n| n.starts_with("bad-"))
        .collect();
    on_disk.sort();
    let mut listed: Vec<String> = BAD.iter().map(|(f, _)| f.to_string()).collect();
    listed.sort();
    assert_eq!(on_disk, listed);
}

#[test]
fn good_fixture_loads_with_options_merged() {
    let s = cairn::study::load(&data("good.yaml")).unwrap();
    assert_eq!(s.name, "fixture");
    assert_eq!(s.reactions.len(), 2);
    let iso = &s.reactions[0];
    let stages: Vec<&str> = iso.stages.iter().map(|st| st.kind().name()).collect();
    assert_eq!(
        stages,
        ["relax-ends", "band", "refine", "modes", "irc", "verify"]
    );
    assert_eq!(
        iso.not_applicable,
        [cairn::study::StageKind::Walk],
        "walk is for reactions started from a reactant alone"
    );
    assert_eq!(
        iso.stages[1].spec,
        cairn::study::StageSpec::Band {
            images: 6,
            climbing: true,
            max_steps: 300
        }
    );
    assert_eq!(
        iso.stages[3].level, "accurate",
        "the pipeline's stage level wins"
    );
    assert_eq!(
        iso.stages[2].level, "fast",
        "other stages use the reaction's level"
    );
    let up = &s.reactions[1];
    let walk = up
        .stages
        .iter()
        .find(|st| st.kind() == cairn::study::StageKind::Walk)
        .unwrap();
    assert_eq!(
        walk.spec,
        cairn::study::StageSpec::Walk {
            mode: 1,
            max_steps: 50
        },
        "the reaction's options override the pipeline's"
    );
    // Geometries are read in Å and held in bohr (CODATA 2018 bohr radius 0.529177210903 Å).
    if let cairn::study::Start::Ends { reactant, .. } = &iso.start {
        let z = reactant.molecule.coords[2][2];
        assert!((z - 1.1587 / 0.529_177_210_903).abs() < 1e-9, "{z}");
    } else {
        panic!("hcn-isomer starts from its ends");
    }
}

fn cairn_check(study: &Path, cwd: &Path) -> std::process::Output {
    Command::new(env!("CARGO_BIN_EXE_cairn"))
        .arg("check")
        .arg(study)
        .current_dir(cwd)
        .output()
        .unwrap()
}

fn listing(dir: &Path) -> Vec<PathBuf> {
    let mut v = Vec::new();
    let mut stack = vec![dir.to_path_buf()];
    while let Some(d) = stack.pop() {
        for e in std::fs::read_dir(&d).unwrap() {
            let p = e.unwrap().path();
            if p.is_dir() {
                stack.push(p.clone());
            }
            v.push(p);
        }
    }
    v.sort();
    v
}

#[test]
fn cairn_check_and_run_print_one_error_and_write_nothing() {
    let before = listing(&data(""));
    let cwd = tempfile::tempdir().unwrap();
    for (file, want) in BAD {
        let out = cairn_check(&data(file), cwd.path());
        assert_eq!(out.status.code(), Some(1), "{file}");
        let err = String::from_utf8_lossy(&out.stderr);
        assert!(err.starts_with("error: "), "{file}: {err}");
        assert!(err.contains(want), "{file}: {err}");
        assert_eq!(err.lines().count(), 1, "{file}: {err}");
        assert!(out.stdout.is_empty(), "{file}: nothing on stdout");
        // `cairn run` reads the study before it touches DIR: the same one error, exit 1, and
        // DIR is not even created.
        let run = Command::new(env!("CARGO_BIN_EXE_cairn"))
            .arg("run")
            .arg(data(file))
            .args(["--dir", "out", "--progress", "none"])
            .current_dir(cwd.path())
            .output()
            .unwrap();
        assert_eq!(run.status.code(), Some(1), "{file}");
        let err = String::from_utf8_lossy(&run.stderr);
        assert!(err.contains(want), "{file}: {err}");
        assert_eq!(err.lines().count(), 1, "{file}: {err}");
    }
    assert_eq!(
        listing(&data("")),
        before,
        "nothing written next to the study files"
    );
    assert!(
        listing(cwd.path()).is_empty(),
        "nothing written in the working directory"
    );
}

#[test]
fn cairn_check_prints_the_plan_with_shared_species() {
    let cwd = tempfile::tempdir().unwrap();
    let out = cairn_check(&data("mb.yaml"), cwd.path());
    let text = String::from_utf8_lossy(&out.stdout);
    assert_eq!(
        out.status.code(),
        Some(0),
        "{text}{}",
        String::from_utf8_lossy(&out.stderr)
    );
    for want in [
        "study \"muller-brown-fixture\"",
        "surface  muller-brown (built-in model surface)",
        "reactions (4)",
        "a-to-b: from reactant + product",
        "s1-guess: from saddle guess",
        "c-uphill: from reactant alone (walk uphill)",
        "    band        7 images, climbing image on, max 300 steps",
        "(not for this start: relax-ends, band, walk)",
        "X (geometries/mb-a.xyz) at level surface: a-to-b (reactant), a-to-c (reactant)",
        "X (geometries/mb-c.xyz) at level surface: a-to-c (product), c-uphill (reactant)",
        "total: 22 tasks; 3 species relaxations (2 saved by sharing)",
    ] {
        assert!(text.contains(want), "missing {want:?} in\n{text}");
    }
    assert!(listing(cwd.path()).is_empty());
}

#[test]
fn unknown_engine_is_reported_at_its_level() {
    let dir = tempfile::tempdir().unwrap();
    std::fs::create_dir(dir.path().join("geometries")).unwrap();
    std::fs::copy(
        data("geometries/mb-s1-guess.xyz"),
        dir.path().join("geometries/g.xyz"),
    )
    .unwrap();
    let study = dir.path().join("s.yaml");
    std::fs::write(
        &study,
        "levels:\n  l1: {engine: no-such-engine-here}\npipeline: [refine, modes, irc, verify]\nreactions:\n  - {name: r, guess: geometries/g.xyz}\n",
    )
    .unwrap();
    let out = cairn_check(&study, dir.path());
    let err = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(1));
    assert!(
        err.contains(
            "s.yaml:2:16: key \"levels.l1.engine\": engine \"no-such-engine-here\" is not usable"
        ),
        "{err}"
    );
}

/// A study of one saddle-guess reaction at a level using `engine` with `settings`.
fn one_level_study(dir: &Path, engine_line: &str) -> PathBuf {
    std::fs::copy(data("geometries/hcn.xyz"), dir.join("hcn.xyz")).unwrap();
    let study = dir.join("s.yaml");
    std::fs::write(
        &study,
        format!(
            "levels:\n  l1: {engine_line}\npipeline: [refine, modes, irc, verify]\nreactions:\n  - {{name: r, guess: hcn.xyz}}\n"
        ),
    )
    .unwrap();
    study
}

#[test]
fn missing_executable_and_bad_settings_are_reported_at_the_level() {
    let dir = tempfile::tempdir().unwrap();
    // An adapter like xtb's whose executable does not exist.
    let xtb = std::fs::read_to_string(
        PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("adapters/xtb.yaml"),
    )
    .unwrap();
    let ghost = xtb.replace("name: xtb\n", "name: ghost\n").replace(
        "executable: xtb\n",
        "executable: cairn-test-no-such-program\n",
    );
    let adapters = dir.path().join("adapters-extra");
    std::fs::create_dir(&adapters).unwrap();
    std::fs::write(adapters.join("ghost.yaml"), ghost).unwrap();
    let study = one_level_study(dir.path(), "{engine: ghost}");
    let out = Command::new(env!("CARGO_BIN_EXE_cairn"))
        .arg("check")
        .arg(&study)
        .env("CAIRN_ADAPTERS", &adapters)
        .current_dir(dir.path())
        .output()
        .unwrap();
    let err = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(1), "{err}");
    assert!(
        err.contains("s.yaml:2:16: key \"levels.l1.engine\": engine \"ghost\": its executable 'cairn-test-no-such-program' is not found on PATH; install it: apt-get install xtb"),
        "{err}"
    );

    let dir = tempfile::tempdir().unwrap();
    let study = one_level_study(dir.path(), "{engine: xtb, settings: {method: gfn7}}");
    let out = cairn_check(&study, dir.path());
    let err = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(1), "{err}");
    assert!(
        err.contains("s.yaml:2:16: key \"levels.l1.engine\": engine \"xtb\" is not usable:")
            && err.contains("gfn7"),
        "{err}"
    );
}

#[test]
fn the_cluster_example_loads_with_its_slurm_blocks() {
    let f = PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("workflows-demo/cluster.yaml");
    let s = cairn::study::load(&f).unwrap();
    assert_eq!(s.defaults.executor, cairn::study::ExecutorKind::Slurm);
    let fast = s.level("gfn2").unwrap().slurm.clone().unwrap();
    assert_eq!(
        fast,
        cairn::slurm::SlurmOptions {
            partition: Some("debug".into()),
            account: None,
            time_limit_minutes: Some(10),
            memory: Some("1G".into()),
            cpus_per_task: Some(1),
            directives: vec![],
            setup: vec!["export OMP_NUM_THREADS=1".into()],
            group: 4,
        }
    );
    let tight = s.level("gfn2-tight").unwrap().slurm.clone().unwrap();
    assert_eq!(tight.cpus_per_task, Some(2));
    assert_eq!(tight.time_limit_minutes, Some(20));

    // Slurm takes whole minutes: 90 s becomes 2 minutes, never 1. No block: local defaults.
    let dir = tempfile::tempdir().unwrap();
    std::fs::copy(data("geometries/hcn.xyz"), dir.path().join("hcn.xyz")).unwrap();
    let p = dir.path().join("s.yaml");
    std::fs::write(
        &p,
        "levels:\n  a: {engine: muller-brown, slurm: {time-limit: 90s, memory: 2000, directives: [--qos=short]}}\n  b: {engine: muller-brown}\ndefaults: {level: a}\npipeline: [relax-ends]\nreactions:\n  - {name: r, reactant: hcn.xyz}\n",
    )
    .unwrap();
    let s = cairn::study::load(&p).unwrap();
    let a = s.level("a").unwrap().slurm.clone().unwrap();
    assert_eq!(a.time_limit_minutes, Some(2));
    assert_eq!(a.memory.as_deref(), Some("2000"));
    assert_eq!(a.directives, vec!["--qos=short".to_string()]);
    assert_eq!(a.group(), 1);
    assert_eq!(s.level("b").unwrap().slurm, None);
    assert_eq!(s.defaults.executor, cairn::study::ExecutorKind::Local);
}
