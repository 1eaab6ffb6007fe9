//! Bad input and bad output: never a panic, always a named failure with a clear message.
//! Uses the stand-in engine tests/fixtures/engine/standin.sh through adapter files in
//! tests/fixtures/engine/adapters (found through CAIRN_ADAPTERS), and the real xtb adapter.

mod engine_support;

use cairn::engine::adapter::Adapter;
use cairn::engine::{find_engine, Engine, EngineFailure, FailureKind, Settings};
use cairn::eval::Quantity;
use cairn::units::{ANGSTROM_PER_BOHR, KCALMOL_PER_HARTREE};
use engine_support::*;
use std::path::{Path, PathBuf};
use std::sync::Arc;

fn fixtures() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/fixtures/engine")
}

/// An engine from the fixture adapters. Every test sets CAIRN_ADAPTERS to the same value, so
/// the process-wide variable is consistent whichever test runs first.
fn engine(name: &str, settings: &[(&str, &str)]) -> Arc<dyn Engine> {
    std::env::set_var("CAIRN_ADAPTERS", fixtures().join("adapters"));
    let s: Settings = settings
        .iter()
        .map(|(k, v)| (k.to_string(), v.to_string()))
        .collect();
    find_engine(name, &s).unwrap_or_else(|e| panic!("{name}: {e}"))
}

const H2O: &[(&str, [f64; 3])] = &[
    ("O", [0.0, 0.0, 0.12]),
    ("H", [0.0, 0.78, -0.47]),
    ("H", [0.05, -0.74, -0.45]),
];

fn fail(e: &dyn Engine, q: Quantity) -> EngineFailure {
    let j = job(H2O, 0, 1, q);
    let r = e.evaluate(&j, 0);
    match r {
        Ok(o) => panic!("expected a failure, got {:?}", o.answer),
        Err(f) => f,
    }
}

fn cleanup(f: &EngineFailure) {
    if let Some(p) = &f.output {
        if p.starts_with(std::env::temp_dir()) {
            std::fs::remove_dir_all(p).ok();
        }
    }
}

#[test]
fn standin_values_and_units_are_converted() {
    // E = ½ Σ x² kcal/mol (x in Å), gradient x kcal/mol/Å, Hessian 1 kcal/mol/Å² (the script).
    let e = engine("standin", &[]);
    let j = job(H2O, 0, 1, Quantity::Hessian);
    let a = e.evaluate(&j, 0).unwrap().answer;
    let x_ang: Vec<f64> = j.coords.iter().map(|v| v * ANGSTROM_PER_BOHR).collect();
    let e_ref = 0.5 * x_ang.iter().map(|v| v * v).sum::<f64>() / KCALMOL_PER_HARTREE;
    assert!((a.energy - e_ref).abs() < 1e-12);
    let g = a.gradient.unwrap();
    for (gi, xi) in g.iter().zip(&x_ang) {
        assert!((gi - xi * ANGSTROM_PER_BOHR / KCALMOL_PER_HARTREE).abs() < 1e-12);
    }
    let h = a.hessian.unwrap();
    let diag = ANGSTROM_PER_BOHR * ANGSTROM_PER_BOHR / KCALMOL_PER_HARTREE;
    for r in 0..9 {
        for c in 0..9 {
            let want = if r == c { diag } else { 0.0 };
            assert!((h[(r, c)] - want).abs() < 1e-14, "({r},{c})");
        }
    }
    // The gradient agrees with finite differences of the energies (consistent units).
    let jg = job(H2O, 0, 1, Quantity::Gradient);
    let fd = fd_gradient(e.as_ref(), &jg, 1e-3);
    let g2 = e.evaluate(&jg, 0).unwrap().answer.gradient.unwrap();
    assert!(max_abs((fd - g2).iter().copied()) < 1e-9);
}

