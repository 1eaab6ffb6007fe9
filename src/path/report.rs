//! Plain formatting of path results for files and records: geometries as JSON, multi-frame
//! XYZ text, energies with their units. No I/O here; the commands write what these return.

use crate::molecule::Molecule;
use crate::units::{ANGSTROM_PER_BOHR, KCALMOL_PER_HARTREE};
use nalgebra::DVector;
use serde_json::{json, Value};

/// The energy unit of a geometry's engine: Eh, or the model surface's own units.
pub fn energy_unit(surface: bool) -> &'static str {
    if surface {
        "surface units"
    } else {
        "Eh"
    }
}

/// A geometry as JSON: element symbols and coordinates (Å; surface units for model surfaces).
pub fn geometry_json(template: &Molecule, x: &DVector<f64>) -> Value {
    let m = template.with_flat(x);
    let scale = if m.is_model_surface() {
        1.0
    } else {
        ANGSTROM_PER_BOHR
    };
    let coords: Vec<[f64; 3]> = m
        .coords
        .iter()
        .map(|c| [c[0] * scale, c[1] * scale, c[2] * scale])
        .collect();
    let symbols: Vec<&str> = m.elements.iter().map(|e| e.symbol()).collect();
    let key = if m.is_model_surface() {
        "coordinates_surface_units"
    } else {
        "coordinates_angstrom"
    };
    json!({ "symbols": symbols, key: coords })
}

/// Energy relative to a reference, with unit: kcal/mol for molecules, surface units otherwise.
pub fn relative(e: f64, e0: f64, surface: bool) -> String {
    if surface {
        format!("{:.4} (surface units)", e - e0)
    } else {
        format!("{:.3} kcal/mol", (e - e0) * KCALMOL_PER_HARTREE)
    }
}

/// An energy with its unit.
pub fn energy(e: f64, surface: bool) -> String {
    if surface {
        format!("{e:.6} (surface units)")
    } else {
        format!("{e:.10} Eh")
    }
}

/// Multi-frame XYZ text: each frame a geometry with its comment line.
pub fn frames_xyz(template: &Molecule, frames: &[(DVector<f64>, String)]) -> String {
    frames
        .iter()
        .map(|(x, c)| crate::xyz::format_frame(&template.with_flat(x), c))
        .collect()
}

/// A per-atom vector (e.g. a mode to follow) as text: one line per atom, `Symbol dx dy dz`,
/// dimensionless (the vector is normalised over all 3N components).
pub fn mode_text(template: &Molecule, v: &DVector<f64>, what: &str) -> String {
    let mut s = format!("# {what}: unit vector over all 3N Cartesian components (dimensionless)\n");
    for (i, e) in template.elements.iter().enumerate() {
        if 3 * i + 2 < v.len() {
            s.push_str(&format!(
                "{:<2} {:>14.8} {:>14.8} {:>14.8}\n",
                e.symbol(),
                v[3 * i],
                v[3 * i + 1],
                v[3 * i + 2]
            ));
        }
    }
    s
}
