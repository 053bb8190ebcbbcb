//! Serving the simulated Modbus load and source: RTU frames on a pseudo-terminal master and
//! Modbus TCP on a loopback listener (a thread per connection). A request frame in becomes a
//! response frame out through the pure device in `modbus_map`; the port faults (garbage before
//! a reply, dropped and slow replies, exception replies, a closing port) are applied here. It
//! owns threads and ports only.

use super::modbus_map::ModbusDeviceState;
use super::serve::{lock, PtyPort, Shared};
use crate::protocol::modbus::{
    crc16, mbap_frame, mbap_split, rtu_frame, rtu_request_len, Exception,
};
use crate::sim::instruments::{Fate, GARBAGE};
use std::io::{self, Read, Write};
use std::net::{TcpListener, TcpStream};
use std::sync::atomic::{AtomicU32, Ordering};
use std::sync::{Arc, Mutex};
use std::thread::JoinHandle;
use std::time::{Duration, Instant};

const POLL: Duration = Duration::from_millis(10);
const NO_PEER_WAIT: Duration = Duration::from_millis(20);
/// Bytes kept while waiting for a frame to complete (an RTU frame is at most 256 bytes).
const MAX_PENDING: usize = 512;

/// Everything a Modbus serving thread needs.
#[derive(Clone)]
pub struct ModbusShared {
    pub shared: Shared,
    pub device: Arc<Mutex<ModbusDeviceState>>,
    /// Every Nth request is answered with exception 0x04 (server device failure) instead.
    pub exception_every: Option<u32>,
    pub requests: Arc<AtomicU32>,
}

/// What to send for one request.
struct Answer {
    pdu: Vec<u8>,
    fate: Fate,
    delay: Duration,
    close: bool,
}

fn answer(ms: &ModbusShared, pdu: &[u8]) -> Answer {
    let sh = &ms.shared;
    let snap = lock(&sh.world).sync();
    let mut ep = lock(&sh.endpoint);
    let n = ms.requests.fetch_add(1, Ordering::SeqCst) + 1;
    let function = pdu.first().copied().unwrap_or(0);
    let pdu = if ms.exception_every.is_some_and(|e| e > 0 && n % e == 0) {
        Exception::ServerDeviceFailure.pdu(function)
    } else {
        let mut w = lock(&sh.world);
        lock(&ms.device).respond(pdu, &mut w.controls, &snap)
    };
    let fate = ep.faults.next_reply();
    let close = ep.faults.count_command();
    Answer {
        pdu,
        fate,
        delay: ep.latency + Duration::from_millis(ep.faults.faults.slow_ms),
        close,
    }
}

fn must_end(sh: &Shared) -> bool {
    if sh.stop.load(Ordering::SeqCst) {
        return true;
    }
    let ep = lock(&sh.endpoint);
    if ep.closed.load(Ordering::SeqCst) {
        return true;
    }
    if ep.faults.closed_by_time(sh.started.elapsed().as_secs_f64()) {
        ep.closed.store(true, Ordering::SeqCst);
        return true;
    }
    false
}

/// Wait out a reply's latency in slices; false when the bench is stopping.
fn pause(sh: &Shared, d: Duration) -> bool {
    let end = Instant::now() + d;
    while Instant::now() < end {
        if sh.stop.load(Ordering::SeqCst) {
            return false;
        }
        std::thread::sleep((end - Instant::now()).min(POLL));
    }
    true
}

/// Send one answer's frame (made by `frame`) under its fate; true when the port must close.
fn send<W: Write>(out: &mut W, ms: &ModbusShared, a: &Answer, frame: Vec<u8>) -> bool {
    let bytes = match a.fate {
        Fate::Send => frame,
        Fate::Drop => Vec::new(),
        Fate::GarbageThenSend => {
            let mut b = GARBAGE.as_bytes().to_vec();
            b.extend(frame);
            b
        }
    };
    if !bytes.is_empty() {
        let _ = out.write_all(&bytes).and_then(|_| out.flush());
    }
    if a.close {
        lock(&ms.shared.endpoint)
            .closed
            .store(true, Ordering::SeqCst);
    }
    a.close
}

/// Serve RTU frames on a pseudo-terminal master until stop or close.
pub fn spawn_rtu(mut port: PtyPort, ms: ModbusShared) -> io::Result<JoinHandle<()>> {
    use serialport::SerialPort;
    port.master
        .set_timeout(POLL)
        .map_err(|e| io::Error::other(e.to_string()))?;
    let name = lock(&ms.device).kind.name();
    std::thread::Builder::new()
        .name(format!("sim-{name}-rtu"))
        .spawn(move || {
            rtu_session(&mut port, &ms);
            drop(port);
        })
}

