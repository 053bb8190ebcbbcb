//! The two locks of the integration-test binary. Every integration test runs in this one
//! process, so tests that used to be alone in their own process now run beside each other:
//!
//! - [`pty`] guards pseudo-terminal pair creation (serialport's `TTYPort::pair` is not
//!   thread-safe). It is the library's own `regulus::sim::PTY_PAIR_LOCK`, which the simulated
//!   bench takes when it creates its ports, so the test-side pairs and the simulated bench's
//!   never race each other.
//! - [`serial`] runs one test at a time among those that start the simulated bench, drive real
//!   ports against deadlines, run the binary for a long time over real ports, or otherwise
//!   rely on timing or process-wide state.
//!
//! Lock order: `serial` before `pty`, never the other way round. A test that panics while
//! holding a lock does not poison it for the others (the poison is cleared).
//!
//! A child process inherits every descriptor not marked close-on-exec, and serialport opens
//! pseudo-terminals without that mark: a `regulus` child started by one test would keep
//! another test's pseudo-terminal open, and that test would never see its port hang up.
//! [`cloexec_ptys`] marks them; it runs under the `pty` lock right after they are created.

use std::sync::{Mutex, MutexGuard};

static SERIAL: Mutex<()> = Mutex::new(());

/// Hold while creating a pseudo-terminal pair (and while marking it close-on-exec).
pub fn pty() -> MutexGuard<'static, ()> {
    regulus::sim::PTY_PAIR_LOCK
        .lock()
        .unwrap_or_else(|e| e.into_inner())
}

/// Hold for the whole of a test that must not share the machine with the other such tests.
pub fn serial() -> MutexGuard<'static, ()> {
    SERIAL.lock().unwrap_or_else(|e| e.into_inner())
}

/// Mark every open pseudo-terminal descriptor of this process close-on-exec (the master
/// multiplexer `/dev/ptmx` and the slaves `/dev/pts/N`), so no child process inherits one.
/// Call it with the [`pty`] guard held. In-process use of the ports is unchanged.
pub fn cloexec_ptys(_pty_guard: &MutexGuard<'static, ()>) {
    let Ok(entries) = std::fs::read_dir("/proc/self/fd") else {
        return;
    };
    for e in entries.flatten() {
        let Some(fd) = e.file_name().to_str().and_then(|s| s.parse::<i32>().ok()) else {
            continue;
        };
        let Ok(target) = std::fs::read_link(e.path()) else {
            continue;
        };
        if target.starts_with("/dev/ptmx") || target.starts_with("/dev/pts/") {
            // SAFETY: F_GETFD/F_SETFD only read and set the descriptor's flags; a descriptor
            // closed meanwhile makes them fail with EBADF, which is harmless here.
            unsafe {
                let flags = libc::fcntl(fd, libc::F_GETFD);
                if flags >= 0 {
                    libc::fcntl(fd, libc::F_SETFD, flags | libc::FD_CLOEXEC);
                }
            }
        }
    }
}
