//! `cairn report DIR`: a run's results as one self-contained HTML page (inline CSS and SVG, no
//! network, no external fonts), a Markdown file and a CSV table.
//!
//! Reads what `cairn run` left in DIR: `state.json` (required: which reactions there are),
//! per reaction `summary.json`, `kinetics.json`, `band-history.json`, `band.xyz`, `irc.xyz`,
//! `modes.json`. A missing file is shown as missing; a file that is there but cannot be read or
//! parsed is an error naming the file. Pure formatting lives in [`svg`], [`html`] and [`text`];
//! this module only reads.

pub mod html;
pub mod svg;
pub mod text;

use crate::error::{Error, Result};
use crate::study::history::BandHistory;
use crate::study::kinetics::KineticsRecord;
use crate::study::record::{RunState, StateRecord, Summary, TaskRecord, Verdict};
use crate::units::{KCALMOL_PER_HARTREE, KJMOL_PER_HARTREE};
use std::path::{Path, PathBuf};

/// The caution printed at the top of every report (and in the README).
pub const CAUTION: &str = "Computed barriers and rates are model results with method errors of several kcal/mol (a factor of ten or more in a rate constant at room temperature). Validate them against experiment before using them for process-safety decisions (thermal runaway, storage of energetic materials), and defer to local codes and licensed practice.";

/// Everything the report shows about one reaction.
#[derive(Debug, Clone)]
pub struct ReactionData {
    pub name: String,
    /// None: the run did not write a summary (not finished, or interrupted).
    pub summary: Option<Summary>,
    pub kinetics: Option<KineticsRecord>,
    pub band_history: Option<BandHistory>,
    /// The band's final energies (Eh or surface units), from band.xyz comments.
    pub band_final: Option<Vec<f64>>,
    /// IRC: (arc length s in √amu·bohr, saddle at 0, reverse side negative; energy).
    pub irc: Option<Vec<(f64, f64)>>,
    /// modes.json: wavenumbers, cm⁻¹ (imaginary negative).
    pub frequencies_cm1: Option<Vec<f64>>,
    /// True on a model surface (pseudo-atoms X): energies in surface units.
    pub model_surface: bool,
    /// This reaction's tasks from state.json.
    pub tasks: Vec<TaskRecord>,
}

impl ReactionData {
    /// Unit of energies as displayed.
    pub fn unit(&self) -> &'static str {
        if self.model_surface {
            "surface units"
        } else {
            "kcal/mol"
        }
    }

    /// A summary energy (kcal/mol as written) in the displayed unit.
    pub fn shown(&self, kcal: Option<f64>) -> Option<f64> {
        kcal.map(|v| {
            if self.model_surface {
                v / KCALMOL_PER_HARTREE
            } else {
                v
            }
        })
    }

    /// A summary energy in kJ/mol (None on model surfaces).
    pub fn kj(&self, kcal: Option<f64>) -> Option<f64> {
        if self.model_surface {
            None
        } else {
            kcal.map(|v| v / KCALMOL_PER_HARTREE * KJMOL_PER_HARTREE)
        }
    }

    /// An absolute energy (Eh or surface units) relative to `base`, in the displayed unit.
    pub fn relative(&self, e: f64, base: f64) -> f64 {
        if self.model_surface {
            e - base
        } else {
            (e - base) * KCALMOL_PER_HARTREE
        }
    }

    pub fn forward_barrier(&self) -> Option<f64> {
        self.summary
            .as_ref()
            .and_then(|s| s.barrier_forward_kcal_mol)
    }

    pub fn status(&self) -> Option<Verdict> {
        self.summary.as_ref().map(|s| s.status)
    }
}

/// A whole run.
#[derive(Debug, Clone)]
pub struct RunData {
    pub dir: PathBuf,
    pub study: String,
    pub reactions: Vec<ReactionData>,
}

impl RunData {
    /// Reactions sorted by forward barrier (lowest first); those without a barrier last, by
    /// name.
    pub fn sorted(&self) -> Vec<&ReactionData> {
        let mut v: Vec<&ReactionData> = self.reactions.iter().collect();
        v.sort_by(|a, b| match (a.forward_barrier(), b.forward_barrier()) {
            (Some(x), Some(y)) => x.total_cmp(&y).then_with(|| a.name.cmp(&b.name)),
            (Some(_), None) => std::cmp::Ordering::Less,
            (None, Some(_)) => std::cmp::Ordering::Greater,
            (None, None) => a.name.cmp(&b.name),
        });
        v
    }
}

