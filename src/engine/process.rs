//! Spawning engine processes.
//!
//! Every run gets its own fresh scratch directory (a [`tempfile::TempDir`] under a root the
//! caller chooses, default the system temporary directory). The command is an argument list,
//! never a shell line. The child runs in its own process group with stdin closed; stdout and
//! stderr are drained concurrently by two threads (so a chatty engine never blocks on a full
//! pipe). A time limit kills the whole process group: SIGTERM, a grace period, then SIGKILL.
//! When the main process exits, anything it left behind in its process group is killed too, so
//! an engine never leaves orphans.

use std::collections::BTreeMap;
use std::io::Read;
use std::os::unix::process::ExitStatusExt;
use std::path::{Path, PathBuf};
use std::sync::mpsc;
use std::time::{Duration, Instant};

/// What to run.
#[derive(Debug, Clone)]
pub struct RunSpec {
    /// Executable: a bare name (looked up on PATH) or a path.
    pub program: String,
    pub args: Vec<String>,
    /// Extra environment variables (added to the inherited environment).
    pub env: BTreeMap<String, String>,
    /// Files to write into the scratch directory before the run: relative name → content.
    pub files: Vec<(String, String)>,
    /// Time limit; `None` waits forever.
    pub timeout: Option<Duration>,
    /// Time between SIGTERM and SIGKILL after the time limit.
    pub grace: Duration,
    /// Where scratch directories are made (`None`: the system temporary directory).
    pub scratch_root: Option<PathBuf>,
    /// What to tell the user when the executable is missing (e.g. "apt-get install xtb").
    pub install_hint: Option<String>,
}

impl RunSpec {
    pub fn new(program: impl Into<String>, args: Vec<String>) -> Self {
        RunSpec {
            program: program.into(),
            args,
            env: BTreeMap::new(),
            files: vec![],
            timeout: None,
            grace: Duration::from_secs(2),
            scratch_root: None,
            install_hint: None,
        }
    }

    /// The command as one readable line (for messages and records only; never executed).
    pub fn command_line(&self) -> String {
        std::iter::once(self.program.as_str())
            .chain(self.args.iter().map(String::as_str))
            .map(|a| {
                if a.is_empty() || a.contains(|c: char| c.is_whitespace() || c == '\'') {
                    format!("'{}'", a.replace('\'', "'\\''"))
                } else {
                    a.to_string()
                }
            })
            .collect::<Vec<_>>()
            .join(" ")
    }
}

/// How the process ended.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Exit {
    Code(i32),
    Signal(i32),
}

impl Exit {
    pub fn success(self) -> bool {
        self == Exit::Code(0)
    }
}

impl std::fmt::Display for Exit {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            Exit::Code(c) => write!(f, "exit status {c}"),
            Exit::Signal(s) => write!(f, "killed by signal {s} ({})", signal_name(*s)),
        }
    }
}

/// A finished run. The scratch directory lives as long as this value, unless [`Finished::keep`]
/// is called.
#[derive(Debug)]
pub struct Finished {
    pub exit: Exit,
    pub stdout: String,
    pub stderr: String,
    pub seconds: f64,
    /// True when the time limit killed it.
    pub timed_out: bool,
    scratch: Option<tempfile::TempDir>,
    kept: Option<PathBuf>,
}

impl Finished {
    /// The scratch directory the engine ran in.
    pub fn dir(&self) -> &Path {
        match (&self.scratch, &self.kept) {
            (Some(t), _) => t.path(),
            (None, Some(p)) => p,
            (None, None) => Path::new("."),
        }
    }

    /// Keep the scratch directory (it is not deleted) and return its path. `stdout.txt` and
    /// `stderr.txt` are written into it, so the engine's whole output is there. A directory in
    /// memory ([`memory_scratch_root`]) is moved to the system temporary directory first: kept
    /// output is for reading later and must not hold RAM or vanish at a reboot.
    pub fn keep(&mut self) -> PathBuf {
        if let Some(t) = self.scratch.take() {
            let _ = std::fs::write(t.path().join("stdout.txt"), &self.stdout);
            let _ = std::fs::write(t.path().join("stderr.txt"), &self.stderr);
            // Whether /dev/shm is usable now does not matter: the directory is there.
            let in_memory = t.path().starts_with(MEMORY_ROOT);
            let moved = if in_memory {
                move_to_disk(t.path())
            } else {
                None
            };
            self.kept = Some(match moved {
                Some(p) => p, // `t` is dropped: the copy in memory is removed.
                None => t.keep(),
            });
        }
        self.kept.clone().unwrap_or_default()
    }
}

