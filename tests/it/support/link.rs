//! Test-side instrument responders speaking line protocols over real links: a thread serving
//! one loopback TCP connection, or the master side of a pseudo-terminal. They record every
//! line received, so tests can check what the bench sent. Pseudo-terminal creation is
//! serialised with the binary-wide lock (`support::lock`; it is not thread-safe).
#![allow(dead_code)]

use std::io::{Read, Write};
use std::net::{TcpListener, TcpStream};
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::{Arc, Mutex};
use std::thread::JoinHandle;
use std::time::Duration;

/// What a responder does with one received line.
pub enum Act {
    /// Write these bytes (give the terminator yourself).
    Send(Vec<u8>),
    /// Say nothing.
    Silent,
    /// Close the link.
    Close,
}

pub fn reply(line: &str) -> Act {
    Act::Send(format!("{line}\n").into_bytes())
}

pub type Handler = Box<dyn FnMut(&str) -> Act + Send>;

/// A running responder: the lines it received, and a stop flag.
pub struct Responder {
    pub received: Arc<Mutex<Vec<String>>>,
    stop: Arc<AtomicBool>,
    thread: Option<JoinHandle<()>>,
    /// Port (TCP) or pseudo-terminal path (serial) to put in the bench file.
    pub address: String,
    /// Keeps the pseudo-terminal's slave side open so the link does not hang up.
    _slave: Option<Box<dyn Send>>,
}

impl Responder {
    pub fn received(&self) -> Vec<String> {
        self.received.lock().unwrap().clone()
    }
}

impl Drop for Responder {
    fn drop(&mut self) {
        self.stop.store(true, Ordering::SeqCst);
        if let Some(t) = self.thread.take() {
            let _ = t.join();
        }
    }
}

fn serve_lines<S: Read + Write>(
    mut io: S,
    mut handler: Handler,
    received: Arc<Mutex<Vec<String>>>,
    stop: Arc<AtomicBool>,
) {
    let mut pending: Vec<u8> = Vec::new();
    let mut chunk = [0u8; 256];
    while !stop.load(Ordering::SeqCst) {
        match io.read(&mut chunk) {
            Ok(0) => return,
            Ok(n) => pending.extend_from_slice(&chunk[..n]),
            Err(e)
                if e.kind() == std::io::ErrorKind::TimedOut
                    || e.kind() == std::io::ErrorKind::WouldBlock =>
            {
                continue
            }
            Err(_) => return,
        }
        while let Some(pos) = pending.iter().position(|&b| b == b'\n') {
            let line: Vec<u8> = pending.drain(..=pos).collect();
            let text = String::from_utf8_lossy(&line[..pos])
                .trim_end_matches('\r')
                .to_string();
            received.lock().unwrap().push(text.clone());
            match handler(&text) {
                Act::Send(bytes) => {
                    if io.write_all(&bytes).and_then(|_| io.flush()).is_err() {
                        return;
                    }
                }
                Act::Silent => {}
                Act::Close => return,
            }
        }
    }
}

/// Serve one TCP connection on 127.0.0.1 (port chosen by the system).
pub fn tcp_responder(handler: impl FnMut(&str) -> Act + Send + 'static) -> Responder {
    let listener = TcpListener::bind("127.0.0.1:0").unwrap();
    let port = listener.local_addr().unwrap().port();
    let received = Arc::new(Mutex::new(Vec::new()));
    let stop = Arc::new(AtomicBool::new(false));
    let (r2, s2) = (Arc::clone(&received), Arc::clone(&stop));
    let handler: Handler = Box::new(handler);
    let thread = std::thread::spawn(move || {
        listener.set_nonblocking(true).unwrap();
        let stream: TcpStream = loop {
            if s2.load(Ordering::SeqCst) {
                return;
            }
            match listener.accept() {
                Ok((s, _)) => break s,
                Err(_) => std::thread::sleep(Duration::from_millis(2)),
            }
        };
        stream.set_nonblocking(false).unwrap();
        stream
            .set_read_timeout(Some(Duration::from_millis(50)))
            .unwrap();
        serve_lines(stream, handler, r2, s2);
    });
    Responder {
        received,
        stop,
        thread: Some(thread),
        address: port.to_string(),
        _slave: None,
    }
}