/// The stand-in adapter with `scratch: memory`, loaded from a copy in `dir`.
fn memory_standin(dir: &Path, mode: &str) -> Arc<dyn Engine> {
    let text = std::fs::read_to_string(fixtures().join("adapters/standin.yaml"))
        .unwrap()
        .replace("name: standin", "name: memstandin\nscratch: memory")
        .replace(
            "{{ adapter_dir }}/../standin.sh",
            &fixtures().join("standin.sh").display().to_string(),
        );
    let path = dir.join("memstandin.yaml");
    std::fs::write(&path, text).unwrap();
    let adapter = Adapter::load(&path).unwrap();
    let s: Settings = [("mode".to_string(), mode.to_string())].into();
    Arc::new(cairn::engine::adapter::AdapterEngine::new(Arc::new(adapter), &s).unwrap())
}

fn ran_in(text: &str) -> PathBuf {
    let line = text
        .lines()
        .find_map(|l| l.strip_prefix("ran in "))
        .unwrap_or_else(|| panic!("no 'ran in' line: {text}"));
    PathBuf::from(line)
}

#[test]
fn scratch_memory_runs_in_ram_and_kept_output_moves_to_disk() {
    let tmp = tempfile::tempdir().unwrap();
    // This machine's RAM-backed directory (/dev/shm on Linux; the CI machines have one).
    let mem = cairn::engine::process::memory_scratch_root()
        .expect("no tmpfs at /dev/shm on this machine");
    let ok = memory_standin(tmp.path(), "ok");
    let o = ok.evaluate(&job(H2O, 0, 1, Quantity::Gradient), 0).unwrap();
    let dir = ran_in(&o.raw_output);
    assert!(dir.starts_with(&mem), "ran in {}", dir.display());
    cairn::engine::process::finish_scratch_removal();
    assert!(!dir.exists(), "scratch left behind: {}", dir.display());

    // A failed run's directory is kept, but on disk, with the whole output in it.
    let bad = memory_standin(tmp.path(), "garbage");
    let f = fail(bad.as_ref(), Quantity::Gradient);
    let kept = f.output.clone().expect("no kept output");
    assert!(
        !kept.starts_with(&mem),
        "kept in memory: {}",
        kept.display()
    );
    let stdout = std::fs::read_to_string(kept.join("stdout.txt")).unwrap();
    let was = ran_in(&stdout);
    assert!(was.starts_with(&mem), "{}", was.display());
    assert!(!was.exists(), "the copy in memory was not removed");
    assert!(kept.join("grad.out").exists() && kept.join("geometry.xyz").exists());
    cleanup(&f);
}

#[test]
fn missing_executable_says_what_to_install() {
    let e = engine("missing", &[]);
    let f = fail(e.as_ref(), Quantity::Gradient);
    assert_eq!(f.kind, FailureKind::MissingExecutable);
    assert!(f.message.contains("cairn-test-no-such-engine"), "{f}");
    assert!(
        f.message
            .contains("apt-get install cairn-test-no-such-engine"),
        "{f}"
    );
}

#[test]
fn unknown_engine_and_bad_settings_are_clear_errors() {
    std::env::set_var("CAIRN_ADAPTERS", fixtures().join("adapters"));
    let err = find_engine("no-such-engine", &Settings::new())
        .err()
        .unwrap()
        .to_string();
    assert!(
        err.contains("no-such-engine.yaml") && err.contains("CAIRN_ADAPTERS"),
        "{err}"
    );
    let s: Settings = [("mode".to_string(), "sideways".to_string())].into();
    let err = find_engine("standin", &s).err().unwrap().to_string();
    assert!(err.contains("'mode' must be one of"), "{err}");
    let s: Settings = [("colour".to_string(), "red".to_string())].into();
    let err = find_engine("standin", &s).err().unwrap().to_string();
    assert!(
        err.contains("no setting 'colour'") && err.contains("maxiter"),
        "{err}"
    );
    let s: Settings = [("maxiter".to_string(), "many".to_string())].into();
    let err = find_engine("standin", &s).err().unwrap().to_string();
    assert!(err.contains("must be an integer"), "{err}");
}

