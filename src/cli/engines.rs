//! `cairn engines`: which engines are available.
//!
//! Lists every adapter file found (in lookup order: `CAIRN_ADAPTERS`, `./adapters`, the
//! `adapters/` directory of the source tree), its version, whether its executable is on PATH,
//! and the built-in model surfaces.

use crate::engine::adapter::list_adapters;

#[derive(clap::Args, Debug)]
pub struct Args {
    /// Also list each adapter's settings with defaults and allowed values.
    #[arg(long)]
    pub settings: bool,
}

pub fn run(args: &Args) -> i32 {
    println!("Adapters (first file of a name wins; set CAIRN_ADAPTERS to add directories):");
    let listed = list_adapters();
    if listed.is_empty() {
        println!("  none found");
    }
    for l in &listed {
        let shadow = if l.active {
            ""
        } else {
            "  (shadowed by an earlier file)"
        };
        match &l.adapter {
            Ok(a) => {
                let (exe, found) = a.executable();
                let status = match &found {
                    Some(p) => format!("executable {} found", p.display()),
                    None => {
                        let hint = a
                            .file
                            .install_hint
                            .as_deref()
                            .map(|h| format!(" (install: {h})"))
                            .unwrap_or_default();
                        format!("executable '{exe}' NOT found{hint}")
                    }
                };
                println!(
                    "  {:<12} version {:<10} {}  [{}]{shadow}",
                    l.name,
                    a.file.version.0,
                    status,
                    l.path.display()
                );
                if args.settings {
                    for (k, s) in &a.file.settings {
                        let allowed = s
                            .allowed
                            .as_ref()
                            .map(|v| {
                                let v: Vec<&str> = v.iter().map(|x| x.0.as_str()).collect();
                                format!(" (one of {})", v.join(", "))
                            })
                            .unwrap_or_default();
                        println!(
                            "      {k} = {}{allowed}{}",
                            s.default.0,
                            if s.description.is_empty() {
                                String::new()
                            } else {
                                format!("  - {}", s.description)
                            }
                        );
                    }
                }
            }
            Err(e) => println!("  {:<12} DOES NOT LOAD: {e}{shadow}", l.name),
        }
    }
    println!("Built-in model surfaces (no executable needed):");
    for m in crate::engine::MODEL_SURFACES {
        println!("  {m}");
    }
    0
}
