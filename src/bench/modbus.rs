//! A Modbus instrument's driver: the register map of its bench file entry, spoken through the
//! tokio-modbus client over the instrument's link (RTU on a serial line, or Modbus TCP). The
//! bench's generic code hands it the command texts its map made (`load_set_current {value}`),
//! and it writes the mapped coil or registers, keeps the gap between frames, retries a lost
//! reply, reports exception responses with their code and meaning, and confirms settings by
//! reading the written objects back. One exchange at a time (one mutex). It must not know
//! about other instruments or the plan.

use super::config::{
    Fixed, Framing, InstrumentConfig, ModbusConfirm, ModbusMap, Payload, RegisterAction,
};
use super::modbus_fault::ModbusFault;
use super::BenchError;
use crate::guardian::{GuardFrame, GuardPayload};
use crate::measure::{Reading, Role};
use crate::protocol::modbus::{Encoding, ObjectKind, WordOrder};
use crate::transport::{BoxTransport, IoCause, TrafficLog};
use std::fmt;
use std::pin::Pin;
use std::sync::{Arc, Mutex as StdMutex};
use std::task::{Context as TaskContext, Poll};
use std::time::Duration;
use tokio::io::{AsyncRead, AsyncWrite, ReadBuf};
use tokio::sync::Mutex;
use tokio::time::Instant;
use tokio_modbus::client::{Client as _, Context};
use tokio_modbus::{Request, Response, Slave};

/// A number's raw bits as the map's `overrange` gives them: one register's 16 bits, or two
/// registers' 32 bits with the word order undone (the high word first).
pub(super) fn raw_bits(encoding: &Encoding, words: &[u16]) -> Option<u32> {
    match (encoding.data_type.words(), words) {
        (1, [w]) => Some(*w as u32),
        (2, [a, b]) => Some(match encoding.word_order {
            WordOrder::HighFirst => (*a as u32) << 16 | *b as u32,
            WordOrder::LowFirst => (*b as u32) << 16 | *a as u32,
        }),
        _ => None,
    }
}

/// The link, shared between the client context in use and the driver (which drains stale
/// bytes and attaches a fresh context after a lost reply). Only one user at a time.
#[derive(Clone)]
pub(super) struct SharedIo(Arc<StdMutex<BoxTransport>>);

impl fmt::Debug for SharedIo {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str("modbus link")
    }
}

impl SharedIo {
    pub(super) fn new(io: BoxTransport) -> SharedIo {
        SharedIo(Arc::new(StdMutex::new(io)))
    }

    fn with<R>(&self, f: impl FnOnce(Pin<&mut BoxTransport>) -> R) -> R {
        let mut g = self.0.lock().unwrap_or_else(|e| e.into_inner());
        f(Pin::new(&mut *g))
    }
}

impl AsyncRead for SharedIo {
    fn poll_read(
        self: Pin<&mut Self>,
        cx: &mut TaskContext<'_>,
        buf: &mut ReadBuf<'_>,
    ) -> Poll<std::io::Result<()>> {
        self.with(|mut io| io.as_mut().poll_read(cx, buf))
    }
}

impl AsyncWrite for SharedIo {
    fn poll_write(
        self: Pin<&mut Self>,
        cx: &mut TaskContext<'_>,
        buf: &[u8],
    ) -> Poll<std::io::Result<usize>> {
        self.with(|mut io| io.as_mut().poll_write(cx, buf))
    }
    fn poll_flush(self: Pin<&mut Self>, cx: &mut TaskContext<'_>) -> Poll<std::io::Result<()>> {
        self.with(|mut io| io.as_mut().poll_flush(cx))
    }
    fn poll_shutdown(self: Pin<&mut Self>, cx: &mut TaskContext<'_>) -> Poll<std::io::Result<()>> {
        self.with(|mut io| io.as_mut().poll_shutdown(cx))
    }
}

/// A written object kept until it is confirmed.
#[derive(Debug, Clone)]
struct Written {
    action: RegisterAction,
    value: Value,
}

#[derive(Debug, Clone, PartialEq)]
enum Value {
    Coil(bool),
    Words(Vec<u16>),
}

impl fmt::Display for Value {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Value::Coil(b) => f.write_str(if *b { "on" } else { "off" }),
            Value::Words(w) => {
                let s: Vec<String> = w.iter().map(|x| format!("0x{x:04X}")).collect();
                write!(f, "[{}]", s.join(", "))
            }
        }
    }
}

