//! Serving the simulated instruments on real ports: one thread per pseudo-terminal master, one
//! listener thread per TCP port on 127.0.0.1 with a thread per connection. A line in becomes a
//! reply out through the pure protocol in `instruments`; the unit's state advances with the wall
//! clock on every access. Reply latency, noise and port faults are applied here. This module
//! owns the threads and ports; it holds no protocol or physics of its own.

use super::instruments::{
    respond, stream_line, Fate, FaultSchedule, InstrumentKind, InstrumentState, Noise, Snapshot,
    GARBAGE,
};
use super::unit::{Controls, SimUnit, Thermal};
use std::collections::VecDeque;
use std::io::{self, Read, Write};
use std::net::{TcpListener, TcpStream};
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::{Arc, Mutex, MutexGuard};
use std::thread::JoinHandle;
use std::time::{Duration, Instant};

/// Streaming meter: one line every 50 ms (about 20 lines per second).
pub const STREAM_PERIOD: Duration = Duration::from_millis(50);
/// How long one read waits before the loop looks at the stop flag and the stream clock.
const POLL: Duration = Duration::from_millis(10);
/// Wait before retrying a pseudo-terminal whose other side is not open.
const NO_PEER_WAIT: Duration = Duration::from_millis(20);
/// Longest command line kept; longer input is discarded up to the next newline.
const MAX_LINE: usize = 4096;

/// Lock a mutex even if a thread panicked while holding it (the data is plain values).
pub(crate) fn lock<T>(m: &Mutex<T>) -> MutexGuard<'_, T> {
    m.lock().unwrap_or_else(|e| e.into_inner())
}

/// Most thermal states kept in [`World::history`] (at about 20 syncs per second from a
/// streaming meter, well over an hour).
pub const HISTORY_LEN: usize = 100_000;

/// The simulated unit and the bench settings, advanced with the wall clock.
#[derive(Debug)]
pub struct World {
    pub unit: SimUnit,
    pub controls: Controls,
    last: Instant,
    /// The unit's thermal state at every sync (wall-clock time), oldest first, at most
    /// [`HISTORY_LEN`]: what the junctions were when a reading was answered.
    pub history: VecDeque<(chrono::DateTime<chrono::Utc>, Thermal)>,
}

impl World {
    pub fn new(unit: SimUnit) -> World {
        World {
            unit,
            controls: Controls::default(),
            last: Instant::now(),
            history: VecDeque::new(),
        }
    }

    /// Bring the unit up to now and return what the instruments see.
    pub fn sync(&mut self) -> Snapshot {
        let now = Instant::now();
        let dt = now.duration_since(self.last).as_secs_f64();
        self.last = now;
        let snap = Snapshot::from(self.unit.advance(&self.controls, dt));
        if self.history.len() >= HISTORY_LEN {
            self.history.pop_front();
        }
        self.history
            .push_back((chrono::Utc::now(), self.unit.thermal()));
        snap
    }
}

/// One instrument's protocol state, noise and fault schedule (shared by its connections).
#[derive(Debug)]
pub struct Endpoint {
    pub state: InstrumentState,
    pub noise: Noise,
    pub faults: FaultSchedule,
    pub latency: Duration,
    /// Set when the port has closed for good (a closing fault).
    pub closed: Arc<AtomicBool>,
}

/// Everything a serving thread needs.
#[derive(Clone)]
pub struct Shared {
    pub world: Arc<Mutex<World>>,
    pub endpoint: Arc<Mutex<Endpoint>>,
    pub stop: Arc<AtomicBool>,
    pub started: Instant,
}

impl Shared {
    fn kind(&self) -> InstrumentKind {
        lock(&self.endpoint).state.kind
    }
    fn closed(&self) -> bool {
        lock(&self.endpoint).closed.load(Ordering::SeqCst)
    }
    fn must_end(&self) -> bool {
        if self.stop.load(Ordering::SeqCst) || self.closed() {
            return true;
        }
        let ep = lock(&self.endpoint);
        if ep
            .faults
            .closed_by_time(self.started.elapsed().as_secs_f64())
        {
            ep.closed.store(true, Ordering::SeqCst);
            return true;
        }
        false
    }
}

