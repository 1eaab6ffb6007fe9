//! Studies: many reactions, one file, one plan.
//!
//! Reading a study happens in two phases: [`raw`] is the file as written (serde, unknown keys
//! are errors, serde_yaml gives line and column), [`load`] turns it into a validated
//! [`Study`] (levels resolved, geometry files read, charges and multiplicities checked, endpoints
//! compared atom by atom, every stage's input made by the start or an earlier stage). Errors
//! carry file:line:column, the reaction and the key ([`StudyError`]).
//!
//! [`plan`] turns a study into a dependency graph of tasks with identical species shared,
//! [`queue`] is the pure ready-queue the runner drains, [`lock`] keeps two runners off one output
//! directory, [`layout`] keeps every output path inside it, and [`record`] defines what a run
//! writes there (state record, per-reaction summaries). The format is documented in
//! DEVELOPERS.md ("Study files") and by the commented `workflows-demo/demo.yaml`.

pub mod executors;
pub mod history;
pub mod kinetics;
pub mod layout;
pub mod load;
pub mod locate;
pub mod lock;
pub mod model;
pub mod plan;
pub mod progress;
pub mod queue;
pub mod raw;
pub mod record;
mod resume;
pub mod run;
mod stages;

pub use layout::OutputDir;
pub use load::{load, parse};
pub use locate::{Loc, StudyError};
pub use lock::DirLock;
pub use model::*;
pub use plan::{Plan, Task};
pub use queue::ReadyQueue;
