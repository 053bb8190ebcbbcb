//! The guardian process itself: read the spec, say it is ready, then wait on the pipe from
//! regulus. A stand-down line ends it quietly; the pipe closing (regulus gone) makes it send
//! every link's safe state and append a note to the record. Lines go after a terminator, so
//! a line regulus left half-written cannot swallow the first command; frames go one write
//! each, each after the link's silence, so a frame regulus left half-written on a serial line
//! is ended before the first one.

use super::parent::{READY, STAND_DOWN};
use super::spec::{GuardLink, GuardPayload, GuardSpec, NOTE_FILE};
use std::io::{BufRead, Write};
use std::time::{Duration, Instant};

/// How long the guardian keeps trying to write one link's safe state (the silences between
/// frames come on top).
const WRITE_WITHIN: Duration = Duration::from_millis(200);

/// Run a guardian on this process's standard input and output; returns the exit code.
pub fn serve() -> u8 {
    #[cfg(unix)]
    // SAFETY: setting signal dispositions to "ignore" touches no memory of ours.
    unsafe {
        libc::signal(libc::SIGINT, libc::SIG_IGN);
        libc::signal(libc::SIGHUP, libc::SIG_IGN);
        libc::signal(libc::SIGPIPE, libc::SIG_IGN);
    }
    let stdin = std::io::stdin();
    let mut input = stdin.lock();
    let mut line = String::new();
    if input.read_line(&mut line).is_err() {
        return 2;
    }
    let Ok(spec) = serde_json::from_str::<GuardSpec>(line.trim()) else {
        return 2;
    };
    if !spec.links.iter().all(|l| fd_is_open(l.fd)) {
        return 2;
    }
    {
        let mut out = std::io::stdout().lock();
        if writeln!(out, "{READY}").and_then(|_| out.flush()).is_err() {
            return 2;
        }
    }
    line.clear();
    match input.read_line(&mut line) {
        Ok(n) if n > 0 && line.trim() == STAND_DOWN => 0,
        // The pipe closed (or anything else arrived): regulus is gone.
        _ => {
            act(&spec);
            0
        }
    }
}

fn fd_is_open(fd: i32) -> bool {
    #[cfg(unix)]
    // SAFETY: F_GETFD only reads the descriptor's flags.
    unsafe {
        libc::fcntl(fd, libc::F_GETFD) >= 0
    }
    #[cfg(not(unix))]
    {
        let _ = fd;
        false
    }
}

/// Send every link's safe state, then note what was done.
fn act(spec: &GuardSpec) {
    let mut done = Vec::new();
    for link in &spec.links {
        let result = send(link);
        done.push(format!(
            "{}: {} ({})",
            link.name,
            link.safe_state.describe(),
            match result {
                Ok(()) => "sent".to_string(),
                Err(e) => format!("not sent: {e}"),
            }
        ));
    }
    if let Some(dir) = &spec.record {
        let note = format!(
            "{} regulus ended without finishing the run (killed or crashed); the guardian sent the safe state: {}\n",
            chrono::Utc::now().format("%Y-%m-%dT%H:%M:%S%.3fZ"),
            done.join("; ")
        );
        if let Ok(mut f) = std::fs::OpenOptions::new()
            .create(true)
            .append(true)
            .open(dir.join(NOTE_FILE))
        {
            let _ = f.write_all(note.as_bytes());
        }
    }
}

#[cfg(unix)]
fn send(link: &GuardLink) -> std::io::Result<()> {
    let fd = link.fd;
    // SAFETY: fcntl reads and sets the file status flags of a descriptor we hold; the link
    // is ours alone now (regulus is gone), so making it blocking disturbs no one.
    unsafe {
        let fl = libc::fcntl(fd, libc::F_GETFL);
        if fl >= 0 {
            libc::fcntl(fd, libc::F_SETFL, fl & !libc::O_NONBLOCK);
        }
    }
    match &link.safe_state {
        GuardPayload::Lines { terminator, lines } => {
            let mut bytes = terminator.as_bytes().to_vec();
            for c in lines {
                bytes.extend_from_slice(c.as_bytes());
                bytes.extend_from_slice(terminator.as_bytes());
            }
            write_all(fd, &bytes, Instant::now() + WRITE_WITHIN)
        }
        GuardPayload::Frames { gap_us, frames } => {
            let gap = Duration::from_micros(*gap_us);
            let mut end = Instant::now() + WRITE_WITHIN;
            for f in frames {
                std::thread::sleep(gap);
                end += gap;
                write_frame(fd, &f.bytes, end)?;
            }
            Ok(())
        }
    }
}

/// Write a byte stream (lines), in as many writes as it takes, until `end`.
#[cfg(unix)]
fn write_all(fd: i32, bytes: &[u8], end: Instant) -> std::io::Result<()> {
    let mut off = 0;
    while off < bytes.len() {
        match write_once(fd, &bytes[off..], end)? {
            0 => return Err(std::io::ErrorKind::WriteZero.into()),
            n => off += n,
        }
    }
    Ok(())
}

/// Write one frame in one write (a message-based device takes each write as one message; a
/// frame split in two would be two broken messages), until `end`. On a stream link a short
/// write still gets the rest written, so the peer sees the whole frame.
#[cfg(unix)]
fn write_frame(fd: i32, bytes: &[u8], end: Instant) -> std::io::Result<()> {
    let n = write_once(fd, bytes, end)?;
    if n < bytes.len() {
        write_all(fd, &bytes[n..], end)?;
    }
    Ok(())
}

/// One write(2) of `bytes`, retried while the descriptor is busy until `end`.
#[cfg(unix)]
fn write_once(fd: i32, bytes: &[u8], end: Instant) -> std::io::Result<usize> {
    loop {
        // SAFETY: writes from a live buffer to a descriptor we hold.
        let n = unsafe { libc::write(fd, bytes.as_ptr() as *const libc::c_void, bytes.len()) };
        if n >= 0 {
            return Ok(n as usize);
        }
        let e = std::io::Error::last_os_error();
        let again = matches!(
            e.kind(),
            std::io::ErrorKind::Interrupted | std::io::ErrorKind::WouldBlock
        );
        if !again || Instant::now() > end {
            return Err(e);
        }
        std::thread::sleep(Duration::from_millis(2));
    }
}

#[cfg(not(unix))]
fn send(_link: &GuardLink) -> std::io::Result<()> {
    Err(std::io::Error::other("no guardian on this platform"))
}