/// What to write for one command line, and whether to close afterwards.
struct Outcome {
    lines: Vec<String>,
    delay: Duration,
    close: bool,
}

/// A command that changes a setting (not a query, not an IEEE 488.2 common command).
fn is_setting(cmd: &str) -> bool {
    !cmd.ends_with('?') && !cmd.starts_with('*')
}

/// Apply the lagging settings whose moment has come, in order.
fn apply_due(sh: &Shared) {
    let now = Instant::now();
    let mut ep = lock(&sh.endpoint);
    if ep.faults.pending.front().is_none_or(|(t, _)| *t > now) {
        return;
    }
    let snap = lock(&sh.world).sync();
    let ep = &mut *ep;
    while let Some((t, cmd)) = ep.faults.pending.front().cloned() {
        if t > now {
            break;
        }
        ep.faults.pending.pop_front();
        let mut w = lock(&sh.world);
        let _ = respond(&mut ep.state, &cmd, &mut w.controls, &snap, &mut ep.noise);
    }
}

fn handle_line(sh: &Shared, line: &str) -> Outcome {
    apply_due(sh);
    let snap = lock(&sh.world).sync();
    let mut ep = lock(&sh.endpoint);
    let ep = &mut *ep;
    let now = Instant::now();
    let lag = Duration::from_millis(ep.faults.faults.lag_ms);
    let ack = ep.faults.faults.acknowledge;
    let mut replies = Vec::new();
    let mut extra = Duration::ZERO;
    for cmd in line.split(';').map(str::trim).filter(|c| !c.is_empty()) {
        if is_setting(cmd) {
            let has_value = cmd.split_once(char::is_whitespace).is_some();
            if has_value && ep.faults.refuse_setting() {
                if ack {
                    replies.push("ERR -222,\"Data out of range\"".to_string());
                } else {
                    ep.state.error(-222, "Data out of range");
                }
                continue;
            }
            if !lag.is_zero() {
                ep.faults.pending.push_back((now + lag, cmd.to_string()));
                if ack {
                    replies.push("OK".to_string());
                }
                continue;
            }
            let before = ep.state.errors().len();
            {
                let mut w = lock(&sh.world);
                let _ = respond(&mut ep.state, cmd, &mut w.controls, &snap, &mut ep.noise);
            }
            if ack {
                let refused = if ep.state.errors().len() > before {
                    ep.state.take_last_error()
                } else {
                    None
                };
                replies.push(match refused {
                    Some((code, text)) => format!("ERR {code},\"{text}\""),
                    None => "OK".to_string(),
                });
            }
            continue;
        }
        // IEEE 488.2 *OPC?: answered once every pending operation is complete.
        if cmd.eq_ignore_ascii_case("*OPC?") {
            if let Some((t, _)) = ep.faults.pending.back() {
                extra = extra.max(t.saturating_duration_since(now));
            }
        }
        let mut w = lock(&sh.world);
        replies.extend(respond(
            &mut ep.state,
            cmd,
            &mut w.controls,
            &snap,
            &mut ep.noise,
        ));
    }
    let mut lines = Vec::new();
    for r in replies {
        if ep.faults.reply_late() {
            extra = extra.max(Duration::from_millis(super::options::LATE_MS));
        }
        match ep.faults.next_reply() {
            Fate::Send => lines.push(r),
            Fate::Drop => {}
            Fate::GarbageThenSend => {
                lines.push(GARBAGE.to_string());
                lines.push(r);
            }
        }
    }
    let close = ep.faults.count_command();
    Outcome {
        lines,
        delay: ep.latency + Duration::from_millis(ep.faults.faults.slow_ms) + extra,
        close,
    }
}

fn next_stream_lines(sh: &Shared) -> (Vec<String>, bool) {
    let snap = lock(&sh.world).sync();
    let mut ep = lock(&sh.endpoint);
    let ep = &mut *ep;
    let line = stream_line(&snap, &mut ep.noise);
    let lines = match ep.faults.next_reply() {
        Fate::Send => vec![line],
        Fate::Drop => vec![],
        Fate::GarbageThenSend => vec![GARBAGE.to_string(), line],
    };
    (lines, ep.faults.count_command())
}

