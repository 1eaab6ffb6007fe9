//! Starting an engine process cheaply, with the settings Cairn needs in the child.
//!
//! The child must (1) lead its own process group, (2) get SIGTERM when the thread that started
//! it dies (`PR_SET_PDEATHSIG`, so a killed Cairn leaves no engine behind), and (3) start with
//! default signal dispositions (Rust ignores SIGPIPE; an ignored signal would stay ignored
//! across `execve`). The standard library can do (2) only through a `pre_exec` hook, which
//! forces a full `fork`: the kernel copies the page tables of this multi-threaded process
//! (tokio workers, blocking threads, allocator arenas), and each engine start then cost about
//! 3 ms of system time, measured on the demo study, a sixth of a 20 ms xtb run.
//!
//! So the child is made here the way `posix_spawn` makes it: `clone(CLONE_VM | CLONE_VFORK)`,
//! which shares the parent's memory and suspends the calling thread until the child has called
//! `execve` (or exited). Nothing is copied. The child runs on its own small stack and only makes
//! async-signal-safe system calls on data prepared by the parent. Measured on the demo study,
//! the median start fell from 3.1 ms to 0.4 ms.

use std::ffi::{CString, OsStr};
use std::io;
use std::os::fd::{FromRawFd, OwnedFd, RawFd};
use std::os::unix::ffi::OsStrExt;
use std::path::Path;

/// A started child: its pid (also its process-group id) and the read ends of its stdout and
/// stderr pipes. The caller reaps it.
#[derive(Debug)]
pub struct Spawned {
    pub pid: libc::pid_t,
    pub stdout: OwnedFd,
    pub stderr: OwnedFd,
}

/// Everything the child reads, prepared by the parent (the child must not allocate).
struct ChildData {
    exe: *const libc::c_char,
    argv: *const *const libc::c_char,
    envp: *const *const libc::c_char,
    dir: *const libc::c_char,
    stdin: RawFd,
    stdout: RawFd,
    stderr: RawFd,
    /// The parent's pid, to notice a parent that died before the death signal was armed.
    parent: libc::pid_t,
    /// Set by the child when it fails before `execve` succeeds: which step, and errno.
    failed_step: libc::c_int,
    errno: libc::c_int,
}

const STEP_PGROUP: libc::c_int = 1;
const STEP_DEATHSIG: libc::c_int = 2;
const STEP_FDS: libc::c_int = 3;
const STEP_CHDIR: libc::c_int = 4;
const STEP_EXEC: libc::c_int = 5;

fn cstring(what: &str, s: &OsStr) -> io::Result<CString> {
    CString::new(s.as_bytes()).map_err(|_| {
        io::Error::new(
            io::ErrorKind::InvalidInput,
            format!("{what} contains a NUL byte: {}", s.to_string_lossy()),
        )
    })
}

fn cvt(rc: libc::c_int) -> io::Result<libc::c_int> {
    if rc < 0 {
        Err(io::Error::last_os_error())
    } else {
        Ok(rc)
    }
}

fn pipe() -> io::Result<(OwnedFd, OwnedFd)> {
    let mut fds = [0 as RawFd; 2];
    // SAFETY: pipe2 writes two descriptors into the array we own.
    cvt(unsafe { libc::pipe2(fds.as_mut_ptr(), libc::O_CLOEXEC) })?;
    // SAFETY: both descriptors were just created and are owned by nobody else.
    Ok(unsafe { (OwnedFd::from_raw_fd(fds[0]), OwnedFd::from_raw_fd(fds[1])) })
}