fn read_optional(path: &Path) -> Result<Option<String>> {
    match std::fs::read_to_string(path) {
        Ok(t) => Ok(Some(t)),
        Err(e) if e.kind() == std::io::ErrorKind::NotFound => Ok(None),
        Err(e) => Err(Error::io(format!("cannot read {}", path.display()), e)),
    }
}

/// Read a run directory. Errors: no state.json (not a run directory), or any file present but
/// unreadable or malformed (named).
pub fn load(dir: &Path) -> Result<RunData> {
    let state_path = dir.join("state.json");
    let text = match read_optional(&state_path)? {
        Some(t) => t,
        None => {
            return Err(Error::invalid(format!(
                "{} not found: {} holds no run; give the --dir of a `cairn run` (run one with `cairn run STUDY.yaml --dir {}`)",
                state_path.display(),
                dir.display(),
                dir.display()
            )))
        }
    };
    let state = StateRecord::from_json(&text, &state_path.display().to_string())?;
    // Reaction names, in the order of the state record.
    let mut names: Vec<String> = Vec::new();
    for t in &state.tasks {
        if !names.contains(&t.reaction) {
            crate::study::load::check_name(&t.reaction).map_err(|m| {
                Error::invalid(format!(
                    "{}: reaction name \"{}\" is not one a run writes ({m})",
                    state_path.display(),
                    t.reaction
                ))
            })?;
            names.push(t.reaction.clone());
        }
    }
    let mut reactions = Vec::new();
    for name in names {
        reactions.push(load_reaction(dir, &name, &state)?);
    }
    Ok(RunData {
        dir: dir.to_path_buf(),
        study: state.study.clone(),
        reactions,
    })
}

fn parse_json<T: serde::de::DeserializeOwned>(text: &str, path: &Path) -> Result<T> {
    serde_json::from_str(text).map_err(|e| {
        Error::parse(
            path.display().to_string(),
            e.line(),
            format!("{e}; the file is damaged: run the study again to rewrite it"),
        )
    })
}

fn load_reaction(dir: &Path, name: &str, state: &StateRecord) -> Result<ReactionData> {
    let rdir = dir.join(name);
    let p = |f: &str| rdir.join(f);
    let summary: Option<Summary> = match read_optional(&p("summary.json"))? {
        Some(t) => {
            let path = p("summary.json");
            let probe: serde_json::Value = parse_json(&t, &path)?;
            crate::study::record::refuse_newer(
                &probe,
                &path.display().to_string(),
                crate::study::record::FORMAT,
            )?;
            Some(parse_json(&t, &path)?)
        }
        None => None,
    };
    let kinetics = match read_optional(&p("kinetics.json"))? {
        Some(t) => Some(KineticsRecord::from_json(
            &t,
            &p("kinetics.json").display().to_string(),
        )?),
        None => None,
    };
    let band_history = match read_optional(&p("band-history.json"))? {
        Some(t) => Some(BandHistory::from_json(
            &t,
            &p("band-history.json").display().to_string(),
        )?),
        None => None,
    };
    let mut model_surface = band_history
        .as_ref()
        .map(|h| h.energy_unit == "surface")
        .unwrap_or(false);
    let band_final = match read_optional(&p("band.xyz"))? {
        Some(t) => {
            let frames = crate::xyz::parse_frames(&t, &p("band.xyz").display().to_string())?;
            model_surface |= frames.first().is_some_and(|m| m.is_model_surface());
            Some(energies_from_comments(&frames, &p("band.xyz"))?)
        }
        None => None,
    };
    let irc = match read_optional(&p("irc.xyz"))? {
        Some(t) => {
            let frames = crate::xyz::parse_frames(&t, &p("irc.xyz").display().to_string())?;
            model_surface |= frames.first().is_some_and(|m| m.is_model_surface());
            Some(irc_profile(&frames, &p("irc.xyz"))?)
        }
        None => None,
    };
    if let Some(t) = read_optional(&p("saddle.xyz"))? {
        if let Ok(frames) = crate::xyz::parse_frames(&t, "saddle.xyz") {
            model_surface |= frames.first().is_some_and(|m| m.is_model_surface());
        }
    }
    let frequencies_cm1 = match read_optional(&p("modes.json"))? {
        Some(t) => {
            let v: serde_json::Value = parse_json(&t, &p("modes.json"))?;
            let f = v
                .get("frequencies_cm1")
                .and_then(|f| f.as_array())
                .map(|a| a.iter().filter_map(|x| x.as_f64()).collect::<Vec<f64>>())
                .ok_or_else(|| {
                    Error::invalid(format!(
                        "{}: no frequencies_cm1 list; the file is damaged: run the study again to rewrite it",
                        p("modes.json").display()
                    ))
                })?;
            Some(f)
        }
        None => None,
    };
    Ok(ReactionData {
        name: name.to_string(),
        summary,
        kinetics,
        band_history,
        band_final,
        irc,
        frequencies_cm1,
        model_surface,
        tasks: state
            .tasks
            .iter()
            .filter(|t| t.reaction == name)
            .cloned()
            .collect(),
    })
}