/// Result of one read attempt on a port.
enum Got {
    Data(usize),
    Idle,
    /// Pseudo-terminal: nobody has the other side open. TCP: the peer closed.
    NoPeer,
}

trait Port: Write {
    fn read_some(&mut self, buf: &mut [u8]) -> Got;
    /// Called when the other side went away after being there.
    fn peer_left(&mut self) {}
}

/// A pseudo-terminal master and the path of its slave side.
pub struct PtyPort {
    pub master: serialport::TTYPort,
    pub slave_path: String,
}

impl Write for PtyPort {
    fn write(&mut self, buf: &[u8]) -> io::Result<usize> {
        self.master.write(buf)
    }
    fn flush(&mut self) -> io::Result<()> {
        self.master.flush()
    }
}

impl Port for PtyPort {
    fn read_some(&mut self, buf: &mut [u8]) -> Got {
        match self.master.read(buf) {
            Ok(0) => Got::NoPeer,
            Ok(n) => Got::Data(n),
            Err(e) if e.kind() == io::ErrorKind::TimedOut => Got::Idle,
            Err(e) if e.kind() == io::ErrorKind::Interrupted => Got::Idle,
            // EIO / hang-up: the slave side is not open (yet, or any more). Wait and retry.
            Err(_) => Got::NoPeer,
        }
    }

    /// Lines written but not read stay in the slave's input buffer across a close and would
    /// reach the next opener as if fresh: open the slave briefly and discard them.
    fn peer_left(&mut self) {
        use serialport::{ClearBuffer, SerialPort};
        // Not exclusive: a bench reopening the port at this very moment must not find it busy.
        if let Ok(slave) = serialport::new(self.slave_path.as_str(), 115_200)
            .timeout(POLL)
            .exclusive(false)
            .open_native()
        {
            let _ = slave.clear(ClearBuffer::Input);
        }
    }
}

impl Port for TcpStream {
    fn read_some(&mut self, buf: &mut [u8]) -> Got {
        match self.read(buf) {
            Ok(0) => Got::NoPeer,
            Ok(n) => Got::Data(n),
            Err(e)
                if matches!(
                    e.kind(),
                    io::ErrorKind::WouldBlock
                        | io::ErrorKind::TimedOut
                        | io::ErrorKind::Interrupted
                ) =>
            {
                Got::Idle
            }
            Err(_) => Got::NoPeer,
        }
    }
}

fn write_lines<P: Port>(port: &mut P, lines: &[String]) -> io::Result<()> {
    let mut out = Vec::new();
    for l in lines {
        out.extend_from_slice(l.as_bytes());
        out.push(b'\n');
    }
    port.write_all(&out)?;
    port.flush()
}

/// Mark the port closed for good. A pseudo-terminal hang-up discards what the other side has
/// not read yet, so the last reply gets a moment to be read before the master goes.
fn close_after_reply(sh: &Shared, pty: bool) {
    lock(&sh.endpoint).closed.store(true, Ordering::SeqCst);
    if pty {
        std::thread::sleep(Duration::from_millis(300));
    }
}

/// Wait `d` (a reply's latency), in slices so that a stop is not held up by a slow reply.
/// False when the bench is stopping.
fn pause(sh: &Shared, d: Duration) -> bool {
    let end = Instant::now() + d;
    loop {
        if sh.stop.load(Ordering::SeqCst) {
            return false;
        }
        let now = Instant::now();
        if now >= end {
            return true;
        }
        apply_due(sh);
        std::thread::sleep((end - now).min(POLL));
    }
}