impl Drop for Finished {
    fn drop(&mut self) {
        if let Some(t) = self.scratch.take() {
            remove_later(t);
        }
    }
}

/// A RAM-backed directory for scratch, if this machine has one we may write: `/dev/shm` when
/// it is a tmpfs with at least [`MEMORY_SCRATCH_MIN_FREE`] bytes free (a container's default
/// 64 MB `/dev/shm` is passed over). Creating and deleting a dozen small files per run on a disk
/// file system costs the kernel real time (on ext4, new inodes are checked against recently
/// deleted ones); on tmpfs it does not.
pub fn memory_scratch_root() -> Option<PathBuf> {
    // SAFETY: statfs and access only read the NUL-terminated path and fill our struct.
    let ok = unsafe {
        let mut st: libc::statfs = std::mem::zeroed();
        libc::statfs(c"/dev/shm".as_ptr(), &mut st) == 0
            && memory_fs_usable(
                st.f_type as i64,
                (st.f_bavail as u64).saturating_mul(st.f_bsize as u64),
            )
            && libc::access(c"/dev/shm".as_ptr(), libc::W_OK | libc::X_OK) == 0
    };
    ok.then(|| PathBuf::from(MEMORY_ROOT))
}

/// The RAM-backed directory [`memory_scratch_root`] offers.
const MEMORY_ROOT: &str = "/dev/shm";

/// A file system of type `f_type` with `free` bytes available is fit for RAM scratch.
fn memory_fs_usable(f_type: i64, free: u64) -> bool {
    const TMPFS_MAGIC: i64 = 0x0102_1994;
    f_type == TMPFS_MAGIC && free >= MEMORY_SCRATCH_MIN_FREE
}

/// Free space `/dev/shm` must have to be used for scratch: 256 MiB.
pub const MEMORY_SCRATCH_MIN_FREE: u64 = 256 << 20;

/// Copy a kept directory from memory into a new directory under the system temporary
/// directory; its path, or None if that failed (the original is then kept where it is).
fn move_to_disk(dir: &Path) -> Option<PathBuf> {
    fn copy_tree(from: &Path, to: &Path) -> std::io::Result<()> {
        for e in std::fs::read_dir(from)? {
            let e = e?;
            let dest = to.join(e.file_name());
            if e.file_type()?.is_dir() {
                std::fs::create_dir(&dest)?;
                copy_tree(&e.path(), &dest)?;
            } else {
                std::fs::copy(e.path(), &dest)?;
            }
        }
        Ok(())
    }
    let dest = tempfile::Builder::new()
        .prefix("cairn-kept-")
        .tempdir_in(std::env::temp_dir())
        .ok()?;
    copy_tree(dir, dest.path()).ok()?;
    Some(dest.keep())
}

/// Scratch directories of finished runs are removed by one background thread, so removing
/// an engine's files (a dozen syscalls or more) does not hold up the engine slot.
/// [`finish_scratch_removal`] waits until every directory handed over so far is gone.
enum Reap {
    Remove(tempfile::TempDir),
    Flush(mpsc::Sender<()>),
}

fn reaper() -> Option<&'static std::sync::Mutex<mpsc::Sender<Reap>>> {
    static TX: std::sync::OnceLock<Option<std::sync::Mutex<mpsc::Sender<Reap>>>> =
        std::sync::OnceLock::new();
    TX.get_or_init(|| {
        let (tx, rx) = mpsc::channel::<Reap>();
        std::thread::Builder::new()
            .name("cairn-scratch-removal".into())
            .spawn(move || {
                for msg in rx {
                    match msg {
                        Reap::Remove(dir) => drop(dir),
                        Reap::Flush(done) => {
                            let _ = done.send(());
                        }
                    }
                }
            })
            .ok()
            .map(|_| std::sync::Mutex::new(tx))
    })
    .as_ref()
}

fn remove_later(dir: tempfile::TempDir) {
    let handed = reaper().and_then(|m| {
        m.lock()
            .unwrap_or_else(|e| e.into_inner())
            .send(Reap::Remove(dir))
            .err()
    });
    // No background thread (or it is gone): remove it here.
    if let Some(mpsc::SendError(Reap::Remove(dir))) = handed {
        drop(dir);
    }
}

