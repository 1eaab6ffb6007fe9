//! Talking to Slurm: sbatch, squeue, scontrol, sacct, scancel, each spawned as an argument list
//! (never through a shell), and their answers parsed.
//!
//! What Slurm 22.05 answers reliably (measured, see DEVELOPERS.md "Running on a cluster"):
//! `squeue -h -t all -j ID,ID -O 'JobID:|,State:|,Reason:|,exit_code:|'` lists the jobs
//! slurmctld still holds (about 300 s after they end), one line each; with a single purged id it
//! exits 1 with "Invalid job id specified" (read as "not listed"). Once a job is gone, `sacct`
//! (slurmdbd) or `sacct -c` (job-completion file) may still know its final state.

use std::collections::HashMap;
use std::process::Stdio;

/// One job's state as Slurm reports it.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct JobState {
    /// `PENDING`, `RUNNING`, `COMPLETED`, `FAILED`, `TIMEOUT`, `CANCELLED`, ...
    pub state: String,
    /// Slurm's reason (`None`, `TimeLimit`, `NonZeroExitCode`, `Priority`, ...).
    pub reason: String,
    /// `exit:signal` as Slurm prints it, when known.
    pub exit_code: Option<String>,
    /// Which command answered (`squeue`, `sacct`, `sacct -c`).
    pub source: &'static str,
}

/// How a job's end is treated.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum EndClass {
    Completed,
    /// Killed at its time limit (or deadline).
    Timeout,
    /// The node went away or the job was preempted: submit it again.
    Requeue,
    Cancelled,
    /// Non-zero exit, out of memory, launch failure, anything else terminal.
    Failed,
}

impl JobState {
    /// Still queued or running (or about to change).
    pub fn is_live(&self) -> bool {
        matches!(
            self.state.as_str(),
            "PENDING"
                | "RUNNING"
                | "CONFIGURING"
                | "COMPLETING"
                | "SUSPENDED"
                | "REQUEUED"
                | "REQUEUE_HOLD"
                | "REQUEUE_FED"
                | "RESIZING"
                | "SIGNALING"
                | "STAGE_OUT"
                | "STOPPED"
                | "RESV_DEL_HOLD"
        )
    }

    pub fn class(&self) -> EndClass {
        match self.state.as_str() {
            "COMPLETED" => EndClass::Completed,
            "TIMEOUT" | "DEADLINE" => EndClass::Timeout,
            "NODE_FAIL" | "PREEMPTED" | "BOOT_FAIL" => EndClass::Requeue,
            "CANCELLED" => EndClass::Cancelled,
            _ => EndClass::Failed,
        }
    }

    /// `State=TIMEOUT Reason=TimeLimit ExitCode=0:15 (from squeue)`.
    pub fn describe(&self) -> String {
        let mut s = format!("State={} Reason={}", self.state, self.reason);
        if let Some(e) = &self.exit_code {
            s.push_str(&format!(" ExitCode={e}"));
        }
        s.push_str(&format!(" (from {})", self.source));
        s
    }
}

/// The output of one command: status, stdout, stderr.
pub struct Output {
    pub ok: bool,
    pub stdout: String,
    pub stderr: String,
}

/// Run a command (argument list, stdin closed) and collect its output.
pub async fn run(program: &str, args: &[String]) -> std::io::Result<Output> {
    let out = tokio::process::Command::new(program)
        .args(args)
        .stdin(Stdio::null())
        .kill_on_drop(true)
        .output()
        .await?;
    Ok(Output {
        ok: out.status.success(),
        stdout: String::from_utf8_lossy(&out.stdout).into_owned(),
        stderr: String::from_utf8_lossy(&out.stderr).into_owned(),
    })
}

