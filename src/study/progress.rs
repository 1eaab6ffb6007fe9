//! What a running study shows while it works: on a terminal, an overall bar and one bar per
//! reaction in progress (indicatif, on stderr); otherwise one plain line per event, so logs
//! from a batch system stay readable.

use indicatif::{MultiProgress, ProgressBar, ProgressDrawTarget, ProgressStyle};
use std::collections::HashMap;
use std::io::IsTerminal;
use std::time::Instant;

/// How progress is shown.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum ProgressMode {
    /// Bars when stderr is a terminal, lines otherwise.
    Auto,
    /// Plain lines on stderr.
    Lines,
    /// Nothing.
    Quiet,
}

/// Progress display for one run.
pub struct Progress {
    mode: Mode,
    t0: Instant,
}

enum Mode {
    Bars {
        multi: MultiProgress,
        overall: ProgressBar,
        /// Per reaction: its bar, and tasks finished / all.
        reactions: HashMap<String, (ProgressBar, u64, u64)>,
        totals: HashMap<String, u64>,
    },
    Lines,
    Quiet,
}

impl Progress {
    /// `tasks_per_reaction`: how many tasks each reaction has (shared species count for each
    /// reaction that uses them), `total`: tasks in the study.
    pub fn new(mode: ProgressMode, total: u64, tasks_per_reaction: HashMap<String, u64>) -> Self {
        let mode = match mode {
            ProgressMode::Quiet => Mode::Quiet,
            ProgressMode::Lines => Mode::Lines,
            ProgressMode::Auto if !std::io::stderr().is_terminal() => Mode::Lines,
            ProgressMode::Auto => {
                let multi = MultiProgress::with_draw_target(ProgressDrawTarget::stderr());
                let overall = multi.add(ProgressBar::new(total));
                overall.set_style(
                    ProgressStyle::with_template(
                        "{prefix:>24} [{bar:30}] {pos}/{len} tasks  {elapsed_precise}  {msg}",
                    )
                    .unwrap_or_else(|_| ProgressStyle::default_bar())
                    .progress_chars("=> "),
                );
                overall.set_prefix("study");
                Mode::Bars {
                    multi,
                    overall,
                    reactions: HashMap::new(),
                    totals: tasks_per_reaction,
                }
            }
        };
        Progress {
            mode,
            t0: Instant::now(),
        }
    }

    fn stamp(&self) -> String {
        let s = self.t0.elapsed().as_secs();
        format!("[{:02}:{:02}:{:02}]", s / 3600, (s / 60) % 60, s % 60)
    }

    /// A task of `reaction` started (`what`: e.g. "band").
    pub fn started(&mut self, reaction: &str, what: &str) {
        let stamp = self.stamp();
        match &mut self.mode {
            Mode::Quiet => {}
            Mode::Lines => eprintln!("{stamp} {reaction}: {what} started"),
            Mode::Bars {
                multi,
                reactions,
                totals,
                ..
            } => {
                let total = totals.get(reaction).copied().unwrap_or(1);
                let entry = reactions.entry(reaction.to_string()).or_insert_with(|| {
                    let b = multi.add(ProgressBar::new(total));
                    b.set_style(
                        ProgressStyle::with_template("{prefix:>24} [{bar:30}] {pos}/{len}  {msg}")
                            .unwrap_or_else(|_| ProgressStyle::default_bar())
                            .progress_chars("=> "),
                    );
                    b.set_prefix(short(reaction));
                    (b, 0, total)
                });
                entry.0.set_message(what.to_string());
            }
        }
    }

    /// A task of `reaction` ended: `note` says how ("done, 42 evaluations, 3.1 s", "failed: …").
    pub fn ended(&mut self, reaction: &str, what: &str, note: &str) {
        let stamp = self.stamp();
        match &mut self.mode {
            Mode::Quiet => {}
            Mode::Lines => eprintln!("{stamp} {reaction}: {what} {note}"),
            Mode::Bars {
                overall, reactions, ..
            } => {
                overall.inc(1);
                if let Some((b, done, total)) = reactions.get_mut(reaction) {
                    *done += 1;
                    b.set_position(*done);
                    b.set_message(format!("{what}: {note}"));
                    if *done >= *total {
                        b.finish_and_clear();
                    }
                } else {
                    overall.set_message(format!("{reaction}: {what} {note}"));
                }
            }
        }
    }

    /// Tasks taken from markers without running, all at once (one line, not one per task).
    pub fn skipped(&mut self, n: u64) {
        if n == 0 {
            return;
        }
        let stamp = self.stamp();
        match &mut self.mode {
            Mode::Quiet => {}
            Mode::Lines => eprintln!("{stamp} {n} tasks finished in an earlier run"),
            Mode::Bars { overall, .. } => overall.inc(n),
        }
    }

    /// The run is over.
    pub fn finish(&mut self) {
        if let Mode::Bars {
            overall, reactions, ..
        } = &mut self.mode
        {
            for (b, ..) in reactions.values() {
                b.finish_and_clear();
            }
            overall.finish_and_clear();
        }
    }
}

fn short(name: &str) -> String {
    if name.chars().count() <= 24 {
        name.to_string()
    } else {
        let head: String = name.chars().take(23).collect();
        format!("{head}…")
    }
}