fn rtu_session(port: &mut PtyPort, ms: &ModbusShared) {
    let unit = lock(&ms.device).unit;
    let mut buf: Vec<u8> = Vec::new();
    let mut chunk = [0u8; 512];
    let mut peer = false;
    while !must_end(&ms.shared) {
        match port.master.read(&mut chunk) {
            Ok(0) => {
                peer_left(port, &mut peer, &mut buf);
                continue;
            }
            Ok(n) => {
                peer = true;
                buf.extend_from_slice(&chunk[..n]);
                if buf.len() > MAX_PENDING {
                    buf.clear();
                }
            }
            Err(e)
                if matches!(
                    e.kind(),
                    io::ErrorKind::TimedOut | io::ErrorKind::Interrupted
                ) =>
            {
                peer = true;
                // A silence ends any frame: what is left cannot complete.
                if !buf.is_empty() && rtu_request_len(&buf).is_some_and(|n| n == 0 || buf.len() < n)
                {
                    buf.clear();
                }
                continue;
            }
            Err(_) => {
                peer_left(port, &mut peer, &mut buf);
                continue;
            }
        }
        while let Some(n) = rtu_request_len(&buf) {
            // An unknown function code: the frame is what arrived (address, code, CRC at least).
            let n = if n == 0 { buf.len() } else { n };
            if buf.len() < n || n < 4 {
                break;
            }
            if crc16(&buf[..n]) != 0 {
                // Not a frame here (line noise): resynchronise a byte later.
                buf.remove(0);
                continue;
            }
            let frame: Vec<u8> = buf.drain(..n).collect();
            // Other units' frames are not ours; broadcasts (0) get no reply.
            if frame[0] != unit && frame[0] != 0 {
                continue;
            }
            let a = answer(ms, &frame[1..n - 2]);
            if frame[0] == 0 {
                continue;
            }
            if !pause(&ms.shared, a.delay) {
                return;
            }
            let reply = rtu_frame(unit, &a.pdu);
            if send(&mut port.master, ms, &a, reply) {
                // A hang-up discards what the other side has not read: give it a moment.
                std::thread::sleep(Duration::from_millis(300));
                return;
            }
        }
    }
}

/// The other side of the pseudo-terminal is not open (yet, or any more): bytes it wrote but
/// did not get answered are dropped, and what it did not read is discarded so the next opener
/// does not take it for fresh.
fn peer_left(port: &mut PtyPort, peer: &mut bool, buf: &mut Vec<u8>) {
    use serialport::{ClearBuffer, SerialPort};
    if *peer {
        if let Ok(slave) = serialport::new(port.slave_path.as_str(), 115_200)
            .timeout(POLL)
            .exclusive(false)
            .open_native()
        {
            let _ = slave.clear(ClearBuffer::Input);
        }
    }
    *peer = false;
    buf.clear();
    std::thread::sleep(NO_PEER_WAIT);
}

/// Serve Modbus TCP on a listener until stop or close; each connection gets a thread.
pub fn spawn_tcp(listener: TcpListener, ms: ModbusShared) -> io::Result<JoinHandle<()>> {
    listener.set_nonblocking(true)?;
    let name = lock(&ms.device).kind.name();
    std::thread::Builder::new()
        .name(format!("sim-{name}-mbtcp"))
        .spawn(move || {
            let mut conns: Vec<JoinHandle<()>> = Vec::new();
            while !must_end(&ms.shared) {
                match listener.accept() {
                    Ok((stream, _)) => {
                        let ms2 = ms.clone();
                        if let Ok(h) = std::thread::Builder::new()
                            .name(format!("sim-{name}-mbconn"))
                            .spawn(move || tcp_conn(stream, ms2))
                        {
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

fn tcp_conn(mut stream: TcpStream, ms: ModbusShared) {
    if stream.set_nonblocking(false).is_err() || stream.set_read_timeout(Some(POLL)).is_err() {
        return;
    }
    let _ = stream.set_nodelay(true);
    let _ = stream.set_write_timeout(Some(Duration::from_secs(1)));
    let unit = lock(&ms.device).unit;
    let mut buf: Vec<u8> = Vec::new();
    let mut chunk = [0u8; 512];
    'conn: while !must_end(&ms.shared) {
        match stream.read(&mut chunk) {
            Ok(0) => break,
            Ok(n) => buf.extend_from_slice(&chunk[..n]),
            Err(e)
                if matches!(
                    e.kind(),
                    io::ErrorKind::WouldBlock
                        | io::ErrorKind::TimedOut
                        | io::ErrorKind::Interrupted
                ) =>
            {
                continue
            }
            Err(_) => break,
        }
        loop {
            let (tid, frame_unit, pdu, len) = match mbap_split(&buf) {
                Ok(Some(f)) => (f.transaction, f.unit, f.pdu.to_vec(), f.len),
                Ok(None) => break,
                // Not Modbus TCP: a server drops such a connection.
                Err(_) => break 'conn,
            };
            buf.drain(..len);
            let a = if frame_unit == unit || frame_unit == 0xFF {
                answer(&ms, &pdu)
            } else {
                // No such unit behind this address (as a gateway answers).
                Answer {
                    pdu: Exception::GatewayTargetFailedToRespond
                        .pdu(pdu.first().copied().unwrap_or(0)),
                    fate: Fate::Send,
                    delay: Duration::ZERO,
                    close: false,
                }
            };
            if !pause(&ms.shared, a.delay) {
                break 'conn;
            }
            let reply = mbap_frame(tid, frame_unit, &a.pdu);
            if send(&mut stream, &ms, &a, reply) {
                break 'conn;
            }
        }
    }
    let _ = stream.shutdown(std::net::Shutdown::Both);
}
