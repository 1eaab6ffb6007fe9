//! Cairn: find and verify transition states of many reactions with real quantum-chemistry
//! engines. See DEVELOPERS.md for the architecture.

pub mod algo;
pub mod cli;
pub mod driver;
pub mod elements;
pub mod engine;
pub mod error;
pub mod eval;
pub mod executor;
pub mod geom;
pub mod molecule;
pub mod path;
pub mod report;
pub mod slurm;
pub mod store;
pub mod study;
pub mod thermo;
pub mod units;
pub mod xyz;

pub use error::{Error, Result};