/// Wait until every scratch directory of a finished run so far has been removed. Call before
/// the process exits (the removal thread does not outlive `main`).
pub fn finish_scratch_removal() {
    let Some(m) = reaper() else { return };
    let (tx, rx) = mpsc::channel();
    let sent = m
        .lock()
        .unwrap_or_else(|e| e.into_inner())
        .send(Reap::Flush(tx))
        .is_ok();
    if sent {
        let _ = rx.recv();
    }
}

/// Why a run could not happen at all.
#[derive(Debug)]
pub enum SpawnError {
    /// The program is not on PATH / does not exist. The message says what to install.
    Missing(String),
    /// Anything else (scratch directory, permissions, writing input files...).
    Other(String, Option<PathBuf>),
}

impl std::fmt::Display for SpawnError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            SpawnError::Missing(m) => f.write_str(m),
            SpawnError::Other(m, _) => f.write_str(m),
        }
    }
}

/// Find `program` the way `execvp` would: a name with a slash is a path, a bare name is looked
/// up in PATH. Returns the path when it exists and is executable.
pub fn which(program: &str) -> Option<PathBuf> {
    use std::os::unix::fs::PermissionsExt;
    let is_exec = |p: &Path| {
        std::fs::metadata(p)
            .map(|m| m.is_file() && m.permissions().mode() & 0o111 != 0)
            .unwrap_or(false)
    };
    if program.is_empty() {
        return None;
    }
    if program.contains('/') {
        // Made absolute: the child runs in its scratch directory, where a relative path would
        // mean something else.
        let p = std::path::absolute(program).unwrap_or_else(|_| PathBuf::from(program));
        return is_exec(&p).then_some(p);
    }
    let path = std::env::var_os("PATH")?;
    std::env::split_paths(&path)
        .map(|d| d.join(program))
        .find(|p| is_exec(p))
}

/// The conventional name of a signal number.
pub fn signal_name(sig: i32) -> &'static str {
    match sig {
        libc::SIGHUP => "SIGHUP",
        libc::SIGINT => "SIGINT",
        libc::SIGQUIT => "SIGQUIT",
        libc::SIGILL => "SIGILL",
        libc::SIGTRAP => "SIGTRAP",
        libc::SIGABRT => "SIGABRT",
        libc::SIGBUS => "SIGBUS",
        libc::SIGFPE => "SIGFPE",
        libc::SIGKILL => "SIGKILL",
        libc::SIGUSR1 => "SIGUSR1",
        libc::SIGSEGV => "SIGSEGV",
        libc::SIGUSR2 => "SIGUSR2",
        libc::SIGPIPE => "SIGPIPE",
        libc::SIGALRM => "SIGALRM",
        libc::SIGTERM => "SIGTERM",
        libc::SIGXCPU => "SIGXCPU",
        libc::SIGXFSZ => "SIGXFSZ",
        _ => "unknown signal",
    }
}

fn missing_message(spec: &RunSpec) -> String {
    let hint = match &spec.install_hint {
        Some(h) => format!("; install it ({h}) or put it on PATH"),
        None => "; install it or put it on PATH".into(),
    };
    format!("executable '{}' not found{hint}", spec.program)
}

/// Run `spec` in a fresh scratch directory and wait for it (or its time limit).
///
/// A non-zero exit status is not an error here: the caller decides from the output.
pub fn run(spec: &RunSpec) -> Result<Finished, SpawnError> {
    launch(spec, stage(spec)?)
}

/// A scratch directory with the run's input files written, and the executable found: all a
/// run needs before the engine starts. Made by [`stage`], used by [`launch`]. Dropped unused,
/// the directory is removed.
#[derive(Debug)]
pub struct Staged {
    exe: PathBuf,
    dir: tempfile::TempDir,
}

impl Staged {
    /// The scratch directory.
    pub fn dir(&self) -> &Path {
        self.dir.path()
    }
}

