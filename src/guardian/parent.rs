//! Starting a guardian from regulus and standing it down. Only a process that enabled
//! guardians (the regulus binary does, with its own path) starts one: a library user or a
//! test harness is never re-executed by accident.

use super::spec::GuardSpec;
use std::io::{BufRead, BufReader, Write};
use std::path::PathBuf;
use std::process::{Child, ChildStdin, Command, Stdio};
use std::sync::OnceLock;
use std::time::Duration;

/// The hidden subcommand that runs a guardian.
pub const GUARDIAN_ARG: &str = "__guardian";

/// The line a guardian answers once it holds every descriptor.
pub(super) const READY: &str = "guardian ready";
/// The line that stands a guardian down.
pub(super) const STAND_DOWN: &str = "stand-down";

/// How long a starting guardian may take to say it is ready.
const READY_WITHIN: Duration = Duration::from_secs(5);

static EXE: OnceLock<PathBuf> = OnceLock::new();

/// Let this process start guardians, running `exe` (the regulus binary).
pub fn enable(exe: PathBuf) {
    let _ = EXE.set(exe);
}

/// True when this process starts guardians.
pub fn enabled() -> bool {
    EXE.get().is_some()
}

/// Why a guardian could not be started.
#[derive(Debug, thiserror::Error)]
pub enum GuardError {
    #[error("cannot start the guardian process {exe}: {source}")]
    Spawn {
        exe: String,
        #[source]
        source: std::io::Error,
    },
    #[error("the guardian process did not get ready: {0}")]
    NotReady(String),
}

/// A running guardian. Dropping it without [`Guardian::stand_down`] closes its pipe: the
/// guardian then sends the safe state, as after a crash.
#[derive(Debug)]
pub struct Guardian {
    child: Child,
    stdin: Option<ChildStdin>,
}

/// Start a guardian for `spec`; `Ok(None)` when this process does not start guardians (not
/// enabled, not a Unix system, or no link to guard).
pub fn start(spec: &GuardSpec) -> Result<Option<Guardian>, GuardError> {
    let Some(exe) = EXE.get() else {
        return Ok(None);
    };
    if !cfg!(unix) || spec.links.is_empty() {
        return Ok(None);
    }
    let mut cmd = Command::new(exe);
    cmd.arg(GUARDIAN_ARG)
        .stdin(Stdio::piped())
        .stdout(Stdio::piped())
        .stderr(Stdio::null());
    #[cfg(unix)]
    {
        use std::os::unix::process::CommandExt;
        // Its own process group: a Ctrl-C at the terminal reaches regulus (which makes the
        // bench safe itself), never the guardian.
        cmd.process_group(0);
        let fds: Vec<i32> = spec.links.iter().map(|l| l.fd).collect();
        // SAFETY: runs in the child between fork and exec; fcntl is async-signal-safe and
        // only clears the close-on-exec mark of the links' descriptors (the child's own
        // descriptor table), so the guardian inherits them.
        unsafe {
            cmd.pre_exec(move || {
                for fd in &fds {
                    let flags = libc::fcntl(*fd, libc::F_GETFD);
                    if flags >= 0 {
                        libc::fcntl(*fd, libc::F_SETFD, flags & !libc::FD_CLOEXEC);
                    }
                }
                Ok(())
            });
        }
    }
    let mut child = cmd.spawn().map_err(|source| GuardError::Spawn {
        exe: exe.display().to_string(),
        source,
    })?;
    let not_ready = |child: &mut Child, why: String| {
        let _ = child.kill();
        let _ = child.wait();
        GuardError::NotReady(why)
    };
    let mut stdin = child.stdin.take();
    let line = serde_json::to_string(spec).unwrap_or_default();
    let sent = stdin
        .as_mut()
        .map(|s| writeln!(s, "{line}").and_then(|_| s.flush()));
    if !matches!(sent, Some(Ok(()))) {
        return Err(not_ready(
            &mut child,
            "its input could not be written".into(),
        ));
    }
    let Some(out) = child.stdout.take() else {
        return Err(not_ready(&mut child, "no output pipe".into()));
    };
    let (tx, rx) = std::sync::mpsc::channel();
    std::thread::spawn(move || {
        let mut l = String::new();
        let _ = BufReader::new(out).read_line(&mut l);
        let _ = tx.send(l);
    });
    match rx.recv_timeout(READY_WITHIN) {
        Ok(l) if l.trim() == READY => Ok(Some(Guardian { child, stdin })),
        Ok(l) => Err(not_ready(&mut child, format!("it said {:?}", l.trim()))),
        Err(_) => Err(not_ready(
            &mut child,
            format!("no answer within {} s", READY_WITHIN.as_secs()),
        )),
    }
}

impl Guardian {
    /// Regulus finished normally (its own safe state done): the guardian exits without
    /// sending anything.
    pub fn stand_down(mut self) {
        if let Some(mut s) = self.stdin.take() {
            let _ = writeln!(s, "{STAND_DOWN}");
            let _ = s.flush();
        }
        for _ in 0..100 {
            if matches!(self.child.try_wait(), Ok(Some(_))) {
                return;
            }
            std::thread::sleep(Duration::from_millis(10));
        }
        let _ = self.child.kill();
        let _ = self.child.wait();
    }

    /// The guardian's process id.
    pub fn id(&self) -> u32 {
        self.child.id()
    }
}
