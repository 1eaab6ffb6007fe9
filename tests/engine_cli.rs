//! `cairn engines`, and what happens to a running engine when Cairn itself is killed.

use std::path::{Path, PathBuf};
use std::process::Command;
use std::time::{Duration, Instant};

fn fixtures() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/fixtures/engine")
}

#[test]
fn engines_lists_adapters_executables_and_models() {
    let dirs = format!(
        "{}:{}",
        fixtures().join("adapters").display(),
        fixtures().join("malformed").display()
    );
    let out = Command::new(env!("CARGO_BIN_EXE_cairn"))
        .args(["engines", "--settings"])
        .env("CAIRN_ADAPTERS", dirs)
        .output()
        .unwrap();
    assert!(out.status.success());
    let text = String::from_utf8_lossy(&out.stdout);
    let line = |name: &str| {
        text.lines()
            .find(|l| l.trim_start().starts_with(&format!("{name} ")))
            .unwrap_or_else(|| panic!("{name} not listed:\n{text}"))
            .to_string()
    };
    assert!(
        line("xtb").contains("version 6.5.1") && line("xtb").contains("found"),
        "{text}"
    );
    assert!(line("pyscf").contains("found"), "{text}");
    let missing = line("missing");
    assert!(
        missing.contains("NOT found")
            && missing.contains("apt-get install cairn-test-no-such-engine"),
        "{missing}"
    );
    assert!(line("standin").contains("standin.yaml"), "{text}");
    assert!(text.contains("mode = ok (one of ok, nonzero"), "{text}");
    // A malformed adapter is listed with its error, file and line.
    let bad = line("unknown_key");
    assert!(
        bad.contains("DOES NOT LOAD") && bad.contains("unknown_key.yaml:11:"),
        "{bad}"
    );
    assert!(text.contains("muller-brown"), "{text}");
}

fn alive(pid: i32) -> bool {
    let exists = unsafe { libc::kill(pid, 0) } == 0;
    exists
        && !std::fs::read_to_string(format!("/proc/{pid}/stat"))
            .map(|s| s.contains(") Z"))
            .unwrap_or(true)
}

#[test]
fn engine_dies_with_a_killed_cairn() {
    // A copy of the stand-in adapter with a long time limit, so only the kill can end it.
    let tmp = tempfile::tempdir().unwrap();
    let adapters = tmp.path().join("adapters");
    let scratch = tmp.path().join("scratch");
    std::fs::create_dir_all(&adapters).unwrap();
    let text = std::fs::read_to_string(fixtures().join("adapters/standin.yaml"))
        .unwrap()
        .replace("name: standin", "name: slowstandin")
        .replace("timeout_seconds: 1", "timeout_seconds: 600")
        .replace(
            "{{ adapter_dir }}/../standin.sh",
            &fixtures().join("standin.sh").display().to_string(),
        );
    std::fs::write(adapters.join("slowstandin.yaml"), text).unwrap();
    let xyz = tmp.path().join("h2.xyz");
    std::fs::write(&xyz, "2\n\nH 0 0 0\nH 0 0 0.74\n").unwrap();

    let mut cairn = Command::new(env!("CARGO_BIN_EXE_cairn"))
        .args(["evaluate", "--engine", "slowstandin", "--set", "mode=sleep"])
        .arg("--store")
        .arg(tmp.path().join("store"))
        .arg(&xyz)
        .env("CAIRN_ADAPTERS", &adapters)
        .env("CAIRN_SCRATCH", &scratch)
        .stdout(std::process::Stdio::null())
        .stderr(std::process::Stdio::null())
        .spawn()
        .unwrap();
    // Wait (up to 60 s) for the stand-in to record its pids in its scratch directory.
    let start = Instant::now();
    let pids = loop {
        let found = std::fs::read_dir(&scratch).ok().and_then(|rd| {
            rd.filter_map(|e| e.ok())
                .map(|e| e.path().join("pids"))
                .find_map(|p| std::fs::read_to_string(p).ok())
                .filter(|s| s.ends_with('\n'))
        });
        if let Some(s) = found {
            break s;
        }
        assert!(
            start.elapsed() < Duration::from_secs(60),
            "the stand-in never started"
        );
        std::thread::sleep(Duration::from_millis(50));
    };
    let engine_pid: i32 = pids.split_whitespace().next().unwrap().parse().unwrap();
    assert!(alive(engine_pid));
    cairn.kill().unwrap(); // SIGKILL: Cairn gets no chance to clean up itself.
    cairn.wait().unwrap();
    let start = Instant::now();
    while alive(engine_pid) && start.elapsed() < Duration::from_secs(10) {
        std::thread::sleep(Duration::from_millis(50));
    }
    let survived = alive(engine_pid);
    // Clean up whatever the stand-in left (its own process group, which this test started).
    unsafe {
        libc::kill(-engine_pid, libc::SIGKILL);
    }
    assert!(!survived, "the engine process outlived the killed cairn");
}
