//! Which executor a stage's evaluations go to: views of one shared local pool, or Slurm
//! executors of one shared [`crate::slurm::Cluster`] (one squeue poller, one record directory
//! `DIR/cluster`), each with the level's `slurm:` options, the stage's retry budget and time
//! limit. The runner builds one [`Executors`] and asks it once per evaluator.

use super::model::{ExecutorKind, Level, Study};
use crate::error::Result;
use crate::executor::{Executor, LocalExecutor};
use std::path::Path;
use std::sync::Arc;

/// The executors of one run.
pub struct Executors {
    pool: LocalExecutor,
    cluster: Option<Arc<crate::slurm::Cluster>>,
}

impl Executors {
    /// For a run of `study` into `dir`: a local pool of `jobs` slots, or (with
    /// `defaults.executor: slurm`) the cluster state under `DIR/cluster`.
    pub fn new(study: &Study, dir: &Path, jobs: usize) -> Result<Executors> {
        let cluster = match study.defaults.executor {
            ExecutorKind::Local => None,
            ExecutorKind::Slurm => Some(crate::slurm::Cluster::new(dir.join("cluster"))?),
        };
        Ok(Executors {
            pool: LocalExecutor::new(jobs.max(1)),
            cluster,
        })
    }

    /// The executor for evaluations at `level` with this retry budget and per-run time limit.
    pub fn for_stage(
        &self,
        level: &Level,
        retries: usize,
        timeout_seconds: Option<f64>,
    ) -> Arc<dyn Executor> {
        match &self.cluster {
            None => Arc::new(self.pool.sharing(retries)),
            Some(c) => Arc::new(
                c.executor(
                    &level.name,
                    &level.engine,
                    &level.settings,
                    level.slurm.clone().unwrap_or_default(),
                )
                .with_retries(retries)
                .with_timeout(timeout_seconds),
            ),
        }
    }
}
