//! The lock that keeps two runners off one output directory.
//!
//! `DIR/.lock` holds who took it (pid, host, time) as one JSON line, and the holder keeps an
//! advisory `flock` on it for as long as the [`DirLock`] lives. The kernel drops a `flock` when
//! its process dies, so a lock file left by a crashed or killed runner is stale by construction:
//! the next runner takes the lock and overwrites the holder line. Dropping the `DirLock` removes
//! the file and releases the lock.
//!
//! Pitfall handled: between opening the file and getting the lock, the previous holder may have
//! removed it; the lock is then on a file no one else can see. After locking we check that the
//! path still names the file we locked (same device and inode) and start over if not.

use crate::error::{Error, Result};
use serde::{Deserialize, Serialize};
use std::fs::{File, OpenOptions};
use std::io::{Read, Seek, Write};
use std::os::unix::fs::MetadataExt;
use std::os::unix::io::AsRawFd;
use std::path::{Path, PathBuf};

/// Who holds a lock.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct Holder {
    pub pid: u32,
    pub host: String,
    /// Seconds since the Unix epoch when it was taken.
    pub since_unix: u64,
}

/// An exclusive claim on an output directory; released on drop.
#[derive(Debug)]
pub struct DirLock {
    path: PathBuf,
    file: File,
}

pub const LOCK_FILE: &str = ".lock";

/// This machine's host name (empty if unknown).
pub fn host_name() -> String {
    let mut buf = [0u8; 256];
    // SAFETY: buf is valid for buf.len() bytes; gethostname writes at most that many.
    let rc = unsafe { libc::gethostname(buf.as_mut_ptr().cast(), buf.len()) };
    if rc != 0 {
        return String::new();
    }
    let end = buf.iter().position(|&b| b == 0).unwrap_or(buf.len());
    String::from_utf8_lossy(&buf[..end]).into_owned()
}

impl DirLock {
    /// Take the lock on `dir` (which must exist), or say who has it.
    pub fn acquire(dir: &Path) -> Result<DirLock> {
        let path = dir.join(LOCK_FILE);
        for _ in 0..100 {
            let mut file = OpenOptions::new()
                .read(true)
                .write(true)
                .create(true)
                .truncate(false)
                .open(&path)
                .map_err(|e| {
                    Error::io(format!("cannot open the lock file {}", path.display()), e)
                })?;
            // SAFETY: flock on a valid, open file descriptor.
            let rc = unsafe { libc::flock(file.as_raw_fd(), libc::LOCK_EX | libc::LOCK_NB) };
            if rc != 0 {
                let err = std::io::Error::last_os_error();
                if err.raw_os_error() == Some(libc::EWOULDBLOCK) {
                    let mut text = String::new();
                    let _ = file.read_to_string(&mut text);
                    return Err(Error::invalid(held_message(dir, &path, &text)));
                }
                return Err(Error::io(format!("cannot lock {}", path.display()), err));
            }
            // Still the file at `path`? (The previous holder may have just removed it.)
            let ours = file
                .metadata()
                .map_err(|e| Error::io(format!("cannot inspect {}", path.display()), e))?;
            match std::fs::metadata(&path) {
                Ok(now) if now.dev() == ours.dev() && now.ino() == ours.ino() => {}
                _ => continue, // dropping `file` releases the lock on the orphan
            }
            let holder = Holder {
                pid: std::process::id(),
                host: host_name(),
                since_unix: std::time::SystemTime::now()
                    .duration_since(std::time::UNIX_EPOCH)
                    .map(|d| d.as_secs())
                    .unwrap_or(0),
            };
            let line = serde_json::to_string(&holder).unwrap_or_default();
            file.set_len(0)
                .and_then(|_| file.rewind())
                .and_then(|_| file.write_all(format!("{line}\n").as_bytes()))
                .and_then(|_| file.sync_all())
                .map_err(|e| {
                    Error::io(format!("cannot write the lock file {}", path.display()), e)
                })?;
            return Ok(DirLock { path, file });
        }
        Err(Error::invalid(format!(
            "could not take the lock {} (it kept being replaced); is another runner starting and stopping in a loop?",
            path.display()
        )))
    }

