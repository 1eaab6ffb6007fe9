//! `cairn report DIR`: write DIR/report.html (one self-contained page), DIR/report.md and
//! DIR/summary.csv from a run's files.

use std::path::PathBuf;

/// Write a report of a run: report.html (self-contained: inline CSS and SVG, works offline),
/// report.md and summary.csv, all inside DIR. Exit status: 0 written, 1 error.
#[derive(clap::Args, Debug)]
pub struct Args {
    /// The output directory of `cairn run`.
    pub dir: PathBuf,
}

pub fn run(args: &Args) -> i32 {
    match crate::report::write(&args.dir) {
        Ok(w) => {
            println!(
                "report of {} reaction{} written:\n  {}\n  {}\n  {}",
                w.reactions,
                if w.reactions == 1 { "" } else { "s" },
                w.html.display(),
                w.markdown.display(),
                w.csv.display()
            );
            0
        }
        Err(e) => {
            eprintln!("error: {e}");
            1
        }
    }
}