/// One request.
#[derive(Debug, Clone)]
enum Op {
    Read {
        object: ObjectKind,
        address: u16,
        count: u16,
    },
    Write {
        address: u16,
        value: Value,
    },
}

impl fmt::Display for Op {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Op::Read {
                object,
                address,
                count,
            } => {
                write!(f, "read {count} {}(s) at {address}", object.name())
            }
            Op::Write {
                address,
                value: Value::Coil(b),
            } => {
                write!(
                    f,
                    "write coil {address} = {}",
                    if *b { "on" } else { "off" }
                )
            }
            Op::Write { address, value } => {
                write!(f, "write holding register(s) {address} = {value}")
            }
        }
    }
}

struct Link {
    ctx: Context,
    last: Option<Instant>,
    pending: Vec<Written>,
}

/// An open Modbus instrument.
pub struct ModbusDevice {
    name: String,
    map: ModbusMap,
    io: SharedIo,
    /// The link's descriptor (serial port or socket), for the guardian.
    raw_fd: Option<i32>,
    reply_timeout: Duration,
    retries: u32,
    log: Option<Arc<TrafficLog>>,
    link: Mutex<Link>,
}

/// For a Modbus instrument, take its link for the driver and give the line code an idle
/// stand-in (never used: every entry point goes to the driver first). Text instruments keep
/// their link.
pub(crate) fn take_link(
    cfg: &InstrumentConfig,
    io: BoxTransport,
    log: Option<Arc<TrafficLog>>,
) -> (BoxTransport, Option<ModbusDevice>) {
    let Some(map) = &cfg.modbus else {
        return (io, None);
    };
    let raw_fd = io.raw_fd();
    let io = SharedIo(Arc::new(StdMutex::new(io)));
    let ctx = attach(map, &io);
    let device = ModbusDevice {
        name: cfg.name.clone(),
        map: map.clone(),
        io,
        raw_fd,
        reply_timeout: cfg.reply_timeout,
        retries: cfg.retries,
        log,
        link: Mutex::new(Link {
            ctx,
            last: None,
            pending: Vec::new(),
        }),
    };
    let (idle, _) = tokio::io::duplex(1);
    (Box::new(idle), Some(device))
}

fn attach(map: &ModbusMap, io: &SharedIo) -> Context {
    match map.framing {
        Framing::Rtu => tokio_modbus::client::rtu::attach_slave(io.clone(), Slave(map.unit)),
        Framing::Tcp => tokio_modbus::client::tcp::attach_slave(io.clone(), Slave(map.unit)),
    }
}

/// What an exchange gave back.
enum Got {
    Bits(Vec<bool>),
    Words(Vec<u16>),
    Done,
}

async fn call(ctx: &mut Context, op: &Op) -> tokio_modbus::Result<Got> {
    let req = match op {
        Op::Read {
            object,
            address,
            count,
        } => match object {
            ObjectKind::Coil => Request::ReadCoils(*address, *count),
            ObjectKind::DiscreteInput => Request::ReadDiscreteInputs(*address, *count),
            ObjectKind::Holding => Request::ReadHoldingRegisters(*address, *count),
            ObjectKind::Input => Request::ReadInputRegisters(*address, *count),
        },
        Op::Write {
            address,
            value: Value::Coil(b),
        } => Request::WriteSingleCoil(*address, *b),
        Op::Write {
            address,
            value: Value::Words(w),
        } if w.len() == 1 => Request::WriteSingleRegister(*address, w[0]),
        Op::Write {
            address,
            value: Value::Words(w),
        } => Request::WriteMultipleRegisters(*address, w.clone().into()),
    };
    Ok(ctx.call(req).await?.map(|r| match r {
        Response::ReadCoils(b) | Response::ReadDiscreteInputs(b) => Got::Bits(b),
        Response::ReadHoldingRegisters(w) | Response::ReadInputRegisters(w) => Got::Words(w),
        _ => Got::Done,
    }))
}

/// The first transaction id of the guardian's Modbus TCP frames (any id will do: nobody reads
/// the replies; these stand out in a capture).
const GUARD_TRANSACTION: u16 = 0xA000;