/// Find the executable, make a fresh scratch directory and write the input files into it.
/// No engine runs yet; a pool can do this before the run takes its engine slot.
pub fn stage(spec: &RunSpec) -> Result<Staged, SpawnError> {
    let Some(exe) = which(&spec.program) else {
        return Err(SpawnError::Missing(missing_message(spec)));
    };
    let root = spec.scratch_root.clone().unwrap_or_else(std::env::temp_dir);
    if let Err(e) = std::fs::create_dir_all(&root) {
        return Err(SpawnError::Other(
            format!("cannot create scratch root {}: {e}", root.display()),
            None,
        ));
    }
    let scratch = tempfile::Builder::new()
        .prefix("cairn-")
        .tempdir_in(&root)
        .map_err(|e| {
            SpawnError::Other(
                format!(
                    "cannot create a scratch directory in {}: {e}",
                    root.display()
                ),
                None,
            )
        })?;
    for (name, content) in &spec.files {
        let rel = Path::new(name);
        if rel.is_absolute()
            || rel
                .components()
                .any(|c| matches!(c, std::path::Component::ParentDir))
        {
            return Err(SpawnError::Other(
                format!("input file name '{name}' must be relative and stay inside the scratch directory"),
                None,
            ));
        }
        let path = scratch.path().join(rel);
        if let Some(parent) = path.parent() {
            let _ = std::fs::create_dir_all(parent);
        }
        if let Err(e) = std::fs::write(&path, content) {
            return Err(SpawnError::Other(
                format!("cannot write input file {}: {e}", path.display()),
                Some(scratch.keep()),
            ));
        }
    }
    Ok(Staged { exe, dir: scratch })
}

/// Start the engine in a staged scratch directory and wait for it (or its time limit).
///
/// A non-zero exit status is not an error here: the caller decides from the output.
pub fn launch(spec: &RunSpec, staged: Staged) -> Result<Finished, SpawnError> {
    let Staged { exe, dir: scratch } = staged;
    // The engine runs in its own process group, so a Ctrl-C at the terminal does not reach it;
    // instead it gets SIGTERM when the thread that started it dies (that thread blocks in
    // `launch` until the engine has finished, so this only fires when Cairn itself is killed).
    let env: Vec<(String, String)> = spec
        .env
        .iter()
        .map(|(k, v)| (k.clone(), v.clone()))
        .collect();
    let start = Instant::now();
    let child = match super::spawn::spawn(&exe, &spec.args, &env, scratch.path()) {
        Ok(c) => c,
        Err(e) if e.kind() == std::io::ErrorKind::NotFound => {
            return Err(SpawnError::Missing(missing_message(spec)))
        }
        Err(e) => {
            return Err(SpawnError::Other(
                format!("cannot start '{}': {e}", spec.command_line()),
                None,
            ))
        }
    };
    let pid = child.pid;
    let out_reader = drain(Some(std::fs::File::from(child.stdout)));
    let err_reader = drain(Some(std::fs::File::from(child.stderr)));

    // The waiter waits for the exit *without reaping* (WNOWAIT), so the process-group id cannot
    // be reused while we clean up the group; then it kills leftovers and reaps.
    let (tx, rx) = mpsc::channel();
    std::thread::spawn(move || {
        wait_no_reap(pid);
        kill_group(pid, libc::SIGKILL);
        let _ = tx.send(reap(pid));
    });

    let mut timed_out = false;
    let status = match spec.timeout {
        None => rx.recv().ok(),
        Some(limit) => match rx.recv_timeout(limit) {
            Ok(s) => Some(s),
            Err(_) => {
                timed_out = true;
                kill_group(pid, libc::SIGTERM);
                match rx.recv_timeout(spec.grace) {
                    Ok(s) => Some(s),
                    Err(_) => {
                        kill_group(pid, libc::SIGKILL);
                        rx.recv().ok()
                    }
                }
            }
        },
    };
    let seconds = start.elapsed().as_secs_f64();
    let exit = match status {
        Some(Ok(s)) => match (s.code(), s.signal()) {
            (Some(c), _) => Exit::Code(c),
            (None, Some(sig)) => Exit::Signal(sig),
            (None, None) => Exit::Code(-1),
        },
        _ => Exit::Code(-1),
    };
    let stdout = out_reader.join().unwrap_or_default();
    let stderr = err_reader.join().unwrap_or_default();
    Ok(Finished {
        exit,
        stdout,
        stderr,
        seconds,
        timed_out,
        scratch: Some(scratch),
        kept: None,
    })
}

fn drain<R: Read + Send + 'static>(r: Option<R>) -> std::thread::JoinHandle<String> {
    std::thread::spawn(move || {
        let mut buf = Vec::new();
        if let Some(mut r) = r {
            let _ = r.read_to_end(&mut buf);
        }
        String::from_utf8_lossy(&buf).into_owned()
    })
}

