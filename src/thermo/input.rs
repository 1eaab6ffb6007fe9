//! The `cairn thermo` input file (YAML, our own small format):
//!
//! ```yaml
//! geometry: water.xyz          # XYZ file (Å), relative to this file; or an inline XYZ block:
//! # geometry: |
//! #   3
//! #   water
//! #   O 0 0 0
//! #   ...
//! frequencies_cm1: [3657, 1595, 3756]   # vibrational wavenumbers; imaginary as negative
//! multiplicity: 1                        # 2S+1, default 1
//! kind: minimum                          # or transition_state (one imaginary, left out)
//! symmetry_number: 2                     # optional; detected from the point group otherwise
//! masses: isotope                        # or standard (atomic weights); default isotope
//! ```

use super::rrho::{Kind, Masses};
use crate::error::{Error, Result};
use crate::molecule::Molecule;
use serde::Deserialize;
use std::path::{Path, PathBuf};

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct Raw {
    geometry: String,
    frequencies_cm1: Vec<f64>,
    #[serde(default = "one")]
    multiplicity: u32,
    #[serde(default)]
    kind: Kind,
    #[serde(default)]
    symmetry_number: Option<u32>,
    #[serde(default)]
    masses: Masses,
}

fn one() -> u32 {
    1
}

/// A read input file.
#[derive(Debug, Clone)]
pub struct ThermoInput {
    pub path: PathBuf,
    pub molecule: Molecule,
    /// Where the geometry came from (a path, or "inline").
    pub geometry_source: String,
    pub frequencies_cm1: Vec<f64>,
    pub multiplicity: u32,
    pub kind: Kind,
    pub symmetry_number: Option<u32>,
    pub masses: Masses,
}

/// Read and check the input file.
pub fn read(path: &Path) -> Result<ThermoInput> {
    let text = std::fs::read_to_string(path).map_err(|e| {
        Error::io(
            format!("cannot read thermochemistry input {}", path.display()),
            e,
        )
    })?;
    parse(&text, path)
}

/// Parse the text of an input file; `path` is used for messages and relative geometry paths.
pub fn parse(text: &str, path: &Path) -> Result<ThermoInput> {
    let name = path.display().to_string();
    let raw: Raw = serde_yaml::from_str(text).map_err(|e| {
        let line = e.location().map(|l| l.line()).unwrap_or(1);
        Error::parse(
            &name,
            line,
            format!(
                "{e} (expected keys: geometry, frequencies_cm1, multiplicity, kind, \
                 symmetry_number, masses)"
            ),
        )
    })?;
    let (molecule, geometry_source) = if raw.geometry.contains('\n') {
        let frames = crate::xyz::parse_frames(&raw.geometry, &format!("{name} (inline geometry)"))?;
        let m = frames
            .into_iter()
            .next()
            .ok_or_else(|| Error::parse(&name, 1, "the inline geometry has no atoms"))?;
        (m, "inline".to_string())
    } else {
        let g = PathBuf::from(raw.geometry.trim());
        let g = if g.is_absolute() {
            g
        } else {
            path.parent().unwrap_or(Path::new(".")).join(g)
        };
        (crate::xyz::read(&g)?, g.display().to_string())
    };
    if molecule.is_model_surface() {
        return Err(Error::parse(
            &name,
            1,
            "the geometry is a model-surface point (pseudo-atoms X); thermochemistry needs atoms",
        ));
    }
    Ok(ThermoInput {
        path: path.to_path_buf(),
        molecule,
        geometry_source,
        frequencies_cm1: raw.frequencies_cm1,
        multiplicity: raw.multiplicity,
        kind: raw.kind,
        symmetry_number: raw.symmetry_number,
        masses: raw.masses,
    })
}
