//! Thermochemistry and rates: ideal-gas RRHO (optionally quasi-RRHO) thermochemistry from a
//! geometry and vibrational wavenumbers, point-group symmetry numbers, Eyring–Polanyi rate
//! constants with standard states, the Wigner tunnelling factor and half-lives.
//!
//! Pure functions: no I/O except `input`, which reads the `cairn thermo` input file.
//! See DEVELOPERS.md, "Thermochemistry and rates".

pub mod input;
pub mod rate;
pub mod rrho;
pub mod symmetry;

pub use rate::{eyring, kbt_over_h, wigner, RateConstant, StandardState};
pub use rrho::{thermo, Kind, Masses, Qrrho, Settings, Thermo};
pub use symmetry::{detect, PointGroup};
