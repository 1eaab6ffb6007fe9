//! What a run leaves in its output directory: the state record (`DIR/state.json`, what each
//! task did) and one summary per reaction (`DIR/<reaction>/summary.json`). Both are versioned
//! (`format`); Cairn refuses to rewrite a record newer than it understands.
//!
//! Energies in the summary are kcal/mol (thermochemical calorie), frequencies cm⁻¹, times
//! seconds: the unit is in every field name.

use serde::{Deserialize, Serialize};

/// Version of the files written here.
pub const FORMAT: u32 = 1;

/// Refuse a record whose `format` is newer than `newest` (the files Cairn writes are versioned;
/// a missing `format` counts as 0). `file` names it in the error.
pub fn refuse_newer(probe: &serde_json::Value, file: &str, newest: u32) -> crate::Result<()> {
    let format = probe.get("format").and_then(|f| f.as_u64()).unwrap_or(0);
    if format > u64::from(newest) {
        return Err(crate::Error::invalid(format!(
            "{file} has format {format}, newer than this cairn understands ({newest}); use a newer cairn"
        )));
    }
    Ok(())
}

/// Parse a versioned JSON record, refusing newer formats; errors name the file and line.
pub fn parse_versioned<T: serde::de::DeserializeOwned>(
    text: &str,
    file: &str,
    newest: u32,
) -> crate::Result<T> {
    let probe: serde_json::Value = serde_json::from_str(text)
        .map_err(|e| crate::Error::parse(file, e.line(), e.to_string()))?;
    refuse_newer(&probe, file, newest)?;
    serde_json::from_str(text).map_err(|e| crate::Error::parse(file, e.line(), e.to_string()))
}

/// Where a task is.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum RunState {
    Pending,
    Running,
    Done,
    Failed,
    /// Not run because a task it needs failed.
    Blocked,
}

impl RunState {
    pub fn name(self) -> &'static str {
        match self {
            RunState::Pending => "pending",
            RunState::Running => "running",
            RunState::Done => "done",
            RunState::Failed => "failed",
            RunState::Blocked => "blocked",
        }
    }
}

/// One task's record.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct TaskRecord {
    /// The reaction, or for a species relaxation the first reaction that uses it.
    pub reaction: String,
    /// Stage name (`relax-ends` for species relaxations).
    pub stage: String,
    /// For species relaxations: the species' formula and file, e.g. `HCN (hcn.xyz)`.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub species: Option<String>,
    pub state: RunState,
    /// Evaluations the algorithm asked for (engine runs + store hits).
    pub evaluations: u64,
    pub engine_runs: u64,
    pub store_hits: u64,
    /// Extra engine attempts after failures (crash, timeout, failure signature), each with the
    /// adapter's next remedy.
    #[serde(default)]
    pub engine_retries: u64,
    pub wall_seconds: f64,
    /// Why it failed, or a note.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub message: Option<String>,
}

/// `DIR/state.json`.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct StateRecord {
    pub format: u32,
    /// The study file the run was made from.
    pub study: String,
    /// SHA-256 of the study file's text when the run started.
    pub study_sha256: String,
    pub tasks: Vec<TaskRecord>,
}

impl StateRecord {
    /// Parse, refusing formats newer than this Cairn understands.
    pub fn from_json(text: &str, file: &str) -> crate::Result<StateRecord> {
        parse_versioned(text, file, FORMAT)
    }