/// Start `exe` with `args` (argv\[0\] is `exe` itself) in `dir`, with the inherited
/// environment plus `env`, stdin from /dev/null and stdout/stderr into pipes.
pub fn spawn(
    exe: &Path,
    args: &[String],
    env: &[(String, String)],
    dir: &Path,
) -> io::Result<Spawned> {
    // Everything the child needs, built now (the child cannot allocate).
    let exe_c = cstring("the executable path", exe.as_os_str())?;
    let mut argv_c = vec![exe_c.clone()];
    for a in args {
        argv_c.push(cstring("an argument", OsStr::new(a))?);
    }
    let mut envs: Vec<(std::ffi::OsString, std::ffi::OsString)> = std::env::vars_os()
        .filter(|(k, _)| !env.iter().any(|(n, _)| OsStr::new(n) == k.as_os_str()))
        .collect();
    envs.extend(env.iter().map(|(k, v)| (k.into(), v.into())));
    let mut envp_c = Vec::with_capacity(envs.len());
    for (k, v) in &envs {
        let mut kv = k.as_bytes().to_vec();
        kv.push(b'=');
        kv.extend_from_slice(v.as_bytes());
        envp_c.push(cstring("an environment variable", OsStr::from_bytes(&kv))?);
    }
    let dir_c = cstring("the scratch directory", dir.as_os_str())?;
    let argv: Vec<*const libc::c_char> = argv_c
        .iter()
        .map(|c| c.as_ptr())
        .chain(std::iter::once(std::ptr::null()))
        .collect();
    let envp: Vec<*const libc::c_char> = envp_c
        .iter()
        .map(|c| c.as_ptr())
        .chain(std::iter::once(std::ptr::null()))
        .collect();

    // SAFETY: plain open of a constant path; the descriptor is owned below.
    let null = cvt(unsafe { libc::open(c"/dev/null".as_ptr(), libc::O_RDONLY | libc::O_CLOEXEC) })?;
    // SAFETY: just opened, owned by nobody else.
    let null = unsafe { OwnedFd::from_raw_fd(null) };
    let (out_r, out_w) = pipe()?;
    let (err_r, err_w) = pipe()?;
    use std::os::fd::AsRawFd;
    let mut data = ChildData {
        exe: exe_c.as_ptr(),
        argv: argv.as_ptr(),
        envp: envp.as_ptr(),
        dir: dir_c.as_ptr(),
        stdin: null.as_raw_fd(),
        stdout: out_w.as_raw_fd(),
        stderr: err_w.as_raw_fd(),
        // SAFETY: getpid cannot fail.
        parent: unsafe { libc::getpid() },
        failed_step: 0,
        errno: 0,
    };

    // The child's stack: its own mapping (it must not touch this thread's stack while this
    // thread is suspended in clone). 256 KiB is far more than the few system calls need.
    const STACK: usize = 256 * 1024;
    // SAFETY: an anonymous private mapping we own and unmap below.
    let stack = unsafe {
        libc::mmap(
            std::ptr::null_mut(),
            STACK,
            libc::PROT_READ | libc::PROT_WRITE,
            libc::MAP_PRIVATE | libc::MAP_ANONYMOUS | libc::MAP_STACK,
            -1,
            0,
        )
    };
    if stack == libc::MAP_FAILED {
        return Err(io::Error::last_os_error());
    }
    // Block every signal around the clone, so no handler of this process runs in the child
    // before it has reset them (the child unblocks after resetting).
    // SAFETY: sigset_t values we own; pthread_sigmask only affects this thread.
    let mut all: libc::sigset_t = unsafe { std::mem::zeroed() };
    let mut old: libc::sigset_t = unsafe { std::mem::zeroed() };
    unsafe {
        libc::sigfillset(&mut all);
        libc::pthread_sigmask(libc::SIG_SETMASK, &all, &mut old);
    }
    // SAFETY: the stack grows down on the supported targets, so the top of the mapping is
    // passed (16-byte aligned: the mapping is page aligned and STACK a multiple of 16). With
    // CLONE_VFORK this thread resumes only after the child has called execve or exited, so
    // `data`, `argv`, `envp` and the C strings outlive every use by the child.
    let pid = unsafe {
        libc::clone(
            child_main,
            (stack as *mut u8).add(STACK) as *mut libc::c_void,
            libc::CLONE_VM | libc::CLONE_VFORK | libc::SIGCHLD,
            &mut data as *mut ChildData as *mut libc::c_void,
        )
    };
    let clone_err = io::Error::last_os_error();
    // SAFETY: restores this thread's mask; unmaps the mapping made above (the child is done
    // with it: it has exec'd, which replaced its memory, or exited).
    unsafe {
        libc::pthread_sigmask(libc::SIG_SETMASK, &old, std::ptr::null_mut());
        libc::munmap(stack, STACK);
    }
    if pid < 0 {
        return Err(clone_err);
    }
    // The child shares our memory, so what it wrote into `data` is visible here.
    // SAFETY: a volatile read of fields the child may have written; it has finished running
    // in our address space.
    let (step, errno) = unsafe {
        (
            std::ptr::read_volatile(&data.failed_step),
            std::ptr::read_volatile(&data.errno),
        )
    };
    if step != 0 {
        // The child exited without running the program: reap it and report why.
        let mut status = 0;
        // SAFETY: reaps our own child.
        unsafe {
            libc::waitpid(pid, &mut status, 0);
        }
        let e = io::Error::from_raw_os_error(errno);
        // Only a failed execve keeps its kind (NotFound = no such program); the other steps
        // are failures of the set-up.
        return Err(match step {
            STEP_EXEC => io::Error::new(e.kind(), format!("executing it: {e}")),
            STEP_PGROUP => io::Error::other(format!("making its process group: {e}")),
            STEP_DEATHSIG => io::Error::other(format!("arming its parent-death signal: {e}")),
            STEP_FDS => io::Error::other(format!("connecting its standard streams: {e}")),
            _ => io::Error::other(format!("entering its scratch directory: {e}")),
        });
    }
    drop(out_w);
    drop(err_w);
    drop(null);
    Ok(Spawned {
        pid,
        stdout: out_r,
        stderr: err_r,
    })
}

