//! `cairn status DIR`: the state of a run (reaction, stage, state, evaluations, time).

use crate::study::record::StateRecord;
use std::path::PathBuf;

#[derive(clap::Args, Debug)]
pub struct Args {
    /// The output directory of `cairn run`.
    pub dir: PathBuf,
}

pub fn run(args: &Args) -> i32 {
    let path = args.dir.join("state.json");
    let text = match std::fs::read_to_string(&path) {
        Ok(t) => t,
        Err(e) => {
            eprintln!(
                "error: cannot read {} ({e}); is {} the --dir of a `cairn run`?",
                path.display(),
                args.dir.display()
            );
            return 1;
        }
    };
    match StateRecord::from_json(&text, &path.display().to_string()) {
        Ok(rec) => {
            print!("{}", rec.table());
            0
        }
        Err(e) => {
            eprintln!("error: {e}");
            1
        }
    }
}