/// Serve one port until stop, close or (for TCP, `reconnects == false`) the peer leaves.
fn session<P: Port>(port: &mut P, sh: &Shared, reconnects: bool) {
    let streaming = sh.kind() == InstrumentKind::StreamMeter;
    let mut buf = [0u8; 1024];
    let mut line: Vec<u8> = Vec::new();
    let mut discarding = false;
    let mut peer = false;
    let mut next_stream = Instant::now();
    while !sh.must_end() {
        apply_due(sh);
        match port.read_some(&mut buf) {
            Got::NoPeer => {
                if !reconnects {
                    return;
                }
                if peer {
                    port.peer_left();
                }
                peer = false;
                line.clear();
                std::thread::sleep(NO_PEER_WAIT);
                continue;
            }
            Got::Idle => {
                if !peer {
                    next_stream = Instant::now();
                }
                peer = true;
            }
            Got::Data(n) => {
                peer = true;
                for &b in &buf[..n] {
                    if b == b'\n' {
                        if !discarding {
                            let text = String::from_utf8_lossy(&line);
                            let text = text.trim_end_matches('\r').trim();
                            if !text.is_empty() && !streaming {
                                let out = handle_line(sh, text);
                                if !pause(sh, out.delay) {
                                    return;
                                }
                                if !out.lines.is_empty() {
                                    // If nobody reads, the reply is lost, as with a real
                                    // instrument.
                                    let _ = write_lines(port, &out.lines);
                                }
                                if out.close {
                                    close_after_reply(sh, reconnects);
                                    return;
                                }
                            } else if !text.is_empty() && streaming {
                                // The streaming meter answers only its identity query.
                                if text.eq_ignore_ascii_case("*IDN?") {
                                    let out = handle_line(sh, text);
                                    let _ = write_lines(port, &out.lines);
                                }
                            }
                        }
                        discarding = false;
                        line.clear();
                    } else if line.len() < MAX_LINE {
                        line.push(b);
                    } else {
                        discarding = true;
                        line.clear();
                    }
                }
            }
        }
        if streaming && peer && Instant::now() >= next_stream {
            let (lines, close) = next_stream_lines(sh);
            if !lines.is_empty() {
                let _ = write_lines(port, &lines);
            }
            if close {
                close_after_reply(sh, reconnects);
                return;
            }
            next_stream += STREAM_PERIOD;
            let now = Instant::now();
            if next_stream < now {
                next_stream = now + STREAM_PERIOD;
            }
        }
    }
}

/// Serve an instrument on a pseudo-terminal master until stop or close; the master is
/// dropped at the end, which hangs up the bench's side.
pub fn spawn_pty(mut port: PtyPort, sh: Shared) -> io::Result<JoinHandle<()>> {
    use serialport::SerialPort;
    port.master
        .set_timeout(POLL)
        .map_err(|e| io::Error::other(e.to_string()))?;
    std::thread::Builder::new()
        .name(format!("sim-{}", sh.kind().name()))
        .spawn(move || {
            session(&mut port, &sh, true);
            drop(port);
        })
}

/// Serve an instrument on a TCP listener until stop or close; each connection gets a thread.
pub fn spawn_tcp(listener: TcpListener, sh: Shared) -> io::Result<JoinHandle<()>> {
    listener.set_nonblocking(true)?;
    std::thread::Builder::new()
        .name(format!("sim-{}-listen", sh.kind().name()))
        .spawn(move || {
            let mut conns: Vec<JoinHandle<()>> = Vec::new();
            while !sh.must_end() {
                match listener.accept() {
                    Ok((stream, _)) => {
                        let sh2 = sh.clone();
                        let spawned = std::thread::Builder::new()
                            .name(format!("sim-{}-conn", sh.kind().name()))
                            .spawn(move || serve_conn(stream, sh2));
                        if let Ok(h) = spawned {
                            conns.push(h);
                        }
                    }
                    Err(_) => std::thread::sleep(POLL),
                }
                conns.retain(|h| !h.is_finished());
            }
            drop(listener);
            for h in conns {
                let _ = h.join();
            }
        })
}

fn serve_conn(mut stream: TcpStream, sh: Shared) {
    if stream.set_nonblocking(false).is_err() || stream.set_read_timeout(Some(POLL)).is_err() {
        return;
    }
    let _ = stream.set_nodelay(true);
    let _ = stream.set_write_timeout(Some(Duration::from_secs(1)));
    session(&mut stream, &sh, false);
    let _ = stream.shutdown(std::net::Shutdown::Both);
}
