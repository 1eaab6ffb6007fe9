//! XYZ files: single and multi-frame, in Å, comment line kept.
//!
//! A frame is: a line with the atom count, a comment line, then one line per atom
//! `Symbol x y z` (extra columns are ignored). Frames follow each other without blank lines;
//! trailing blank lines are allowed. Geometries made only of the pseudo-atom `X` are points on a
//! model surface: their coordinates are read and written as they are, without unit conversion.

use crate::elements::Element;
use crate::error::{Error, Result};
use crate::molecule::Molecule;
use crate::units::{ANGSTROM_PER_BOHR, BOHR_PER_ANGSTROM};
use std::path::Path;

/// Parse every frame of an XYZ text. `name` is used in error messages (usually the file path).
pub fn parse_frames(text: &str, name: &str) -> Result<Vec<Molecule>> {
    let lines: Vec<&str> = text.lines().collect();
    let mut frames = Vec::new();
    let mut i = 0;
    while i < lines.len() {
        if lines[i].trim().is_empty() {
            // Only trailing blank lines are allowed between/after frames.
            if lines[i..].iter().all(|l| l.trim().is_empty()) {
                break;
            }
            return Err(Error::parse(
                name,
                i + 1,
                "blank line where an atom count was expected",
            ));
        }
        let count_text = lines[i].trim();
        let n: usize = count_text.parse().map_err(|_| {
            Error::parse(
                name,
                i + 1,
                format!("expected the number of atoms, found '{count_text}'"),
            )
        })?;
        if n == 0 {
            return Err(Error::parse(name, i + 1, "a frame with 0 atoms"));
        }
        if i + 1 >= lines.len() {
            return Err(Error::parse(
                name,
                i + 1,
                format!(
                    "file ends after the atom count {n}: the comment line and atoms are missing"
                ),
            ));
        }
        let comment = lines[i + 1].trim_end().to_string();
        let mut elements = Vec::with_capacity(n);
        let mut coords = Vec::with_capacity(n);
        for k in 0..n {
            let ln = i + 2 + k;
            let line = match lines.get(ln) {
                Some(l) if !l.trim().is_empty() => *l,
                _ => {
                    return Err(Error::parse(
                        name,
                        ln + 1,
                        format!("the atom count says {n} atoms but only {k} atom lines follow"),
                    ))
                }
            };
            let mut fields = line.split_whitespace();
            let sym = fields.next().unwrap_or("");
            let el = Element::from_symbol(sym)
                .or_else(|| sym.parse::<u32>().ok().and_then(Element::from_z))
                .ok_or_else(|| Error::parse(name, ln + 1, format!("unknown element '{sym}'")))?;
            let mut xyz = [0.0; 3];
            for (axis, slot) in xyz.iter_mut().enumerate() {
                let f = fields.next().ok_or_else(|| {
                    Error::parse(
                        name,
                        ln + 1,
                        format!("atom {} ({sym}) has fewer than 3 coordinates", k + 1),
                    )
                })?;
                let v: f64 = f.parse().map_err(|_| {
                    Error::parse(
                        name,
                        ln + 1,
                        format!(
                            "bad {} coordinate '{f}' for atom {} ({sym})",
                            ["x", "y", "z"][axis],
                            k + 1
                        ),
                    )
                })?;
                if !v.is_finite() {
                    return Err(Error::parse(
                        name,
                        ln + 1,
                        format!("coordinate '{f}' of atom {} is not a finite number", k + 1),
                    ));
                }
                *slot = v;
            }
            elements.push(el);
            coords.push(xyz);
        }
        let mut m = Molecule::new(elements, coords);
        m.comment = comment;
        if !m.is_model_surface() {
            if m.elements.iter().any(|e| e.is_pseudo()) {
                return Err(Error::parse(
                    name,
                    i + 1,
                    "pseudo-atoms X (model-surface points) cannot be mixed with real atoms",
                ));
            }
            for c in &mut m.coords {
                for v in c.iter_mut() {
                    *v *= BOHR_PER_ANGSTROM;
                }
            }
        }
        frames.push(m);
        i += 2 + n;
    }
    if frames.is_empty() {
        return Err(Error::parse(name, 1, "no geometry found (empty file)"));
    }
    Ok(frames)
}

/// Read all frames of an XYZ file.
pub fn read_frames(path: &Path) -> Result<Vec<Molecule>> {
    let text = std::fs::read_to_string(path)
        .map_err(|e| Error::io(format!("cannot read geometry file {}", path.display()), e))?;
    parse_frames(&text, &path.display().to_string())
}

/// Read a single-frame XYZ file (the first frame if there are several).
pub fn read(path: &Path) -> Result<Molecule> {
    let mut frames = read_frames(path)?;
    Ok(frames.swap_remove(0))
}