/// The least silence the guardian keeps before each RTU frame: well above the 3.5 character
/// times of any baud rate (Modbus over Serial Line V1.02 section 2.5.1.1), so a device that
/// tells frames apart with a coarser timer also drops a frame regulus left half-written.
pub const GUARD_RTU_SILENCE: Duration = Duration::from_millis(20);

/// The request that writes an action's payload (`value` for one with a setpoint): a coil by
/// write single coil (0x05), one register by write single register (0x06), more by write
/// multiple registers (0x10): the same requests [`call`] makes through tokio-modbus.
fn write_request(
    action: &RegisterAction,
    value: f64,
) -> Result<crate::protocol::modbus::Request, crate::protocol::modbus::ValueError> {
    use crate::protocol::modbus::Request as R;
    let address = action.address;
    Ok(match &action.payload {
        Payload::Fixed(Fixed::Coil(on)) => R::WriteCoil { address, on: *on },
        Payload::Fixed(Fixed::Word(w)) => R::WriteRegister { address, value: *w },
        Payload::Number { encoding, .. } => {
            let words = encoding.encode(value)?;
            match words.as_slice() {
                [w] => R::WriteRegister { address, value: *w },
                _ => R::WriteRegisters {
                    address,
                    values: words,
                },
            }
        }
    })
}

fn function_of(op: &Op) -> u8 {
    use crate::protocol::modbus as m;
    match op {
        Op::Read { object, .. } => match object {
            ObjectKind::Coil => m::FC_READ_COILS,
            ObjectKind::DiscreteInput => m::FC_READ_DISCRETE_INPUTS,
            ObjectKind::Holding => m::FC_READ_HOLDING_REGISTERS,
            ObjectKind::Input => m::FC_READ_INPUT_REGISTERS,
        },
        Op::Write {
            value: Value::Coil(_),
            ..
        } => m::FC_WRITE_SINGLE_COIL,
        Op::Write {
            value: Value::Words(w),
            ..
        } if w.len() == 1 => m::FC_WRITE_SINGLE_REGISTER,
        Op::Write { .. } => m::FC_WRITE_MULTIPLE_REGISTERS,
    }
}

fn is_closed(e: &std::io::Error) -> bool {
    use std::io::ErrorKind as K;
    matches!(
        e.kind(),
        K::UnexpectedEof
            | K::BrokenPipe
            | K::ConnectionReset
            | K::ConnectionAborted
            | K::NotConnected
    )
}

impl ModbusDevice {
    fn fail(&self, action: &str, fault: ModbusFault) -> BenchError {
        BenchError::Modbus {
            instrument: self.name.clone(),
            action: action.to_string(),
            fault,
        }
    }

    fn note(&self, text: &str) {
        if let Some(l) = &self.log {
            l.note(text);
        }
    }

    /// Throw away bytes that arrived outside an exchange (a late reply, line noise); a closed
    /// link says so.
    async fn drain(&self) -> Result<(), ModbusFault> {
        let mut chunk = [0u8; 256];
        loop {
            let once = std::future::poll_fn(|cx| {
                let mut rb = ReadBuf::new(&mut chunk);
                let r = self.io.with(|io| io.poll_read(cx, &mut rb));
                Poll::Ready(match r {
                    Poll::Ready(Ok(())) => Some(Ok(rb.filled().len())),
                    Poll::Ready(Err(e)) => Some(Err(e)),
                    Poll::Pending => None,
                })
            })
            .await;
            match once {
                None => return Ok(()),
                Some(Ok(0)) => return Err(ModbusFault::Closed),
                Some(Ok(n)) => self.note(&format!(
                    "discarded {n} byte(s) that arrived outside an exchange"
                )),
                Some(Err(e)) if is_closed(&e) => return Err(ModbusFault::Closed),
                // A read error outside an exchange is retried by the exchange itself.
                Some(Err(_)) => return Ok(()),
            }
        }
    }