/// The energy `E = <number> Eh` in an XYZ comment.
fn energy_in(comment: &str) -> Option<f64> {
    let i = comment.find("E = ")? + 4;
    comment[i..].split_whitespace().next()?.parse().ok()
}

fn energies_from_comments(frames: &[crate::molecule::Molecule], path: &Path) -> Result<Vec<f64>> {
    frames
        .iter()
        .enumerate()
        .map(|(k, m)| {
            energy_in(&m.comment).ok_or_else(|| {
                Error::invalid(format!(
                    "{}: frame {} has no energy (\"E = … Eh\") in its comment line; the file is damaged: run the study again to rewrite it",
                    path.display(),
                    k + 1
                ))
            })
        })
        .collect()
}

/// Arc length along the IRC frames (mass-weighted: √amu·bohr; unit masses on model surfaces),
/// zero at the frame whose comment starts with "saddle", with each frame's energy.
pub fn irc_profile(frames: &[crate::molecule::Molecule], path: &Path) -> Result<Vec<(f64, f64)>> {
    let e = energies_from_comments(frames, path)?;
    let saddle = frames
        .iter()
        .position(|m| m.comment.starts_with("saddle"))
        .unwrap_or(0);
    let mut s = vec![0.0; frames.len()];
    for k in 1..frames.len() {
        let (a, b) = (&frames[k - 1], &frames[k]);
        let masses = if a.is_model_surface() {
            vec![1.0; a.len()]
        } else {
            a.masses()
        };
        let d2: f64 = a
            .coords
            .iter()
            .zip(&b.coords)
            .zip(&masses)
            .map(|((p, q), m)| {
                m * ((p[0] - q[0]).powi(2) + (p[1] - q[1]).powi(2) + (p[2] - q[2]).powi(2))
            })
            .sum();
        s[k] = s[k - 1] + d2.sqrt();
    }
    let s0 = s[saddle];
    Ok(s.iter().zip(e).map(|(x, e)| (x - s0, e)).collect())
}

/// Files written by [`write`].
#[derive(Debug, Clone)]
pub struct Written {
    pub html: PathBuf,
    pub markdown: PathBuf,
    pub csv: PathBuf,
    pub reactions: usize,
}

/// Read DIR and write report.html, report.md and summary.csv into it (each atomically: temp
/// file, then rename).
pub fn write(dir: &Path) -> Result<Written> {
    let data = load(dir)?;
    let out = crate::study::OutputDir::new(dir);
    let html = out.write("report.html", &html::render(&data))?;
    let markdown = out.write("report.md", &text::markdown(&data))?;
    let csv = out.write("summary.csv", &text::csv(&data))?;
    Ok(Written {
        html,
        markdown,
        csv,
        reactions: data.reactions.len(),
    })
}