    /// The status table: reaction, stage, state, evaluations, time.
    pub fn table(&self) -> String {
        let head = ["reaction", "stage", "state", "evaluations", "time"];
        let rows: Vec<[String; 5]> = self
            .tasks
            .iter()
            .map(|t| {
                let stage = match &t.species {
                    Some(s) => format!("{} {s}", t.stage),
                    None => t.stage.clone(),
                };
                [
                    t.reaction.clone(),
                    stage,
                    t.state.name().to_string(),
                    t.evaluations.to_string(),
                    format!("{:.1} s", t.wall_seconds),
                ]
            })
            .collect();
        let mut w = head.map(|h| h.chars().count());
        for r in &rows {
            for (k, c) in r.iter().enumerate() {
                w[k] = w[k].max(c.chars().count());
            }
        }
        let line = |cells: [&str; 5]| {
            let mut s = String::new();
            for (k, c) in cells.iter().enumerate() {
                let pad = w[k].saturating_sub(c.chars().count());
                if k >= 3 {
                    s.push_str(&" ".repeat(pad));
                    s.push_str(c);
                } else {
                    s.push_str(c);
                    s.push_str(&" ".repeat(pad));
                }
                if k < 4 {
                    s.push_str("  ");
                }
            }
            s.trim_end().to_string() + "\n"
        };
        let mut out = line(head);
        for r in &rows {
            out.push_str(&line([&r[0], &r[1], &r[2], &r[3], &r[4]]));
        }
        out
    }
}

/// How a reaction ended.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Verdict {
    /// One imaginary mode and an IRC that connects the reaction's ends (or two distinct minima).
    Verified,
    /// A saddle was found, but a check did not pass (see `reason`).
    Unverified,
    /// A stage failed before a verdict was possible.
    Failed,
}

/// `DIR/<reaction>/summary.json`. Paths are relative to DIR.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Summary {
    pub format: u32,
    pub name: String,
    pub status: Verdict,
    /// Why the status is what it is, in words.
    pub reason: String,
    pub barrier_forward_kcal_mol: Option<f64>,
    pub barrier_reverse_kcal_mol: Option<f64>,
    pub reaction_energy_kcal_mol: Option<f64>,
    /// The imaginary frequency at the saddle, cm⁻¹, given as a positive number.
    pub imaginary_frequency_cm1: Option<f64>,
    pub n_imaginary: Option<u32>,
    pub irc_connects: Option<bool>,
    pub gradient_evaluations: u64,
    pub hessian_evaluations: u64,
    pub engine_runs: u64,
    pub store_hits: u64,
    /// Extra engine attempts after failures in this invocation (retries with remedies).
    #[serde(default)]
    pub engine_retries: u64,
    pub wall_seconds: f64,
    pub saddle_xyz: Option<String>,
    pub band_xyz: Option<String>,
    pub irc_xyz: Option<String>,
    /// From the `rates` stage (absent without it): Gibbs-energy barriers and reaction Gibbs
    /// energy at `gibbs_temperature_k` (the stage's first temperature).
    #[serde(default)]
    pub barrier_forward_gibbs_kcal_mol: Option<f64>,
    #[serde(default)]
    pub barrier_reverse_gibbs_kcal_mol: Option<f64>,
    #[serde(default)]
    pub reaction_gibbs_kcal_mol: Option<f64>,
    #[serde(default)]
    pub gibbs_temperature_k: Option<f64>,
    /// First-order rate constants and half-lives at each temperature of the `rates` stage.
    #[serde(default)]
    pub rate_constants: Option<Vec<RateSummary>>,
    /// `kinetics.json` (relative to DIR), when the `rates` stage ran.
    #[serde(default)]
    pub kinetics_json: Option<String>,
    /// Why the `rates` stage gave nothing, when it failed (the verdict stands without it).
    #[serde(default)]
    pub kinetics_error: Option<String>,
    /// `band-history.json` (relative to DIR): the band's energies at every iteration.
    #[serde(default)]
    pub band_history_json: Option<String>,
}

/// A rate constant and half-life pair at one temperature (first order).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct RateSummary {
    pub temperature_k: f64,
    pub forward_per_s: f64,
    pub reverse_per_s: f64,
    pub half_life_forward_s: f64,
    pub half_life_reverse_s: f64,
}