    /// One request with its reply: frame gap, stale bytes drained, deadline, retries on a lost
    /// or mismatched reply (a fresh client afterwards, so a late reply cannot pass for the
    /// next one's). Exceptions are not retried.
    async fn exchange(&self, link: &mut Link, op: &Op) -> Result<Got, ModbusFault> {
        let mut last = ModbusFault::NoReply {
            ms: self.reply_timeout.as_millis(),
            unit: self.map.unit,
        };
        for attempt in 0..=self.retries {
            if attempt > 0 {
                self.note(&format!("retry {attempt} of '{op}'"));
            }
            if let Some(t) = link.last {
                let due = t + self.map.frame_gap;
                if Instant::now() < due {
                    tokio::time::sleep_until(due).await;
                }
            }
            self.drain().await?;
            if let Some(l) = &self.log {
                l.line(true, &format!("unit {} {op}", self.map.unit));
            }
            let r = tokio::time::timeout(self.reply_timeout, call(&mut link.ctx, op)).await;
            link.last = Some(Instant::now());
            let fault = match r {
                Ok(Ok(Ok(got))) => {
                    if let Some(l) = &self.log {
                        l.line(
                            false,
                            &match &got {
                                Got::Bits(b) => format!("{b:?}"),
                                Got::Words(w) => format!("{}", Value::Words(w.clone())),
                                Got::Done => "done".to_string(),
                            },
                        );
                    }
                    return Ok(got);
                }
                Ok(Ok(Err(code))) => {
                    let fault = ModbusFault::Exception {
                        function: function_of(op),
                        code: u8::from(code),
                        unit: self.map.unit,
                    };
                    self.note(&fault.to_string());
                    return Err(fault);
                }
                Ok(Err(tokio_modbus::Error::Transport(e))) if is_closed(&e) => {
                    return Err(ModbusFault::Closed)
                }
                Ok(Err(tokio_modbus::Error::Transport(e))) => match e.kind() {
                    std::io::ErrorKind::TimedOut => ModbusFault::NoReply {
                        ms: self.reply_timeout.as_millis(),
                        unit: self.map.unit,
                    },
                    // A garbled frame (e.g. a TCP header that is not Modbus): start over.
                    std::io::ErrorKind::InvalidData => {
                        ModbusFault::Mismatch(format!("garbled reply: {e}"))
                    }
                    _ => return Err(ModbusFault::Io(IoCause::new(e))),
                },
                Ok(Err(tokio_modbus::Error::Protocol(p))) => ModbusFault::Mismatch(p.to_string()),
                Err(_) => ModbusFault::NoReply {
                    ms: self.reply_timeout.as_millis(),
                    unit: self.map.unit,
                },
            };
            self.note(&fault.to_string());
            // The request may still be answered late: start over with a fresh client.
            link.ctx = attach(&self.map, &self.io);
            last = fault;
        }
        Err(last)
    }

    fn action(&self, text: &str) -> Result<&RegisterAction, BenchError> {
        self.map
            .action_for(text)
            .ok_or_else(|| BenchError::Command {
                instrument: self.name.clone(),
                detail: format!("'{text}' is not in the register map"),
            })
    }

    /// Write what a command stands for (`value` for commands with a setpoint).
    pub async fn send(&self, text: &str, value: f64) -> Result<(), BenchError> {
        let action = self.action(text)?.clone();
        let desc = action.to_string();
        let v = match &action.payload {
            Payload::Fixed(Fixed::Coil(b)) => Value::Coil(*b),
            Payload::Fixed(Fixed::Word(w)) => Value::Words(vec![*w]),
            Payload::Number { encoding, .. } => Value::Words(
                encoding
                    .encode(value)
                    .map_err(|e| self.fail(&desc, ModbusFault::Value(e)))?,
            ),
        };
        let mut link = self.link.lock().await;
        let op = Op::Write {
            address: action.address,
            value: v.clone(),
        };
        let r = self.exchange(&mut link, &op).await;
        // Written or not, the device may have acted on it: it is confirmed (or refused) next.
        link.pending.push(Written { action, value: v });
        r.map(|_| ()).map_err(|f| self.fail(&desc, f))
    }

    /// Send fixed-value commands in order (init sequences).
    pub async fn send_all(&self, lines: &[String]) -> Result<(), BenchError> {
        for l in lines {
            self.send(l, 0.0).await?;
        }
        self.confirm().await
    }

