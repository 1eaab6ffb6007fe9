//! Running the `cairn` binary in tests.
#![allow(dead_code)]

use std::path::Path;
use std::process::{Command, Output};

/// `cairn ARGS` in `cwd`, one engine thread, no `CAIRN_STORE` from the environment.
pub fn cairn(args: &[&str], cwd: &Path) -> Output {
    Command::new(env!("CARGO_BIN_EXE_cairn"))
        .args(args)
        .current_dir(cwd)
        .env_remove("CAIRN_STORE")
        .env("OMP_NUM_THREADS", "1")
        .output()
        .expect("the cairn binary runs")
}

pub fn stdout(o: &Output) -> String {
    String::from_utf8_lossy(&o.stdout).into_owned()
}

pub fn stderr(o: &Output) -> String {
    String::from_utf8_lossy(&o.stderr).into_owned()
}

/// The JSON record on stdout, whatever the exit status.
pub fn json(o: &Output) -> serde_json::Value {
    let out = stdout(o);
    serde_json::from_str(&out).unwrap_or_else(|e| panic!("{e}: {out} / {}", stderr(o)))
}

/// The JSON record on stdout of a run that must have succeeded (exit status 0).
pub fn json_ok(o: &Output) -> serde_json::Value {
    assert_eq!(o.status.code(), Some(0), "stderr: {}", stderr(o));
    json(o)
}