/// Short words for a task state.
pub fn state_word(s: RunState) -> &'static str {
    s.name()
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::study::record::RateSummary;

    fn reaction(name: &str, barrier: Option<f64>, status: Verdict) -> ReactionData {
        let mut s = Summary::empty(name);
        s.status = status;
        s.reason = format!("reason of {name}");
        s.barrier_forward_kcal_mol = barrier;
        s.barrier_reverse_kcal_mol = barrier.map(|b| b - 5.0);
        s.reaction_energy_kcal_mol = barrier.map(|_| 5.0);
        s.imaginary_frequency_cm1 = Some(1234.5);
        ReactionData {
            name: name.to_string(),
            summary: Some(s),
            kinetics: None,
            band_history: None,
            band_final: None,
            irc: None,
            frequencies_cm1: None,
            model_surface: false,
            tasks: vec![],
        }
    }

    fn run() -> RunData {
        let mut slow = reaction("slow,one", Some(30.25), Verdict::Verified);
        if let Some(s) = slow.summary.as_mut() {
            s.rate_constants = Some(vec![RateSummary {
                temperature_k: 298.15,
                forward_per_s: 4.5e-10,
                reverse_per_s: 1.0,
                half_life_forward_s: std::f64::consts::LN_2 / 4.5e-10,
                half_life_reverse_s: std::f64::consts::LN_2,
            }]);
            s.barrier_forward_gibbs_kcal_mol = Some(29.5);
        }
        RunData {
            dir: PathBuf::from("/runs/x"),
            study: "demo <study>".into(),
            reactions: vec![
                slow,
                reaction("<b>bold</b>&\"q\"", Some(12.5), Verdict::Unverified),
                reaction("pipe|name", None, Verdict::Failed),
                reaction("fast", Some(3.75), Verdict::Verified),
            ],
        }
    }

    #[test]
    fn sorted_by_forward_barrier_missing_last() {
        let d = run();
        let names: Vec<&str> = d.sorted().iter().map(|r| r.name.as_str()).collect();
        assert_eq!(
            names,
            ["fast", "<b>bold</b>&\"q\"", "slow,one", "pipe|name"]
        );
    }

    #[test]
    fn html_escapes_names_and_shows_values_in_order() {
        let d = run();
        let page = html::render(&d);
        assert!(!page.contains("<b>bold</b>"), "raw markup leaked");
        assert!(page.contains("&lt;b&gt;bold&lt;/b&gt;&amp;&quot;q&quot;"));
        assert!(page.contains("demo &lt;study&gt;"));
        // Overview rows in barrier order, with the values and both units.
        let table = &page[page.find("class=\"overview\"").unwrap()..page.find("</table>").unwrap()];
        let pos = |s: &str| table.find(s).unwrap_or_else(|| panic!("{s}"));
        assert!(
            pos(">fast<") < pos("bold")
                && pos("bold") < pos("slow,one")
                && pos("slow,one") < pos("pipe|name")
        );
        for v in ["3.75", "12.50", "30.25", "126.6", "4.50e-10", "48.8 years"] {
            // 30.25 kcal/mol = 126.6 kJ/mol (thermochemical calorie); ln2/4.5e-10 s = 1.540e9 s = 48.8 Julian years.
            assert!(table.contains(v), "{v}");
        }
        assert!(page.contains(CAUTION.split('(').next().unwrap()));
        // The failed reaction without barriers gets no diagram, a stated absence instead.
        assert!(page.contains("no barrier: the reaction has no verdict"));
        assert!(page.contains("Not computed: the run has no rates stage"));
    }

    #[test]
    fn markdown_and_csv_escape_names_and_keep_the_order() {
        let d = run();
        let md = text::markdown(&d);
        assert!(md.contains("| pipe\\|name | failed |"), "{md}");
        assert!(md.contains("&lt;b&gt;bold&lt;/b&gt;"));
        assert!(md.contains("> **Caution.**"));
        let csv = text::csv(&d);
        let rows: Vec<&str> = csv.lines().collect();
        assert!(rows[1].starts_with("fast,verified,kcal/mol,3.75,"));
        assert!(rows[2].starts_with("\"<b>bold</b>&\"\"q\"\"\",unverified,"));
        assert!(
            rows[3].starts_with("\"slow,one\",verified,kcal/mol,30.25,25.25,5,126.5"),
            "{}",
            rows[3]
        );
        assert!(rows[3].contains(",4.5e-10,"), "{}", rows[3]);
        assert!(rows[4].starts_with("pipe|name,failed,kcal/mol,,,"));
        // Every row has the header's number of fields (the quoted comma does not split).
        let n = rows[0].split(',').count();
        assert_eq!(rows[1].split(',').count(), n);
    }
}