/// Blocking variant (for the Ctrl-C path, which may run outside the runtime).
pub fn run_blocking(program: &str, args: &[String]) -> std::io::Result<Output> {
    let out = std::process::Command::new(program)
        .args(args)
        .stdin(Stdio::null())
        .output()?;
    Ok(Output {
        ok: out.status.success(),
        stdout: String::from_utf8_lossy(&out.stdout).into_owned(),
        stderr: String::from_utf8_lossy(&out.stderr).into_owned(),
    })
}

/// Decode a raw wait status (`squeue -O exit_code`) into Slurm's `exit:signal` text.
pub fn decode_wait_status(raw: &str) -> Option<String> {
    let v: u64 = raw.trim().parse().ok()?;
    Some(format!("{}:{}", v >> 8, v & 0x7f))
}

/// Parse `squeue -h -O 'JobID:|,State:|,Reason:|,exit_code:|'` lines. Array tasks are printed
/// as `123_4`; they are not used by Cairn and are skipped.
pub fn parse_squeue(text: &str) -> HashMap<u64, JobState> {
    let mut out = HashMap::new();
    for line in text.lines() {
        let f: Vec<&str> = line.split('|').map(str::trim).collect();
        if f.len() < 3 {
            continue;
        }
        let Ok(id) = f[0].parse::<u64>() else {
            continue;
        };
        let ended = !matches!(f[1], "PENDING" | "RUNNING" | "CONFIGURING" | "SUSPENDED");
        out.insert(
            id,
            JobState {
                state: f[1].to_string(),
                reason: f[2].to_string(),
                exit_code: f
                    .get(3)
                    .filter(|_| ended)
                    .and_then(|s| decode_wait_status(s)),
                source: "squeue",
            },
        );
    }
    out
}

/// Parse `sacct -n --parsable2 -o JobID,State,ExitCode` lines for job `id` (the job line
/// itself, not its steps). `CANCELLED by 0` keeps its first word as the state and the rest as
/// the reason.
pub fn parse_sacct(text: &str, id: u64, source: &'static str) -> Option<JobState> {
    for line in text.lines() {
        let f: Vec<&str> = line.split('|').map(str::trim).collect();
        if f.len() < 3 || f[0] != id.to_string() {
            continue;
        }
        let mut words = f[1].split_whitespace();
        let state = words.next()?.to_string();
        let rest: Vec<&str> = words.collect();
        return Some(JobState {
            state,
            reason: if rest.is_empty() {
                "(not recorded by sacct)".into()
            } else {
                rest.join(" ")
            },
            exit_code: Some(f[2].to_string()),
            source,
        });
    }
    None
}

/// Result of one squeue query.
pub enum Listing {
    Jobs(HashMap<u64, JobState>),
    /// squeue could not answer (controller down, command missing): the reason.
    Failed(String),
}

/// The states of `ids` that slurmctld still holds.
pub async fn squeue(ids: &[u64]) -> Listing {
    if ids.is_empty() {
        return Listing::Jobs(HashMap::new());
    }
    let list: Vec<String> = ids.iter().map(u64::to_string).collect();
    let args = vec![
        "-h".to_string(),
        "-t".into(),
        "all".into(),
        "-j".into(),
        list.join(","),
        "-O".into(),
        "JobID:|,State:|,Reason:|,exit_code:|".into(),
    ];
    match run("squeue", &args).await {
        Ok(o) if o.ok => Listing::Jobs(parse_squeue(&o.stdout)),
        Ok(o) if o.stderr.contains("Invalid job id") => Listing::Jobs(HashMap::new()),
        Ok(o) => Listing::Failed(format!("squeue failed: {}", o.stderr.trim())),
        Err(e) => Listing::Failed(format!("cannot run squeue: {e}")),
    }
}