/// Create a pseudo-terminal pair (under the binary-wide `lock::pty`: creation is not
/// thread-safe), both sides close-on-exec. Returns the master side and the slave side, whose
/// path the bench opens again.
pub fn pty_pair() -> (serialport::TTYPort, serialport::TTYPort, String) {
    let guard = super::lock::pty();
    let (master, slave) = serialport::TTYPort::pair().expect("pseudo-terminal pair");
    super::lock::cloexec_ptys(&guard);
    let path = serialport::SerialPort::name(&slave).expect("slave path");
    (master, slave, path)
}

/// Serve the master side of a pseudo-terminal; the bench opens `address` (the slave path).
pub fn pty_responder(handler: impl FnMut(&str) -> Act + Send + 'static) -> Responder {
    let (mut master, slave, path) = pty_pair();
    serialport::SerialPort::set_timeout(&mut master, Duration::from_millis(50)).unwrap();
    let received = Arc::new(Mutex::new(Vec::new()));
    let stop = Arc::new(AtomicBool::new(false));
    let (r2, s2) = (Arc::clone(&received), Arc::clone(&stop));
    let handler: Handler = Box::new(handler);
    let thread = std::thread::spawn(move || serve_lines(master, handler, r2, s2));
    Responder {
        received,
        stop,
        thread: Some(thread),
        address: path,
        _slave: Some(Box::new(slave)),
    }
}

/// A pseudo-terminal whose master side writes `lines` on its own, one every `every`,
/// forever (repeating the list) or once, and answers `*IDN?` with `idn` when given.
pub fn pty_streamer(
    lines: Vec<String>,
    every: Duration,
    repeat: bool,
    idn: Option<String>,
) -> Responder {
    let (mut master, slave, path) = pty_pair();
    serialport::SerialPort::set_timeout(&mut master, Duration::from_millis(1)).unwrap();
    let received = Arc::new(Mutex::new(Vec::new()));
    let stop = Arc::new(AtomicBool::new(false));
    let (r2, s2) = (Arc::clone(&received), Arc::clone(&stop));
    let thread = std::thread::spawn(move || {
        let mut i = 0usize;
        let mut pending: Vec<u8> = Vec::new();
        let mut chunk = [0u8; 128];
        while !s2.load(Ordering::SeqCst) {
            if repeat || i < lines.len() {
                let l = &lines[i % lines.len()];
                if master.write_all(l.as_bytes()).is_err() {
                    return;
                }
                i += 1;
            }
            // Listen for commands between lines.
            if let Ok(n) = master.read(&mut chunk) {
                pending.extend_from_slice(&chunk[..n]);
            }
            while let Some(pos) = pending.iter().position(|&b| b == b'\n') {
                let line: Vec<u8> = pending.drain(..=pos).collect();
                let text = String::from_utf8_lossy(&line[..pos]).trim().to_string();
                r2.lock().unwrap().push(text.clone());
                if let (Some(id), "*IDN?") = (&idn, text.as_str()) {
                    let _ = master.write_all(format!("{id}\n").as_bytes());
                }
            }
            std::thread::sleep(every);
        }
    });
    Responder {
        received,
        stop,
        thread: Some(thread),
        address: path,
        _slave: Some(Box::new(slave)),
    }
}

/// A multi-threaded runtime for one test.
pub fn runtime() -> tokio::runtime::Runtime {
    tokio::runtime::Builder::new_multi_thread()
        .worker_threads(2)
        .enable_all()
        .build()
        .unwrap()
}
