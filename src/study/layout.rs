//! The output directory's layout, and the rule that every output path is inside it.
//!
//! ```text
//! DIR/.lock                      runner lock (see lock.rs)
//! DIR/state.json                 state record (record.rs)
//! DIR/species/<key>.xyz          relaxed species, by content key
//! DIR/<reaction>/summary.json    per-reaction summary
//! DIR/<reaction>/<stage>...      per-stage results (band.xyz, saddle.xyz, irc.xyz, ...)
//! ```
//!
//! Reaction names are checked when the study is read ([`super::load::check_name`]); this module
//! checks again, so that no path built here can leave DIR whatever the caller passes.

use crate::error::{Error, Result};
use std::path::{Component, Path, PathBuf};

/// The output directory of a run.
#[derive(Debug, Clone)]
pub struct OutputDir {
    root: PathBuf,
}

impl OutputDir {
    pub fn new(root: impl Into<PathBuf>) -> OutputDir {
        OutputDir { root: root.into() }
    }

    pub fn root(&self) -> &Path {
        &self.root
    }

    /// `DIR/<relative>`, refusing anything that could leave DIR: absolute paths, `..`, `.`,
    /// empty components, and names that are not plain (see `check_name`).
    pub fn join(&self, relative: &str) -> Result<PathBuf> {
        let refuse = |why: &str| {
            Error::invalid(format!(
                "refusing output path \"{relative}\": {why}; every output stays inside {}",
                self.root.display()
            ))
        };
        if relative.is_empty() {
            return Err(refuse("it is empty"));
        }
        let p = Path::new(relative);
        let mut out = self.root.clone();
        for c in p.components() {
            match c {
                Component::Normal(s) => {
                    let s = s.to_str().ok_or_else(|| refuse("it is not UTF-8"))?;
                    check_component(s).map_err(|m| refuse(&m))?;
                    out.push(s);
                }
                Component::ParentDir => return Err(refuse("it contains \"..\"")),
                Component::CurDir => return Err(refuse("it contains \".\"")),
                Component::RootDir | Component::Prefix(_) => return Err(refuse("it is absolute")),
            }
        }
        if relative.contains('\\') || relative.ends_with('/') || relative.contains("//") {
            return Err(refuse("it is not a plain relative path"));
        }
        Ok(out)
    }

    /// The folder of one reaction.
    pub fn reaction_dir(&self, reaction: &str) -> Result<PathBuf> {
        if reaction.contains('/') {
            return Err(Error::invalid(format!(
                "refusing reaction name \"{reaction}\": it contains '/'"
            )));
        }
        self.join(reaction)
    }

    /// A file in one reaction's folder.
    pub fn reaction_file(&self, reaction: &str, file: &str) -> Result<PathBuf> {
        if reaction.contains('/') || file.contains('/') {
            return Err(Error::invalid(format!(
                "refusing output path \"{reaction}/{file}\": names may not contain '/'"
            )));
        }
        self.join(&format!("{reaction}/{file}"))
    }

    pub fn summary(&self, reaction: &str) -> Result<PathBuf> {
        self.reaction_file(reaction, "summary.json")
    }

    pub fn state(&self) -> PathBuf {
        self.root.join("state.json")
    }

    /// A relaxed species, by its content key.
    pub fn species(&self, key: &str) -> Result<PathBuf> {
        self.join(&format!("species/{key}.xyz"))
    }

    /// Write `text` atomically to `DIR/<relative>`, creating folders inside DIR as needed.
    pub fn write(&self, relative: &str, text: &str) -> Result<PathBuf> {
        let path = self.join(relative)?;
        if let Some(parent) = path.parent() {
            std::fs::create_dir_all(parent)
                .map_err(|e| Error::io(format!("cannot create {}", parent.display()), e))?;
        }
        crate::xyz::write_atomic(&path, text)?;
        Ok(path)
    }
}

/// One path component: the reaction-name character set, any length up to 200.
fn check_component(s: &str) -> std::result::Result<(), String> {
    if s.len() > 200 {
        return Err(format!("component \"{s}\" is longer than 200 characters"));
    }
    let short: String = s.chars().take(64).collect();
    super::load::check_name(&short)?;
    if s.chars().count() > 64 {
        let rest: String = s.chars().skip(64).collect();
        if !rest
            .chars()
            .all(|c| c.is_ascii_alphanumeric() || matches!(c, '.' | '_' | '-'))
            || s.contains("..")
        {
            return Err(format!(
                "component \"{s}\" has characters outside [A-Za-z0-9._-]"
            ));
        }
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn paths_stay_inside_dir() {
        let top = tempfile::tempdir().unwrap();
        let dir = top.path().join("out");
        std::fs::create_dir(&dir).unwrap();
        let out = OutputDir::new(&dir);
        assert_eq!(out.reaction_dir("hcn-hnc").unwrap(), dir.join("hcn-hnc"));
        assert_eq!(
            out.summary("hcn-hnc").unwrap(),
            dir.join("hcn-hnc").join("summary.json")
        );
        for bad in [
            "../escape",
            "..",
            "/etc",
            "a/../../b",
            "./a",
            "",
            "a//b",
            "a\\..\\b",
            ".hidden",
        ] {
            assert!(out.join(bad).is_err(), "{bad:?} accepted");
            assert!(out.write(bad, "x").is_err(), "{bad:?} written");
        }
        for bad in ["../x", "a/b", "x/..", "/abs"] {
            assert!(out.reaction_dir(bad).is_err(), "{bad:?} accepted");
            assert!(out.summary(bad).is_err(), "{bad:?} accepted");
        }
        // Nothing was created next to DIR.
        let names: Vec<_> = std::fs::read_dir(top.path())
            .unwrap()
            .map(|e| e.unwrap().file_name())
            .collect();
        assert_eq!(names, vec![std::ffi::OsString::from("out")]);
        let p = out.write("r1/summary.json", "{}").unwrap();
        assert!(p.starts_with(&dir));
        assert_eq!(std::fs::read_to_string(p).unwrap(), "{}");
    }
}