/// The child, between clone and execve: only system calls, on data prepared by the parent.
extern "C" fn child_main(arg: *mut libc::c_void) -> libc::c_int {
    // SAFETY: `arg` is the parent's `ChildData`, alive while the parent is suspended; every
    // call below is async-signal-safe.
    unsafe {
        let d = &mut *(arg as *mut ChildData);
        let fail = |d: &mut ChildData, step| -> libc::c_int {
            d.errno = *libc::__errno_location();
            d.failed_step = step;
            libc::_exit(127)
        };
        // Default dispositions for every caught signal (a handler is code of the parent; one
        // running here, before execve, would run in the parent's memory) and for SIGPIPE.
        let mut dfl: libc::sigaction = std::mem::zeroed();
        dfl.sa_sigaction = libc::SIG_DFL;
        // Ignored signals other than SIGPIPE stay ignored, as with the standard library.
        for sig in 1..65 {
            if sig == libc::SIGKILL || sig == libc::SIGSTOP {
                continue;
            }
            let mut cur: libc::sigaction = std::mem::zeroed();
            if libc::sigaction(sig, std::ptr::null(), &mut cur) == 0
                && cur.sa_sigaction != libc::SIG_DFL
                && (cur.sa_sigaction != libc::SIG_IGN || sig == libc::SIGPIPE)
            {
                libc::sigaction(sig, &dfl, std::ptr::null_mut());
            }
        }
        let mut none: libc::sigset_t = std::mem::zeroed();
        libc::sigemptyset(&mut none);
        libc::sigprocmask(libc::SIG_SETMASK, &none, std::ptr::null_mut());
        if libc::setpgid(0, 0) != 0 {
            return fail(d, STEP_PGROUP);
        }
        if libc::prctl(libc::PR_SET_PDEATHSIG, libc::SIGTERM) != 0 {
            return fail(d, STEP_DEATHSIG);
        }
        // The parent died before the signal was armed: nobody will read the result.
        if libc::getppid() != d.parent {
            libc::_exit(127);
        }
        if libc::dup2(d.stdin, 0) < 0 || libc::dup2(d.stdout, 1) < 0 || libc::dup2(d.stderr, 2) < 0
        {
            return fail(d, STEP_FDS);
        }
        if libc::chdir(d.dir) != 0 {
            return fail(d, STEP_CHDIR);
        }
        libc::execve(d.exe, d.argv, d.envp);
        fail(d, STEP_EXEC)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::io::Read;

    fn read_all(fd: OwnedFd) -> String {
        let mut s = String::new();
        std::fs::File::from(fd).read_to_string(&mut s).unwrap();
        s
    }

    fn reap(pid: libc::pid_t) -> libc::c_int {
        let mut status = 0;
        unsafe { libc::waitpid(pid, &mut status, 0) };
        status
    }

    #[test]
    fn runs_with_arguments_environment_directory_and_its_own_group() {
        let dir = tempfile::tempdir().unwrap();
        let sh = Path::new("/bin/sh");
        let s = spawn(
            sh,
            &[
                "-c".into(),
                "pwd; printf '%s\\n' \"$CAIRN_SPAWN_T\"; read -r _ _ _ _ g _ < /proc/$$/stat; echo $g; echo err >&2; exit 4"
                    .into(),
            ],
            &[("CAIRN_SPAWN_T".into(), "a b 'c'".into())],
            dir.path(),
        )
        .unwrap();
        let out = read_all(s.stdout);
        let err = read_all(s.stderr);
        let status = reap(s.pid);
        assert!(libc::WIFEXITED(status) && libc::WEXITSTATUS(status) == 4);
        let lines: Vec<&str> = out.lines().collect();
        assert_eq!(
            Path::new(lines[0]).canonicalize().unwrap(),
            dir.path().canonicalize().unwrap()
        );
        assert_eq!(lines[1], "a b 'c'");
        assert_eq!(lines[2].trim(), s.pid.to_string(), "leads its own group");
        assert_eq!(err, "err\n");
    }

    #[test]
    fn the_child_gets_default_sigpipe_and_an_unblocked_mask() {
        // Rust ignores SIGPIPE in this process; the engine must not inherit that.
        let dir = tempfile::tempdir().unwrap();
        let s = spawn(
            Path::new("/bin/sh"),
            &[
                "-c".into(),
                "grep -E '^(SigIgn|SigBlk)' /proc/self/status".into(),
            ],
            &[],
            dir.path(),
        )
        .unwrap();
        let out = read_all(s.stdout);
        reap(s.pid);
        for line in out.lines() {
            let mask = u64::from_str_radix(line.split_whitespace().nth(1).unwrap(), 16).unwrap();
            if line.starts_with("SigBlk") {
                assert_eq!(mask, 0, "{line}");
            } else {
                let sigpipe = 1u64 << (libc::SIGPIPE - 1);
                assert_eq!(mask & sigpipe, 0, "SIGPIPE ignored in the child: {line}");
            }
        }
    }

    #[test]
    fn many_starts_from_several_threads_each_get_their_own_arguments() {
        // The children share this process's memory until they exec: starts from concurrent
        // threads must not see each other's argument or environment arrays.
        let dir = tempfile::tempdir().unwrap();
        std::thread::scope(|sc| {
            for t in 0..8 {
                let dir = dir.path();
                sc.spawn(move || {
                    for k in 0..25 {
                        let s = spawn(
                            Path::new("/bin/sh"),
                            &[
                                "-c".into(),
                                "echo \"$1 $CAIRN_SPAWN_K\"".into(),
                                "sh".into(),
                                format!("t{t}"),
                            ],
                            &[("CAIRN_SPAWN_K".into(), format!("k{k}"))],
                            dir,
                        )
                        .unwrap();
                        let out = read_all(s.stdout);
                        let status = reap(s.pid);
                        assert!(libc::WIFEXITED(status) && libc::WEXITSTATUS(status) == 0);
                        assert_eq!(out, format!("t{t} k{k}\n"));
                    }
                });
            }
        });
    }

    #[test]
    fn a_missing_directory_or_program_is_an_error_naming_the_step() {
        let dir = tempfile::tempdir().unwrap();
        let e = spawn(Path::new("/bin/sh"), &[], &[], &dir.path().join("gone")).unwrap_err();
        assert!(
            e.to_string().contains("entering its scratch directory"),
            "{e}"
        );
        assert_ne!(
            e.kind(),
            io::ErrorKind::NotFound,
            "not mistaken for a missing program"
        );
        let e = spawn(&dir.path().join("no-such-program"), &[], &[], dir.path()).unwrap_err();
        assert_eq!(e.kind(), io::ErrorKind::NotFound, "{e}");
        assert!(e.to_string().contains("executing it"), "{e}");
    }
}