fn wait_no_reap(pid: libc::pid_t) {
    loop {
        // SAFETY: waitid only writes into the zeroed siginfo struct we own.
        let rc = unsafe {
            let mut info: libc::siginfo_t = std::mem::zeroed();
            libc::waitid(
                libc::P_PID,
                pid as libc::id_t,
                &mut info,
                libc::WEXITED | libc::WNOWAIT,
            )
        };
        if rc == 0 {
            return;
        }
        if std::io::Error::last_os_error().raw_os_error() != Some(libc::EINTR) {
            return;
        }
    }
}

/// Reap `pid` (EINTR retried).
fn reap(pid: libc::pid_t) -> std::io::Result<std::process::ExitStatus> {
    loop {
        let mut status = 0;
        // SAFETY: waitpid writes the status into the integer we own.
        let rc = unsafe { libc::waitpid(pid, &mut status, 0) };
        if rc == pid {
            return Ok(std::process::ExitStatus::from_raw(status));
        }
        let e = std::io::Error::last_os_error();
        if e.raw_os_error() != Some(libc::EINTR) {
            return Err(e);
        }
    }
}

fn kill_group(pgid: libc::pid_t, sig: libc::c_int) {
    if pgid > 1 {
        // SAFETY: plain syscall; a negative pid addresses the process group we created.
        unsafe {
            libc::kill(-pgid, sig);
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn ram_scratch_needs_a_tmpfs_with_room() {
        let tmpfs = 0x0102_1994; // TMPFS_MAGIC, linux/magic.h
        let ext4 = 0xEF53; // EXT4_SUPER_MAGIC
        assert!(memory_fs_usable(tmpfs, 24 << 30));
        assert!(memory_fs_usable(tmpfs, MEMORY_SCRATCH_MIN_FREE));
        assert!(
            !memory_fs_usable(tmpfs, 64 << 20),
            "a container's default /dev/shm"
        );
        assert!(!memory_fs_usable(ext4, 24 << 30), "not RAM");
    }

    #[test]
    fn runs_in_fresh_scratch_with_files_and_env() {
        let mut spec = RunSpec::new(
            "sh",
            vec![
                "-c".into(),
                "cat in.txt; printf '%s' \"$CAIRN_T\" >&2; pwd; exit 3".into(),
            ],
        );
        spec.files.push(("in.txt".into(), "hello\n".into()));
        spec.env.insert("CAIRN_T".into(), "env ok".into());
        let f = run(&spec).unwrap();
        assert_eq!(f.exit, Exit::Code(3));
        assert!(f.stdout.starts_with("hello\n"), "{}", f.stdout);
        assert_eq!(f.stderr, "env ok");
        let dir = f.dir().to_path_buf();
        assert!(f
            .stdout
            .contains(dir.file_name().unwrap().to_str().unwrap()));
        drop(f);
        finish_scratch_removal();
        assert!(
            !dir.exists(),
            "scratch directory removed after a normal run"
        );
    }

    #[test]
    fn keep_preserves_directory_and_output() {
        let spec = RunSpec::new("sh", vec!["-c".into(), "echo out; echo err >&2".into()]);
        let mut f = run(&spec).unwrap();
        let p = f.keep();
        drop(f);
        assert_eq!(
            std::fs::read_to_string(p.join("stdout.txt")).unwrap(),
            "out\n"
        );
        assert_eq!(
            std::fs::read_to_string(p.join("stderr.txt")).unwrap(),
            "err\n"
        );
        std::fs::remove_dir_all(p).unwrap();
    }

    #[test]
    fn missing_program_names_install_hint() {
        let mut spec = RunSpec::new("cairn-no-such-program-xyz", vec![]);
        spec.install_hint = Some("apt-get install nothing".into());
        match run(&spec) {
            Err(SpawnError::Missing(m)) => {
                assert!(m.contains("cairn-no-such-program-xyz"), "{m}");
                assert!(m.contains("apt-get install nothing"), "{m}");
            }
            other => panic!("expected Missing, got {other:?}"),
        }
    }

    #[test]
    fn signal_exit_is_named() {
        let spec = RunSpec::new("sh", vec!["-c".into(), "kill -ABRT $$".into()]);
        let f = run(&spec).unwrap();
        assert_eq!(f.exit, Exit::Signal(libc::SIGABRT));
        assert!(f.exit.to_string().contains("SIGABRT"));
    }

    #[test]
    fn rejects_input_names_leaving_scratch() {
        let mut spec = RunSpec::new("true", vec![]);
        spec.files.push(("../evil".into(), String::new()));
        assert!(matches!(run(&spec), Err(SpawnError::Other(..))));
    }
}