impl Summary {
    /// A summary with nothing known yet.
    pub fn empty(name: &str) -> Summary {
        Summary {
            format: FORMAT,
            name: name.to_string(),
            status: Verdict::Failed,
            reason: "not run".into(),
            barrier_forward_kcal_mol: None,
            barrier_reverse_kcal_mol: None,
            reaction_energy_kcal_mol: None,
            imaginary_frequency_cm1: None,
            n_imaginary: None,
            irc_connects: None,
            gradient_evaluations: 0,
            hessian_evaluations: 0,
            engine_runs: 0,
            store_hits: 0,
            engine_retries: 0,
            wall_seconds: 0.0,
            saddle_xyz: None,
            band_xyz: None,
            irc_xyz: None,
            barrier_forward_gibbs_kcal_mol: None,
            barrier_reverse_gibbs_kcal_mol: None,
            reaction_gibbs_kcal_mol: None,
            gibbs_temperature_k: None,
            rate_constants: None,
            kinetics_json: None,
            kinetics_error: None,
            band_history_json: None,
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn summary_has_the_documented_field_names() {
        let mut s = Summary::empty("hcn-hnc");
        s.status = Verdict::Verified;
        s.barrier_forward_kcal_mol = Some(47.5);
        let v: serde_json::Value = serde_json::to_value(&s).unwrap();
        for k in [
            "name",
            "status",
            "reason",
            "barrier_forward_kcal_mol",
            "barrier_reverse_kcal_mol",
            "reaction_energy_kcal_mol",
            "imaginary_frequency_cm1",
            "n_imaginary",
            "irc_connects",
            "gradient_evaluations",
            "hessian_evaluations",
            "engine_runs",
            "store_hits",
            "engine_retries",
            "wall_seconds",
            "saddle_xyz",
            "band_xyz",
            "irc_xyz",
        ] {
            assert!(v.get(k).is_some(), "missing {k}");
        }
        assert_eq!(v["status"], "verified");
        let back: Summary = serde_json::from_value(v).unwrap();
        assert_eq!(back, s);
    }

    #[test]
    fn summaries_written_before_the_rates_stage_still_read() {
        let mut v: serde_json::Value = serde_json::to_value(Summary::empty("old")).unwrap();
        let o = v.as_object_mut().unwrap();
        for k in [
            "barrier_forward_gibbs_kcal_mol",
            "barrier_reverse_gibbs_kcal_mol",
            "reaction_gibbs_kcal_mol",
            "gibbs_temperature_k",
            "rate_constants",
            "kinetics_json",
            "kinetics_error",
            "band_history_json",
        ] {
            assert!(o.remove(k).is_some(), "{k}");
        }
        let back: Summary = serde_json::from_value(v).unwrap();
        assert_eq!(back, Summary::empty("old"));
    }

    #[test]
    fn state_table_and_newer_formats() {
        let rec = StateRecord {
            format: FORMAT,
            study: "demo.yaml".into(),
            study_sha256: "00".into(),
            tasks: vec![
                TaskRecord {
                    reaction: "hcn-hnc".into(),
                    stage: "relax-ends".into(),
                    species: Some("HCN (hcn.xyz)".into()),
                    state: RunState::Done,
                    evaluations: 12,
                    engine_runs: 12,
                    store_hits: 0,
                    engine_retries: 0,
                    wall_seconds: 0.4,
                    message: None,
                },
                TaskRecord {
                    reaction: "hcn-hnc".into(),
                    stage: "band".into(),
                    species: None,
                    state: RunState::Running,
                    evaluations: 130,
                    engine_runs: 120,
                    store_hits: 10,
                    engine_retries: 3,
                    wall_seconds: 5.26,
                    message: None,
                },
            ],
        };
        let t = rec.table();
        let lines: Vec<&str> = t.lines().collect();
        assert_eq!(
            lines[0],
            "reaction  stage                     state    evaluations   time"
        );
        assert_eq!(
            lines[1],
            "hcn-hnc   relax-ends HCN (hcn.xyz)  done              12  0.4 s"
        );
        assert_eq!(
            lines[2],
            "hcn-hnc   band                      running          130  5.3 s"
        );
        let json = serde_json::to_string(&rec).unwrap();
        assert_eq!(StateRecord::from_json(&json, "state.json").unwrap(), rec);
        let newer = json.replace("\"format\":1", "\"format\":99");
        let err = StateRecord::from_json(&newer, "state.json")
            .unwrap_err()
            .to_string();
        assert!(err.contains("newer than this cairn"), "{err}");
    }
}