    pub fn path(&self) -> &Path {
        &self.path
    }

    /// Who holds the lock at `dir` now, if anyone (read from the file; None if it is free).
    pub fn holder(dir: &Path) -> Option<Holder> {
        let path = dir.join(LOCK_FILE);
        let file = File::open(&path).ok()?;
        // SAFETY: flock on a valid, open file descriptor.
        let rc = unsafe { libc::flock(file.as_raw_fd(), libc::LOCK_SH | libc::LOCK_NB) };
        if rc == 0 {
            return None; // nobody holds it; any content is stale
        }
        let text = std::fs::read_to_string(&path).ok()?;
        serde_json::from_str(text.trim()).ok()
    }
}

fn held_message(dir: &Path, path: &Path, text: &str) -> String {
    match serde_json::from_str::<Holder>(text.trim()) {
        Ok(h) => {
            let host = if h.host.is_empty() { "an unknown host".to_string() } else { format!("host {}", h.host) };
            let here = if h.host == host_name() { " (this machine)" } else { "" };
            format!(
                "{} is in use by another cairn runner: pid {} on {host}{here}, since {} (Unix time); wait for it to finish or stop it (kill {}); a lock left by a dead process is taken over automatically",
                dir.display(),
                h.pid,
                h.since_unix,
                h.pid
            )
        }
        Err(_) => format!(
            "{} is in use by another cairn runner (its lock {} is held but does not say by whom yet); try again in a moment",
            dir.display(),
            path.display()
        ),
    }
}

impl Drop for DirLock {
    fn drop(&mut self) {
        // Remove first, then the lock goes with the file descriptor: a runner that opened the
        // old file and locks it afterwards sees the inode mismatch and starts over.
        let _ = std::fs::remove_file(&self.path);
        // SAFETY: flock on a valid, open file descriptor.
        unsafe {
            libc::flock(self.file.as_raw_fd(), libc::LOCK_UN);
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn second_taker_is_told_who_holds_it_and_drop_releases() {
        let dir = tempfile::tempdir().unwrap();
        let lock = DirLock::acquire(dir.path()).unwrap();
        let err = DirLock::acquire(dir.path()).unwrap_err().to_string();
        assert!(
            err.contains(&format!("pid {}", std::process::id())),
            "{err}"
        );
        assert!(err.contains(&host_name()), "{err}");
        assert!(err.contains("in use"), "{err}");
        let h = DirLock::holder(dir.path()).unwrap();
        assert_eq!(h.pid, std::process::id());
        drop(lock);
        assert!(!dir.path().join(LOCK_FILE).exists());
        assert_eq!(DirLock::holder(dir.path()), None);
        let again = DirLock::acquire(dir.path()).unwrap();
        assert!(again.path().exists());
    }

    #[test]
    fn stale_lock_from_a_dead_process_is_taken_over() {
        let dir = tempfile::tempdir().unwrap();
        // A lock file as a killed runner leaves it: content, but no process holds the flock.
        // (pid 2^22+1 is above Linux's default pid_max, so no live process has it.)
        let stale = Holder {
            pid: 4_194_305,
            host: host_name(),
            since_unix: 1,
        };
        std::fs::write(
            dir.path().join(LOCK_FILE),
            serde_json::to_string(&stale).unwrap(),
        )
        .unwrap();
        assert_eq!(
            DirLock::holder(dir.path()),
            None,
            "no one holds a stale lock"
        );
        let lock = DirLock::acquire(dir.path()).unwrap();
        let now: Holder =
            serde_json::from_str(std::fs::read_to_string(lock.path()).unwrap().trim()).unwrap();
        assert_eq!(now.pid, std::process::id());
    }
}
