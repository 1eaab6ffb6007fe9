//! The worker inside a Slurm job (`cairn slurm-worker SPEC`): runs the spec's evaluations,
//! `parallel` at a time, each with the adapter's remedies from its first attempt up to the last
//! allowed; writes `started-<k>` before and `result-<k>.json` (atomically) after each, then
//! `end.json` last. An evaluation whose result file already exists (a job resubmitted after a
//! node failure) is not run again.

use super::files::{self, EndMarker, ResultFile, Spec};
use crate::error::{Error, Result};
use std::path::Path;
use std::sync::atomic::{AtomicUsize, Ordering};

/// Run the spec at `spec_path`; its directory receives the results. Returns the exit status:
/// 0 when every evaluation has a result file (failed evaluations included), 2 when the spec
/// could not be run at all (the end marker then says why).
pub fn run(spec_path: &Path) -> i32 {
    let dir = spec_path.parent().unwrap_or(Path::new(".")).to_path_buf();
    match run_inner(spec_path, &dir) {
        Ok(n) => {
            let m = EndMarker {
                format: files::FORMAT,
                ok: true,
                error: None,
                evaluations: n,
                host: files::host_name(),
                time: files::now_utc(),
            };
            match files::write_json(&files::end_path(&dir), &m) {
                Ok(()) => 0,
                Err(e) => {
                    eprintln!("cairn slurm-worker: {e}");
                    2
                }
            }
        }
        Err(e) => {
            eprintln!("cairn slurm-worker: {e}");
            let m = EndMarker {
                format: files::FORMAT,
                ok: false,
                error: Some(e.to_string()),
                evaluations: 0,
                host: files::host_name(),
                time: files::now_utc(),
            };
            let _ = files::write_json(&files::end_path(&dir), &m);
            2
        }
    }
}

fn run_inner(spec_path: &Path, dir: &Path) -> Result<usize> {
    let spec: Spec = files::read_json(spec_path)?.ok_or_else(|| {
        Error::invalid(format!("the spec {} does not exist", spec_path.display()))
    })?;
    if spec.format > files::FORMAT {
        return Err(Error::invalid(format!(
            "the spec {} has format {}, newer than this cairn's {}; run the same cairn version on the nodes",
            spec_path.display(),
            spec.format,
            files::FORMAT
        )));
    }
    let engine = crate::engine::find_engine_limited(
        &spec.engine,
        &spec.settings,
        spec.timeout_seconds
            .filter(|t| t.is_finite() && *t > 0.0)
            .map(std::time::Duration::from_secs_f64),
    )?;
    let identity = engine.identity();
    if identity != spec.identity {
        return Err(Error::invalid(format!(
            "engine \"{}\" on this node is {identity}, but the runner submitted {}; the nodes must see the same adapter files (CAIRN_ADAPTERS) as the runner",
            spec.engine, spec.identity
        )));
    }
    let next = AtomicUsize::new(0);
    let n = spec.jobs.len();
    let failure: std::sync::Mutex<Option<Error>> = std::sync::Mutex::new(None);
    std::thread::scope(|scope| {
        for _ in 0..spec.parallel.clamp(1, n.max(1)) {
            scope.spawn(|| loop {
                let k = next.fetch_add(1, Ordering::SeqCst);
                let Some(sj) = spec.jobs.get(k) else {
                    break;
                };
                let result = files::result_path(dir, k);
                if result.exists() {
                    continue;
                }
                let step = (|| -> Result<()> {
                    let started = files::started_path(dir, k);
                    std::fs::write(&started, b"")
                        .map_err(|e| Error::io(format!("cannot write {}", started.display()), e))?;
                    let job = sj.job();
                    let report = crate::executor::run_attempts(
                        engine.as_ref(),
                        &job,
                        sj.first_attempt,
                        spec.last_attempt,
                    );
                    files::write_json(&result, &ResultFile::of(&report))
                })();
                if let Err(e) = step {
                    *failure.lock().unwrap_or_else(|p| p.into_inner()) = Some(e);
                    break;
                }
            });
        }
    });
    if let Some(e) = failure.into_inner().unwrap_or_else(|p| p.into_inner()) {
        return Err(e);
    }
    Ok(n)
}