#[test]
fn timeout_kills_the_whole_process_group() {
    let e = engine("standin", &[("mode", "sleep")]);
    let f = fail(e.as_ref(), Quantity::Gradient);
    assert_eq!(f.kind, FailureKind::Timeout, "{f}");
    assert!(f.message.contains("time limit"), "{f}");
    let dir = f.output.clone().expect("scratch directory kept");
    let pids = std::fs::read_to_string(dir.join("pids")).expect("the stand-in recorded its pids");
    for pid in pids.split_whitespace() {
        let pid: i32 = pid.parse().unwrap();
        // A killed process takes a moment to die and be reaped (the grandchild by init): wait
        // up to 10 s for it to be gone or a zombie. Without the group kill, `sleep 300` runs on.
        let gone = || {
            // Signal 0 only checks existence; ESRCH means the process is gone.
            let alive = unsafe { libc::kill(pid, 0) } == 0;
            !alive
                || std::fs::read_to_string(format!("/proc/{pid}/stat"))
                    .map(|s| s.contains(") Z"))
                    .unwrap_or(true)
        };
        let mut ok = gone();
        for _ in 0..200 {
            if ok {
                break;
            }
            std::thread::sleep(std::time::Duration::from_millis(50));
            ok = gone();
        }
        assert!(ok, "process {pid} of the timed-out engine still runs");
    }
    cleanup(&f);
}

#[test]
fn empty_truncated_nan_and_garbage_output_are_bad_output() {
    for (mode, words) in [
        ("empty", "no match"),
        ("truncated", "truncated"),
        ("nan", "not a finite number"),
        ("garbage", "'x' is not a number"),
    ] {
        let e = engine("standin", &[("mode", mode)]);
        let f = fail(e.as_ref(), Quantity::Gradient);
        assert_eq!(f.kind, FailureKind::BadOutput, "{mode}: {f}");
        assert!(f.message.contains(words), "{mode}: {f}");
        let kept = f.output.clone().expect("output kept");
        assert!(kept.join("stdout.txt").is_file(), "{mode}");
        cleanup(&f);
    }
}

#[test]
fn nonzero_exit_with_complete_output_fails_when_the_adapter_requires_zero() {
    let e = engine("standin", &[("mode", "nonzero")]);
    let f = fail(e.as_ref(), Quantity::Gradient);
    assert_eq!(f.kind, FailureKind::Crash, "{f}");
    assert!(f.message.contains("exit status 3"), "{f}");
    cleanup(&f);
}

#[test]
fn crash_by_signal_is_named() {
    let e = engine("standin", &[("mode", "crash")]);
    let f = fail(e.as_ref(), Quantity::Gradient);
    assert_eq!(f.kind, FailureKind::Crash, "{f}");
    assert!(f.message.contains("SIGSEGV"), "{f}");
    cleanup(&f);
}

#[test]
fn failure_signature_then_remedy() {
    let e = engine("standin", &[("mode", "scf")]);
    let j = job(H2O, 0, 1, Quantity::Gradient);
    let f = e.evaluate(&j, 0).unwrap_err();
    assert_eq!(
        f.kind,
        FailureKind::Signature("scf_not_converged".into()),
        "{f}"
    );
    assert!(f.message.contains("more iterations may help"), "{f}");
    cleanup(&f);
    // Attempt 1 applies the first remedy (maxiter 500) and succeeds; the remedy is recorded.
    let o = e.evaluate(&j, 1).unwrap();
    assert_eq!(o.remedies, vec!["more iterations".to_string()]);
    assert!(o.raw_output.contains("remedies: more iterations"));
    // Attempts past the list keep all remedies.
    assert!(e.evaluate(&j, 5).is_ok());
}

#[test]
fn xtb_scc_failure_signature_and_remedy() {
    // Real xtb with the SCC limited to 2 iterations: engines.md, failure modes.
    let e = xtb(&[("max_scc_iterations", "2")]);
    let j = job(H2O, 0, 1, Quantity::Gradient);
    let f = e.evaluate(&j, 0).unwrap_err();
    assert_eq!(
        f.kind,
        FailureKind::Signature("scc_not_converged".into()),
        "{f}"
    );
    cleanup(&f);
    let o = e.evaluate(&j, 1).expect("more SCC iterations converge");
    assert_eq!(o.remedies, vec!["more SCC iterations".to_string()]);
    let plain = eval(xtb(&[]).as_ref(), &j);
    assert!((o.answer.energy - plain.energy).abs() < 1e-9);
}