    /// Confirm the settings written since the last confirmation: read each back and compare
    /// (unless the map trusts the write responses). A mismatch is an error: the caller stops
    /// and makes the bench safe.
    pub async fn confirm(&self) -> Result<(), BenchError> {
        let mut link = self.link.lock().await;
        let pending = std::mem::take(&mut link.pending);
        if self.map.confirm == ModbusConfirm::WriteResponse {
            return Ok(());
        }
        for w in pending {
            let desc = w.action.to_string();
            let op = Op::Read {
                object: w.action.object,
                address: w.action.address,
                count: w.action.count(),
            };
            let got = self
                .exchange(&mut link, &op)
                .await
                .map_err(|f| self.fail(&format!("read-back of {desc}"), f))?;
            let read = match got {
                Got::Bits(b) => Value::Coil(b.first().copied().unwrap_or(false)),
                Got::Words(words) => Value::Words(words),
                Got::Done => Value::Words(Vec::new()),
            };
            if read != w.value {
                return Err(self.fail(
                    &format!("read-back of {desc}"),
                    ModbusFault::ReadBack {
                        wrote: w.value.to_string(),
                        read: read.to_string(),
                    },
                ));
            }
        }
        Ok(())
    }

    /// Read one measuring role.
    pub async fn read(&self, role: Role) -> Result<Reading, BenchError> {
        let key = super::config::CommandKey::measuring(role);
        let Some(action) = key.and_then(|k| self.map.actions.get(&k)).cloned() else {
            return Err(BenchError::Command {
                instrument: self.name.clone(),
                detail: format!("no register for role '{role}' in the register map"),
            });
        };
        let desc = action.to_string();
        let Payload::Number {
            encoding,
            overrange,
            overrange_flag,
            ..
        } = &action.payload
        else {
            return Err(BenchError::Command {
                instrument: self.name.clone(),
                detail: format!("{desc} holds no number"),
            });
        };
        let op = Op::Read {
            object: action.object,
            address: action.address,
            count: action.count(),
        };
        let mut link = self.link.lock().await;
        let got = self
            .exchange(&mut link, &op)
            .await
            .map_err(|f| self.fail(&desc, f))?;
        let Got::Words(words) = got else {
            return Err(self.fail(
                &desc,
                ModbusFault::Mismatch("no registers in the reply".into()),
            ));
        };
        if raw_bits(encoding, &words).is_some_and(|r| overrange.contains(&r)) {
            return Ok(Reading::Overrange);
        }
        if let Some(f) = overrange_flag {
            let op = Op::Read {
                object: f.object,
                address: f.address,
                count: 1,
            };
            let got = self
                .exchange(&mut link, &op)
                .await
                .map_err(|e| self.fail(&desc, e))?;
            let set = match (got, f.bit) {
                (Got::Bits(b), _) => b.first().copied().unwrap_or(false),
                (Got::Words(w), Some(bit)) => w.first().is_some_and(|w| w >> bit & 1 == 1),
                _ => {
                    return Err(self.fail(
                        &desc,
                        ModbusFault::Mismatch("no over-range flag in the reply".into()),
                    ))
                }
            };
            if set {
                return Ok(Reading::Overrange);
            }
        }
        let v = encoding
            .decode(&words)
            .map_err(|e| self.fail(&desc, ModbusFault::Value(e)))?;
        Ok(Reading::Value(v))
    }

    /// The identity text (two ASCII characters per register, high byte first), for the
    /// identity query the map's checks set; nothing else can be asked of a register map.
    pub async fn query(&self, q: &str) -> Result<String, BenchError> {
        let Some(id) = self.map.identity.filter(|_| q == ModbusMap::IDENTITY_QUERY) else {
            return Err(BenchError::Command {
                instrument: self.name.clone(),
                detail: format!("'{q}' cannot be asked of a Modbus instrument (it has a register map, not text queries)"),
            });
        };
        let op = Op::Read {
            object: id.object,
            address: id.address,
            count: id.words,
        };
        let mut link = self.link.lock().await;
        let got = self
            .exchange(&mut link, &op)
            .await
            .map_err(|f| self.fail("identity registers", f))?;
        let Got::Words(words) = got else {
            return Ok(String::new());
        };
        let bytes: Vec<u8> = words.iter().flat_map(|w| w.to_be_bytes()).collect();
        let text: String = String::from_utf8_lossy(&bytes)
            .chars()
            .filter(|c| !c.is_control())
            .collect();
        Ok(text.trim().to_string())
    }

    /// The link's descriptor (serial port or socket), when it has one: the guardian holds a
    /// duplicate of it.
    pub fn raw_fd(&self) -> Option<i32> {
        self.raw_fd
    }