/// Format one frame. The comment is written on one line (newlines replaced by spaces).
pub fn format_frame(m: &Molecule, comment: &str) -> String {
    let mut s = String::with_capacity(64 * (m.len() + 2));
    s.push_str(&format!("{}\n", m.len()));
    s.push_str(&comment.replace(['\n', '\r'], " "));
    s.push('\n');
    let scale = if m.is_model_surface() {
        1.0
    } else {
        ANGSTROM_PER_BOHR
    };
    for (e, c) in m.elements.iter().zip(&m.coords) {
        s.push_str(&format!(
            "{:<2} {:>18.10} {:>18.10} {:>18.10}\n",
            e.symbol(),
            c[0] * scale,
            c[1] * scale,
            c[2] * scale
        ));
    }
    s
}

/// Format several frames, each with its own comment.
pub fn format_frames<'a>(frames: impl IntoIterator<Item = (&'a Molecule, String)>) -> String {
    frames
        .into_iter()
        .map(|(m, c)| format_frame(m, &c))
        .collect()
}

/// Write text to a file atomically (temp file in the same directory, fsync, rename).
pub fn write_atomic(path: &Path, text: &str) -> Result<()> {
    use std::io::Write;
    let dir = path
        .parent()
        .filter(|p| !p.as_os_str().is_empty())
        .unwrap_or(Path::new("."));
    std::fs::create_dir_all(dir)
        .map_err(|e| Error::io(format!("cannot create directory {}", dir.display()), e))?;
    let mut tmp = tempfile::NamedTempFile::new_in(dir).map_err(|e| {
        Error::io(
            format!("cannot create a temporary file in {}", dir.display()),
            e,
        )
    })?;
    share_readable(tmp.as_file());
    tmp.write_all(text.as_bytes())
        .and_then(|_| tmp.as_file().sync_all())
        .map_err(|e| Error::io(format!("cannot write {}", path.display()), e))?;
    tmp.persist(path)
        .map_err(|e| Error::io(format!("cannot rename into {}", path.display()), e.error))?;
    Ok(())
}

/// Give a freshly made temporary file the usual mode of output files, rw-r--r--, before it is
/// renamed into place (temporary files are created rw------- for safety; results in a study
/// directory are meant to be read by colleagues and by jobs running as other users).
pub fn share_readable(f: &std::fs::File) {
    use std::os::unix::fs::PermissionsExt;
    let _ = f.set_permissions(std::fs::Permissions::from_mode(0o644));
}

/// Write one geometry to an XYZ file (atomically), using the molecule's own comment.
pub fn write(path: &Path, m: &Molecule) -> Result<()> {
    write_atomic(path, &format_frame(m, &m.comment))
}

#[cfg(test)]
mod tests {
    use super::*;

    const WATER: &str =
        "3\nwater, r(OH) 0.9572\nO 0 0 0\nH 0.75695033 0 0.58588228\nH -0.75695033 0 0.58588228\n";

    #[test]
    fn reads_and_round_trips() {
        let m = parse_frames(WATER, "w.xyz").unwrap().remove(0);
        assert_eq!(m.comment, "water, r(OH) 0.9572");
        assert!((m.coords[1][0] - 0.756_950_33 * BOHR_PER_ANGSTROM).abs() < 1e-12);
        let text = format_frame(&m, &m.comment);
        let back = parse_frames(&text, "x").unwrap().remove(0);
        for (a, b) in m.coords.iter().zip(&back.coords) {
            for k in 0..3 {
                assert!((a[k] - b[k]).abs() < 1e-9);
            }
        }
        assert_eq!(back.comment, m.comment);
    }

    #[test]
    fn multi_frame() {
        let two = format!("{WATER}{WATER}\n\n");
        let f = parse_frames(&two, "two.xyz").unwrap();
        assert_eq!(f.len(), 2);
    }

    #[test]
    fn surface_points_are_not_converted() {
        let f = parse_frames("1\nsurface\nX -0.822 0.624 0\n", "mb.xyz").unwrap();
        assert!(f[0].is_model_surface());
        assert_eq!(f[0].coords[0], [-0.822, 0.624, 0.0]);
        let text = format_frame(&f[0], "");
        assert!(text.contains("-0.8220000000"));
    }

    #[test]
    fn errors_name_line_and_problem() {
        let cases = [
            (
                "4\nc\nO 0 0 0\nH 1 0 0\nH 0 1 0\n",
                ":6:",
                "only 3 atom lines",
            ),
            (
                "3\nc\nO 0 0 0\nH 1 zero 0\nH 0 1 0\n",
                ":4:",
                "bad y coordinate 'zero'",
            ),
            (
                "3\nc\nO 0 0 0\nQq 1 0 0\nH 0 1 0\n",
                ":4:",
                "unknown element 'Qq'",
            ),
            ("three\nc\n", ":1:", "expected the number of atoms"),
            ("", ":1:", "empty"),
            ("2\nc\nO 0 0 0\nH 1 0\n", ":4:", "fewer than 3"),
            ("1\nc\nH nan 0 0\n", ":3:", "not a finite"),
            ("2\nc\nX 0 0 0\nH 1 0 0\n", ":1:", "cannot be mixed"),
        ];
        for (text, loc, what) in cases {
            let err = parse_frames(text, "bad.xyz").unwrap_err().to_string();
            assert!(err.contains(loc) && err.contains(what), "{text:?} -> {err}");
            assert!(err.starts_with("bad.xyz"), "{err}");
        }
    }
}