#[test]
fn impossible_spin_states_never_reach_the_engine() {
    // H2O doublet (10 electrons) and CH3 singlet (9 electrons): parity is wrong. With the
    // `missing` adapter, reaching the executable would give MissingExecutable instead.
    let ch3: &[(&str, [f64; 3])] = &[
        ("C", [0.0, 0.0, 0.0]),
        ("H", [1.08, 0.0, 0.0]),
        ("H", [-0.54, 0.935, 0.0]),
        ("H", [-0.54, -0.935, 0.0]),
    ];
    for e in [xtb(&[]), engine("missing", &[])] {
        for (label, atoms, mult, electrons) in [
            ("H2O", H2O, 2, "10 electrons"),
            ("CH3", ch3, 1, "9 electrons"),
        ] {
            let j = job(atoms, 0, mult, Quantity::Gradient);
            let f = e.evaluate(&j, 0).unwrap_err();
            assert_eq!(f.kind, FailureKind::BadInput, "{label}: {f}");
            assert!(
                f.message.contains(electrons) && f.message.contains("multiplicity"),
                "{f}"
            );
            assert!(f.output.is_none());
        }
    }
}

#[test]
fn malformed_adapter_files_are_reported_with_file_and_line() {
    let dir = fixtures().join("malformed");
    for (file, line, words) in [
        ("unknown_key.yaml", 11, "unknown field `colums`"),
        ("bad_default.yaml", 6, "'method' must be one of gfn1, gfn2"),
        ("bad_template.yaml", 0, "chargee"),
        ("bad_unit.yaml", 7, "is not a gradient unit"),
    ] {
        let path = dir.join(file);
        let err = Adapter::load(&path)
            .err()
            .unwrap_or_else(|| panic!("{file} loaded"));
        let msg = err.to_string();
        assert!(
            msg.starts_with(&format!("{}:{line}:", path.display())),
            "{file}: {msg}"
        );
        assert!(msg.contains(words), "{file}: {msg}");
    }
    // Name and file must agree.
    let tmp = tempfile::tempdir().unwrap();
    let p = tmp.path().join("other.yaml");
    std::fs::copy(dir.join("bad_unit.yaml"), &p).unwrap();
    let msg = Adapter::load(&p).err().unwrap().to_string();
    assert!(msg.contains("must match the file name"), "{msg}");
}

#[test]
fn identity_covers_name_version_content_and_settings() {
    let a = xtb(&[]);
    let b = xtb(&[("method", "gfn1")]);
    let c = xtb(&[("accuracy", "1.0")]);
    assert_ne!(a.identity(), b.identity());
    // "1.0" and the default 1 are the same setting.
    assert_eq!(a.identity(), c.identity());
    assert!(
        a.identity().starts_with("adapter:xtb:6.5.1:sha256="),
        "{}",
        a.identity()
    );
    assert!(a.identity().contains("method=gfn2"));
    let (v, _d) = xtb_variant(&[("description:", "description: edited,")], &[]);
    assert_ne!(
        a.identity(),
        v.identity(),
        "content hash must change the identity"
    );
}

#[test]
fn model_atoms_and_wrong_sizes_are_bad_input() {
    let e = xtb(&[]);
    let mut j = job(H2O, 0, 1, Quantity::Gradient);
    j.coords = j.coords.rows(0, 8).into_owned();
    let f = e.evaluate(&j, 0).unwrap_err();
    assert_eq!(f.kind, FailureKind::BadInput, "{f}");
    let mut j = job(H2O, 0, 1, Quantity::Gradient);
    j.coords[0] = f64::NAN;
    assert_eq!(e.evaluate(&j, 0).unwrap_err().kind, FailureKind::BadInput);
}

#[test]
fn time_limit_can_be_overridden_in_code() {
    use cairn::engine::adapter::AdapterEngine;
    let path = fixtures().join("adapters/standin.yaml");
    let a = Arc::new(Adapter::load(&path).unwrap());
    let s: Settings = [("mode".to_string(), "sleep".to_string())].into();
    let e = AdapterEngine::new(a, &s)
        .unwrap()
        .with_timeout(Some(std::time::Duration::from_millis(200)));
    let f = fail(&e, Quantity::Gradient);
    assert_eq!(f.kind, FailureKind::Timeout, "{f}");
    assert!(f.message.contains("0.2 s"), "{f}");
    cleanup(&f);
}