    /// What the guardian writes to make this instrument safe: the requests
    /// [`ModbusDevice::safe_state`] sends for `lines` (each command of the register map, a
    /// setpoint as 0), as whole ADUs for the configured unit id: RTU frames with their CRC, or
    /// Modbus TCP frames with their MBAP header. A line the map does not hold is left out
    /// (the bench file's checks refuse such lines). The silence before each frame is the
    /// map's frame gap; on RTU at least [`GUARD_RTU_SILENCE`], so a frame regulus left
    /// half-written ends before the first one.
    pub fn guard_payload(&self, lines: &[String]) -> GuardPayload {
        let mut frames = Vec::with_capacity(lines.len());
        for (i, l) in lines.iter().enumerate() {
            let Some(action) = self.map.action_for(l) else {
                continue;
            };
            let Ok(request) = write_request(action, 0.0) else {
                continue;
            };
            let bytes = match self.map.framing {
                Framing::Rtu => request.rtu_adu(self.map.unit),
                Framing::Tcp => request.tcp_adu(GUARD_TRANSACTION + i as u16, self.map.unit),
            };
            frames.push(GuardFrame {
                what: action.to_string(),
                bytes,
            });
        }
        let gap = match self.map.framing {
            Framing::Rtu => self.map.frame_gap.max(GUARD_RTU_SILENCE),
            Framing::Tcp => self.map.frame_gap,
        };
        GuardPayload::Frames {
            gap_us: gap.as_micros() as u64,
            frames,
        }
    }

