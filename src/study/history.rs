//! `DIR/<reaction>/band-history.json`: the band's energy profile after every evaluated batch,
//! written by the `band` stage so a report can draw the band converging.

use super::run::Ctx;
use crate::error::Result;
use serde::{Deserialize, Serialize};

/// Version of `band-history.json`.
pub const HISTORY_FORMAT: u32 = 1;

/// The band's energies per iteration. Energies in Eh for molecules; on a model surface in the
/// surface's own units (`energy_unit` says which).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct BandHistory {
    pub format: u32,
    pub reaction: String,
    /// `hartree`, or `surface` on a model surface.
    pub energy_unit: String,
    /// Images including both ends.
    pub images: usize,
    /// One profile per evaluated batch, ends first and last (`energies[k][i]`: batch k, image
    /// i). Entries not yet known are null.
    pub energies: Vec<Vec<Option<f64>>>,
}

impl BandHistory {
    /// Parse, refusing formats newer than this Cairn understands; errors name the file.
    pub fn from_json(text: &str, file: &str) -> Result<BandHistory> {
        crate::study::record::parse_versioned(text, file, HISTORY_FORMAT)
    }
}

pub(super) fn write_band_history(
    ctx: &Ctx,
    reaction: &str,
    history: &[Vec<f64>],
    model_surface: bool,
) -> Result<()> {
    let rec = BandHistory {
        format: HISTORY_FORMAT,
        reaction: reaction.to_string(),
        energy_unit: if model_surface { "surface" } else { "hartree" }.into(),
        images: history.first().map_or(0, Vec::len),
        energies: history
            .iter()
            .map(|p| p.iter().map(|e| e.is_finite().then_some(*e)).collect())
            .collect(),
    };
    let text = serde_json::to_string(&rec).unwrap_or_default();
    ctx.out
        .write(&format!("{reaction}/band-history.json"), &(text + "\n"))?;
    Ok(())
}