/// A job's final state after slurmctld forgot it: `sacct` (slurmdbd), else `sacct -c`
/// (job-completion file). None when neither knows it.
pub async fn sacct(id: u64) -> Option<JobState> {
    let base = |extra: Option<&str>| {
        let mut a: Vec<String> = Vec::new();
        if let Some(x) = extra {
            a.push(x.into());
        }
        a.extend(
            ["-n", "--parsable2", "-j", &id.to_string()]
                .iter()
                .map(|s| s.to_string()),
        );
        a.push("-o".into());
        a.push("JobIDRaw,State,ExitCode".into());
        a
    };
    if let Ok(o) = run("sacct", &{
        let mut a = vec!["-X".to_string()];
        a.extend(base(None));
        a
    })
    .await
    {
        if o.ok {
            if let Some(s) = parse_sacct(&o.stdout, id, "sacct") {
                return Some(s);
            }
        }
    }
    let mut a = base(Some("-c"));
    // The job-completion file has no JobIDRaw field.
    if let Some(last) = a.last_mut() {
        *last = "JobID,State,ExitCode".into();
    }
    match run("sacct", &a).await {
        Ok(o) if o.ok => parse_sacct(&o.stdout, id, "sacct -c"),
        _ => None,
    }
}

/// The id of a job with this name that slurmctld still holds (for a submission whose id was
/// never recorded: the runner died between sbatch and the record).
pub async fn find_by_name(name: &str) -> Option<u64> {
    let args = vec![
        "-h".to_string(),
        "-t".into(),
        "all".into(),
        "--me".into(),
        "-n".into(),
        name.into(),
        "-O".into(),
        "JobID:|,State:|,Reason:|".into(),
    ];
    let o = run("squeue", &args).await.ok()?;
    if !o.ok {
        return None;
    }
    parse_squeue(&o.stdout)
        .into_iter()
        .filter(|(_, s)| s.is_live() || s.state == "COMPLETED")
        .map(|(id, _)| id)
        .max()
}

/// Parse sbatch --parsable output: `JOBID` or `JOBID;cluster`.
pub fn parse_sbatch(stdout: &str) -> Option<u64> {
    stdout.trim().split(';').next()?.trim().parse().ok()
}

/// Quote a string for a POSIX shell script (single quotes; `'` becomes `'\''`).
pub fn shell_quote(s: &str) -> String {
    format!("'{}'", s.replace('\'', r"'\''"))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn squeue_lines_parse() {
        // Lines as printed by squeue 22.05 on the local test cluster (slurm.md §3).
        let m = parse_squeue(
            "1|FAILED|NonZeroExitCode|768|\n2|RUNNING|None|0|\n3_4|PENDING|Priority|0|\n",
        );
        assert_eq!(m.len(), 2);
        assert_eq!(m[&1].state, "FAILED");
        assert_eq!(m[&1].exit_code.as_deref(), Some("3:0"));
        assert!(m[&2].is_live());
        assert_eq!(m[&2].exit_code, None);
        assert_eq!(m[&1].class(), EndClass::Failed);
    }

    #[test]
    fn sacct_lines_parse() {
        let s = parse_sacct("7|CANCELLED by 0|0:0\n", 7, "sacct").unwrap();
        assert_eq!(s.state, "CANCELLED");
        assert_eq!(s.reason, "by 0");
        assert_eq!(s.class(), EndClass::Cancelled);
        let t = parse_sacct("7.batch|TIMEOUT|0:15\n7|TIMEOUT|0:0\n", 7, "sacct -c").unwrap();
        assert_eq!(t.class(), EndClass::Timeout);
        assert!(parse_sacct("8|COMPLETED|0:0\n", 7, "sacct").is_none());
    }

    #[test]
    fn wait_status_and_quoting() {
        // Raw wait status: exit code in the high byte, signal in the low 7 bits (POSIX).
        assert_eq!(decode_wait_status("768").as_deref(), Some("3:0"));
        assert_eq!(decode_wait_status("15").as_deref(), Some("0:15"));
        assert_eq!(shell_quote("a'b c"), r"'a'\''b c'");
        assert_eq!(parse_sbatch("42;cluster\n"), Some(42));
        assert_eq!(parse_sbatch("\n"), None);
    }
}