    /// Run the safe-state commands, each tried even when one fails, then read them back; a
    /// closed link is reported, so the user checks by hand.
    pub async fn safe_state(&self, lines: &[String]) -> Vec<BenchError> {
        let mut errors = Vec::new();
        {
            // Settings not yet confirmed no longer matter: the safe state replaces them.
            self.link.lock().await.pending.clear();
        }
        for l in lines {
            if let Err(e) = self.send(l, 0.0).await {
                errors.push(e);
            }
        }
        if errors.is_empty() {
            if let Err(e) = self.confirm().await {
                errors.push(e);
            }
        } else {
            self.link.lock().await.pending.clear();
        }
        errors
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::bench::BenchConfig;
    use tokio::io::AsyncReadExt;

    const BENCH: &str = r#"[[instrument]]
name = "eload"
roles = ["load"]
serial = { port = "/dev/ttyUSB0", baud = 9600 }
safe_state = ["load_input_off", "load_mode_cc"]

[instrument.modbus]
unit = 3

[instrument.modbus.registers]
load_mode_cc = { object = "holding", address = 0, value = 0 }
load_set_current = { object = "holding", address = 0x10, type = "f32", unit = "A" }
load_input_on = { object = "coil", address = 1, value = true }
load_input_off = { object = "coil", address = 1, value = false }

[[instrument]]
name = "psu"
roles = ["input_source"]
tcp = { host = "127.0.0.1", port = 1502 }

[instrument.modbus]
unit = 9

[instrument.modbus.registers]
source_set_voltage = { object = "holding", address = 0x20, type = "u32", unit = "mV" }
source_output_on = { object = "holding", address = 0x30, value = 1 }
source_output_off = { object = "holding", address = 0x30, value = 0 }
"#;

    /// What tokio-modbus's client (an independent implementation of the same specifications)
    /// writes for `req` over `framing` to unit `unit`.
    async fn reference_bytes(framing: Framing, unit: u8, req: Request<'static>) -> Vec<u8> {
        let (ours, mut theirs) = tokio::io::duplex(1024);
        let mut ctx = match framing {
            Framing::Rtu => tokio_modbus::client::rtu::attach_slave(ours, Slave(unit)),
            Framing::Tcp => tokio_modbus::client::tcp::attach_slave(ours, Slave(unit)),
        };
        // No server answers: the request is on the wire once the call is waiting.
        let _ = tokio::time::timeout(Duration::from_millis(50), ctx.call(req)).await;
        let mut buf = vec![0u8; 1024];
        let n = theirs.read(&mut buf).await.unwrap();
        buf.truncate(n);
        buf
    }

    fn frames(p: &GuardPayload) -> (u64, Vec<(String, Vec<u8>)>) {
        match p {
            GuardPayload::Frames { gap_us, frames } => (
                *gap_us,
                frames
                    .iter()
                    .map(|f| (f.what.clone(), f.bytes.clone()))
                    .collect(),
            ),
            other => panic!("expected frames, got {other:?}"),
        }
    }

    // The guardian's frames are the bytes tokio-modbus's client sends for the same writes
    // (write single coil 0x05 and write single register 0x06, V1.1b3 sections 6.5 and 6.6),
    // in RTU framing with the CRC and in Modbus TCP framing (its transaction id aside: any id
    // will do), for the configured unit ids; on RTU the silence is at least the guard's.
    #[test]
    fn guard_frames_are_the_bytes_a_modbus_client_writes() {
        let cfg = BenchConfig::parse(BENCH, "b.toml").unwrap_or_else(|e| panic!("{e}"));
        let rt = tokio::runtime::Builder::new_current_thread()
            .enable_all()
            .build()
            .unwrap();
        rt.block_on(async {
            let (_, load) = take_link(&cfg.instruments[0], Box::new(tokio::io::duplex(1).0), None);
            let load = load.expect("a Modbus instrument");
            let (gap, got) = frames(&load.guard_payload(&[
                "load_input_off".to_string(),
                "load_mode_cc".to_string(),
                "no_such_command".to_string(),
            ]));
            assert_eq!(gap, GUARD_RTU_SILENCE.as_micros() as u64);
            assert_eq!(got.len(), 2, "{got:?}");
            assert!(got[0].0.starts_with("load_input_off"), "{got:?}");
            assert_eq!(
                got[0].1,
                reference_bytes(Framing::Rtu, 3, Request::WriteSingleCoil(1, false)).await
            );
            assert_eq!(
                got[1].1,
                reference_bytes(Framing::Rtu, 3, Request::WriteSingleRegister(0, 0)).await
            );

            let (_, psu) = take_link(&cfg.instruments[1], Box::new(tokio::io::duplex(1).0), None);
            let psu = psu.expect("a Modbus instrument");
            let (gap, got) = frames(&psu.guard_payload(&["source_output_off".to_string()]));
            assert_eq!(gap, 0, "no silence between Modbus TCP frames by default");
            let reference =
                reference_bytes(Framing::Tcp, 9, Request::WriteSingleRegister(0x30, 0)).await;
            assert_eq!(got.len(), 1);
            assert_eq!(got[0].1.len(), reference.len());
            assert_eq!(got[0].1[2..], reference[2..], "{:02X?}", got[0].1);
        });
    }

    // A setpoint in a safe-state line is written as 0, as the driver's own safe state does;
    // two registers go by write multiple registers (0x10, V1.1b3 section 6.12).
    #[test]
    fn a_setpoint_line_is_written_as_zero() {
        let cfg = BenchConfig::parse(BENCH, "b.toml").unwrap_or_else(|e| panic!("{e}"));
        let map = cfg.instruments[1].modbus.as_ref().unwrap();
        let action = map.action_for("source_set_voltage {value}").unwrap();
        let r = write_request(action, 0.0).unwrap();
        assert_eq!(
            r,
            crate::protocol::modbus::Request::WriteRegisters {
                address: 0x20,
                values: vec![0, 0]
            }
        );
    }
}

#[cfg(test)]
mod raw_bits_tests {
    use super::*;
    use crate::protocol::modbus::DataType;

    // Word order as in the map's `word_order` (high_first: the high 16 bits at the lower
    // address, the Modbus V1.1b3 big-endian convention; low_first swaps the words).
    #[test]
    fn raw_bits_undo_the_word_order() {
        let e16 = Encoding::new(DataType::I16, WordOrder::HighFirst, 1.0);
        assert_eq!(raw_bits(&e16, &[0x7FFF]), Some(0x7FFF));
        let hi = Encoding::new(DataType::U32, WordOrder::HighFirst, 1.0);
        let lo = Encoding::new(DataType::U32, WordOrder::LowFirst, 1.0);
        assert_eq!(raw_bits(&hi, &[0x1234, 0x5678]), Some(0x1234_5678));
        assert_eq!(raw_bits(&lo, &[0x5678, 0x1234]), Some(0x1234_5678));
        assert_eq!(raw_bits(&hi, &[0x1234]), None);
    }
}
