//! One open instrument: its port (one mutex, so never two commands in flight), the exchange
//! discipline that keeps the link in step (a reply later than its deadline is never taken as
//! the answer to a later query: after any unfinished exchange the link is brought back in step
//! first), retries, command gaps, acknowledgements, init / identity / safe-state sequences and
//! the traffic log. Settings (`lockstep.rs`) and readings (`reading.rs`) build on the
//! exchanges here. Knows nothing of other instruments.

use super::config::{InstrumentConfig, LinkConfig, ReadingStyle};
use super::{BenchError, IoCause};
use crate::transport::{
    open_serial, open_tcp, BoxTransport, LineReader, LineWriter, LinkError, OpenError, TrafficLog,
};
use std::collections::VecDeque;
use std::sync::atomic::{AtomicU32, Ordering};
use std::sync::{Arc, Mutex as StdMutex};
use std::time::Duration;
use tokio::io::{ReadHalf, WriteHalf};
use tokio::sync::{Mutex, Notify};
use tokio::task::JoinHandle;
use tokio::time::Instant;

pub(super) type Reader = LineReader<ReadHalf<BoxTransport>>;
type Writer = LineWriter<WriteHalf<BoxTransport>>;

/// Lines kept from a streaming instrument (older ones are dropped first).
const STREAM_KEEP: usize = 2048;

/// How many reply deadlines a resynchronising identity query may wait: a slow instrument
/// works through the commands queued before it first.
const SYNC_DEADLINES: u32 = 4;

/// Lines received from a streaming instrument, with their arrival times.
#[derive(Default)]
pub(super) struct StreamState {
    pub lines: VecDeque<(Instant, String)>,
    pub ended: Option<LinkError>,
    /// When the bench last changed a setting (load, source): lines that arrived before it
    /// describe the old operating point and never count towards a later reading.
    pub fresh_after: Option<Instant>,
}

pub(super) struct Stream {
    pub state: StdMutex<StreamState>,
    pub notify: Notify,
}

pub(super) struct Port {
    writer: Writer,
    /// `None` for a streaming instrument (its background task owns the reader). Never taken
    /// out: a cancelled exchange leaves it in place.
    pub reader: Option<Reader>,
    last_write: Option<Instant>,
    /// An exchange that expects a reply did not finish (deadline passed, cancelled, or an
    /// unexpected line): its reply may still arrive, so the link is resynchronised before
    /// the next exchange.
    pub unsynced: bool,
}

/// An instrument with an open link.
pub struct Instrument {
    pub(crate) cfg: InstrumentConfig,
    pub(super) port: Mutex<Port>,
    pub(super) stream: Option<Arc<Stream>>,
    stream_task: Option<JoinHandle<()>>,
    pub(super) log: Option<Arc<TrafficLog>>,
    identity: StdMutex<Option<String>>,
    /// The driver of a Modbus instrument (see `modbus`); `None` for text instruments.
    modbus: Option<super::modbus::ModbusDevice>,
    /// The link's descriptor, when it has one (for the guardian).
    raw_fd: Option<i32>,
    /// Retries and resynchronisations since [`Instrument::take_retries`] was last called.
    retries: AtomicU32,
}

impl Drop for Instrument {
    fn drop(&mut self) {
        if let Some(t) = &self.stream_task {
            t.abort();
        }
    }
}

/// Connect a link as the bench file describes it.
pub async fn connect(cfg: &InstrumentConfig) -> Result<BoxTransport, BenchError> {
    let instrument = cfg.name.clone();
    match &cfg.link {
        LinkConfig::Serial(s) => open_serial(s).map_err(|e| {
            let port = s.port.clone();
            match e {
                OpenError::Missing => BenchError::PortMissing { instrument, port },
                OpenError::PermissionDenied => BenchError::PermissionDenied { instrument, port },
                OpenError::Busy => BenchError::PortBusy { instrument, port },
                error => BenchError::Open {
                    instrument,
                    link: cfg.link.describe(),
                    error,
                },
            }
        }),
        LinkConfig::UsbTmc(u) => crate::transport::open_usbtmc(&u.path, cfg.reply_timeout).map_err(|e| {
            let error = match e {
                OpenError::PermissionDenied => {
                    OpenError::Other(crate::transport::permission_help(&u.path))
                }
                OpenError::Missing => OpenError::Other(format!(
                    "no such device node {}; check that the instrument is on and plugged in, and that the usbtmc driver is loaded (lsmod | grep usbtmc)",
                    u.path
                )),
                e => e,
            };
            BenchError::Open {
                instrument,
                link: cfg.link.describe(),
                error,
            }
        }),
        LinkConfig::Tcp(t) => open_tcp(t).await.map_err(|e| {
            let addr = format!("{}:{}", t.host, t.port);
            match e {
                OpenError::Refused => BenchError::ConnectionRefused { instrument, addr },
                OpenError::Timeout => BenchError::ConnectTimeout {
                    instrument,
                    addr,
                    ms: t.connect_timeout.as_millis(),
                },
                error => BenchError::Open {
                    instrument,
                    link: cfg.link.describe(),
                    error,
                },
            }
        }),
    }
}

fn spawn_stream_reader(
    mut rd: Reader,
    s: Arc<Stream>,
    log: Option<Arc<TrafficLog>>,
) -> JoinHandle<()> {
    tokio::spawn(async move {
        loop {
            let far = Instant::now() + Duration::from_secs(3600);
            match rd.read_line(far).await {
                Ok(line) => {
                    if let Some(l) = &log {
                        l.line(false, &line);
                    }
                    if let Ok(mut st) = s.state.lock() {
                        if st.lines.len() >= STREAM_KEEP {
                            st.lines.pop_front();
                        }
                        st.lines.push_back((Instant::now(), line));
                    }
                    s.notify.notify_waiters();
                }
                Err(LinkError::Timeout) => continue,
                Err(e) => {
                    if let Ok(mut st) = s.state.lock() {
                        st.ended = Some(e);
                    }
                    s.notify.notify_waiters();
                    return;
                }
            }
        }
    })
}

impl Instrument {
    /// Wrap an open transport; starts the background reader of a streaming instrument.
    /// Must be called inside a tokio runtime.
    pub fn new(cfg: InstrumentConfig, io: BoxTransport) -> Result<Instrument, BenchError> {
        let log = match &cfg.traffic_log {
            None => None,
            Some(p) => Some(Arc::new(TrafficLog::open(p).map_err(|e| {
                BenchError::TrafficLog {
                    instrument: cfg.name.clone(),
                    path: p.clone(),
                    error: IoCause::new(e),
                }
            })?)),
        };
        let (io, modbus) = super::modbus::take_link(&cfg, io, log.clone());
        // A Modbus instrument's link is the driver's; the line code holds a stand-in.
        let raw_fd = match &modbus {
            Some(m) => m.raw_fd(),
            None => io.raw_fd(),
        };
        let (r, w) = tokio::io::split(io);
        let mut reader = Some(LineReader::new(r, &cfg.read_terminator));
        let writer = LineWriter::new(w, &cfg.write_terminator);
        let (stream, stream_task) = match (&cfg.reading, reader.take()) {
            (ReadingStyle::Stream { .. }, Some(rd)) => {
                let s = Arc::new(Stream {
                    state: StdMutex::new(StreamState::default()),
                    notify: Notify::new(),
                });
                let task = spawn_stream_reader(rd, Arc::clone(&s), log.clone());
                (Some(s), Some(task))
            }
            (_, rd) => {
                reader = rd;
                (None, None)
            }
        };
        Ok(Instrument {
            cfg,
            port: Mutex::new(Port {
                writer,
                reader,
                last_write: None,
                unsynced: false,
            }),
            stream,
            stream_task,
            log,
            identity: StdMutex::new(None),
            modbus,
            raw_fd,
            retries: AtomicU32::new(0),
        })
    }

    /// The Modbus driver, for a Modbus instrument.
    pub(super) fn modbus(&self) -> Option<&super::modbus::ModbusDevice> {
        self.modbus.as_ref()
    }

    pub fn name(&self) -> &str {
        &self.cfg.name
    }

    pub fn config(&self) -> &InstrumentConfig {
        &self.cfg
    }

    /// The link's descriptor, when it has one.
    pub fn raw_fd(&self) -> Option<i32> {
        self.raw_fd
    }

    /// The identity reply, if it was queried.
    pub fn identity(&self) -> Option<String> {
        self.identity.lock().ok().and_then(|g| g.clone())
    }

    /// How many retries and resynchronisations happened since the last call (readings taken
    /// after one are flagged in the record).
    pub fn take_retries(&self) -> u32 {
        self.retries.swap(0, Ordering::SeqCst)
    }

    pub(super) fn note_retry(&self, what: &str) {
        self.retries.fetch_add(1, Ordering::SeqCst);
        self.note(what);
    }

    pub(super) fn note(&self, what: &str) {
        if let Some(l) = &self.log {
            l.note(what);
        }
    }

    pub(super) fn err(&self, command: &str, e: LinkError) -> BenchError {
        let instrument = self.cfg.name.clone();
        let command = command.to_string();
        match e {
            LinkError::Timeout => BenchError::NoReply {
                instrument,
                command,
                ms: self.cfg.reply_timeout.as_millis(),
            },
            LinkError::Closed => BenchError::Closed {
                instrument,
                command,
            },
            error @ (LinkError::Io(_) | LinkError::WriteTimeout { .. } | LinkError::Poisoned) => {
                BenchError::Io {
                    instrument,
                    command,
                    error,
                }
            }
        }
    }

    /// Write one line, keeping the command gap and the traffic log; the link's own error.
    pub(super) async fn write_locked(&self, port: &mut Port, line: &str) -> Result<(), LinkError> {
        if let Some(last) = port.last_write {
            let due = last + self.cfg.command_gap;
            if !self.cfg.command_gap.is_zero() && Instant::now() < due {
                tokio::time::sleep_until(due).await;
            }
        }
        if let Some(l) = &self.log {
            l.line(true, line);
        }
        let r = port
            .writer
            .write_line(line, self.cfg.reply_timeout.max(Duration::from_millis(500)))
            .await;
        port.last_write = Some(Instant::now());
        r
    }

    /// Discard what has already arrived (logged as discarded).
    pub(super) async fn drain(&self, port: &mut Port) -> Result<(), LinkError> {
        let Some(reader) = port.reader.as_mut() else {
            return Ok(());
        };
        let stale = reader.drain().await?;
        if let Some(l) = &self.log {
            for s in &stale {
                l.line(false, s);
                l.note("discarded: arrived before the query");
            }
        }
        Ok(())
    }

    /// The next non-empty reply line to `sent` before `deadline`; a line equal to the
    /// instrument's identity (a late answer to a resynchronising query) is never a reply to
    /// anything but the identity query.
    pub(super) async fn next_line(
        &self,
        port: &mut Port,
        sent: &str,
        deadline: Instant,
    ) -> Result<String, LinkError> {
        let id = self
            .identity()
            .filter(|_| self.cfg.identity_query.as_deref() != Some(sent));
        let reader = port.reader.as_mut().ok_or(LinkError::Closed)?;
        loop {
            let line = reader.read_line(deadline).await?;
            if let Some(l) = &self.log {
                l.line(false, &line);
            }
            let t = line.trim();
            if t.is_empty() {
                continue;
            }
            if id.as_deref().is_some_and(|i| i == t) {
                self.note("discarded: a late identity reply");
                continue;
            }
            return Ok(t.to_string());
        }
    }

    /// Make sure no reply of an unfinished exchange can be taken for a later one: send the
    /// identity query and discard every line until its reply (the instrument answers in
    /// order, so everything late arrives before it). Without an identity query, wait for a
    /// quiet reply deadline instead.
    pub(super) async fn resync(&self, port: &mut Port) -> Result<(), BenchError> {
        if !port.unsynced || port.reader.is_none() {
            return Ok(());
        }
        self.note_retry("resynchronising: a reply may still be on its way");
        let timeout = self.cfg.reply_timeout;
        let Some(q) = self.cfg.identity_query.clone() else {
            let end = Instant::now() + timeout * SYNC_DEADLINES;
            let reader = port
                .reader
                .as_mut()
                .ok_or_else(|| self.err("", LinkError::Closed))?;
            loop {
                match reader.read_line(Instant::now() + timeout).await {
                    Ok(line) => {
                        if let Some(l) = &self.log {
                            l.line(false, &line);
                            l.note("discarded: late");
                        }
                        if Instant::now() > end {
                            return Err(BenchError::OutOfSync {
                                instrument: self.cfg.name.clone(),
                                query: "(quiet link)".into(),
                                ms: (timeout * SYNC_DEADLINES).as_millis(),
                            });
                        }
                    }
                    Err(LinkError::Timeout) => {
                        port.unsynced = false;
                        return Ok(());
                    }
                    Err(e) => return Err(self.err("(waiting for a quiet link)", e)),
                }
            }
        };
        let id = self.identity();
        for _ in 0..=self.cfg.retries {
            self.write_locked(port, &q)
                .await
                .map_err(|e| self.err(&q, e))?;
            let deadline = Instant::now() + timeout * SYNC_DEADLINES;
            let reader = port
                .reader
                .as_mut()
                .ok_or_else(|| self.err(&q, LinkError::Closed))?;
            loop {
                match reader.read_line(deadline).await {
                    Ok(line) => {
                        if let Some(l) = &self.log {
                            l.line(false, &line);
                        }
                        let t = line.trim();
                        let is_id = match &id {
                            Some(i) => i == t,
                            None => crate::protocol::parse_identity(t).is_some(),
                        };
                        if is_id {
                            port.unsynced = false;
                            return Ok(());
                        }
                        self.note("discarded: late");
                    }
                    Err(LinkError::Timeout) => break,
                    Err(e) => return Err(self.err(&q, e)),
                }
            }
        }
        Err(BenchError::OutOfSync {
            instrument: self.cfg.name.clone(),
            query: q,
            ms: (timeout * SYNC_DEADLINES).as_millis(),
        })
    }

    /// Send one command that is not a query. An acknowledging instrument answers it: an
    /// error reply is a refusal, any other line than a success reply puts the link out of
    /// step.
    pub(super) async fn command_locked(
        &self,
        port: &mut Port,
        line: &str,
    ) -> Result<(), BenchError> {
        let Some(ack) = self.cfg.lockstep.acknowledge.clone() else {
            return self
                .write_locked(port, line)
                .await
                .map_err(|e| self.err(line, e));
        };
        self.resync(port).await?;
        self.drain(port).await.map_err(|e| self.err(line, e))?;
        self.write_locked(port, line)
            .await
            .map_err(|e| self.err(line, e))?;
        port.unsynced = true;
        let deadline = Instant::now() + self.cfg.reply_timeout;
        let reply = self
            .next_line(port, line, deadline)
            .await
            .map_err(|e| self.err(line, e))?;
        if ack.error.is_match(&reply) {
            port.unsynced = false;
            return Err(BenchError::Refused {
                instrument: self.cfg.name.clone(),
                command: line.to_string(),
                raw: reply,
            });
        }
        if ack.success.is_match(&reply) {
            port.unsynced = false;
            return Ok(());
        }
        Err(BenchError::UnexpectedReply {
            instrument: self.cfg.name.clone(),
            command: line.to_string(),
            raw: reply,
            expected: format!("an acknowledgement matching {:?}", ack.success.as_str()),
        })
    }

    /// Send a query and return its first reply line, in step (resynchronised first when an
    /// earlier exchange did not finish). The link stays marked out of step until the caller
    /// accepts the reply with [`Port::unsynced`] = false, or on a timeout.
    pub(super) async fn query_locked(&self, port: &mut Port, q: &str) -> Result<String, LinkError> {
        self.drain(port).await?;
        self.write_locked(port, q).await?;
        port.unsynced = true;
        let deadline = Instant::now() + self.cfg.reply_timeout;
        self.next_line(port, q, deadline).await
    }

    /// Send commands, in order (acknowledged ones answered).
    pub async fn send_all(&self, lines: &[String]) -> Result<(), BenchError> {
        if let Some(m) = &self.modbus {
            return m.send_all(lines).await;
        }
        let mut port = self.port.lock().await;
        for l in lines {
            self.command_locked(&mut port, l).await?;
        }
        Ok(())
    }

    /// Send the init sequence, then the identity query (keeping its reply).
    pub async fn initialise(&self) -> Result<(), BenchError> {
        self.send_all(&self.cfg.init.clone()).await?;
        if let Some(q) = self.cfg.identity_query.clone() {
            let id = self.raw_query(&q).await?;
            if let Ok(mut g) = self.identity.lock() {
                *g = Some(id);
            }
        }
        Ok(())
    }

    /// Send a query and return its first non-empty reply line as text (identity and such).
    /// On a streaming instrument, the first line after sending that is not a stream line.
    pub async fn raw_query(&self, q: &str) -> Result<String, BenchError> {
        if let Some(m) = &self.modbus {
            return m.query(q).await;
        }
        if let Some(stream) = &self.stream {
            return self.stream_query(stream, q).await;
        }
        let mut last = self.err(q, LinkError::Timeout);
        let mut port = self.port.lock().await;
        for attempt in 0..=self.cfg.retries {
            if attempt > 0 {
                self.note_retry(&format!("retry {attempt} of '{q}'"));
            }
            self.resync(&mut port).await?;
            match self.query_locked(&mut port, q).await {
                Ok(s) => {
                    port.unsynced = false;
                    return Ok(s);
                }
                Err(
                    e @ (LinkError::Closed | LinkError::Io(_) | LinkError::WriteTimeout { .. }),
                ) => return Err(self.err(q, e)),
                Err(e) => last = self.err(q, e),
            }
        }
        Err(last)
    }

    /// The bench changed a setting at `at`: a streaming instrument's lines from before it no
    /// longer describe the unit. Does nothing for query instruments.
    pub fn setting_changed(&self, at: Instant) {
        if let Some(stream) = &self.stream {
            if let Ok(mut st) = stream.state.lock() {
                st.fresh_after = Some(at);
            }
        }
    }

    /// Send a command sequence (safe state, limits); every command is tried even when one
    /// fails. A link known to be closed cannot have delivered it: that is reported too.
    pub async fn send_sequence(&self, cmds: &[String], what: &str) -> Vec<BenchError> {
        let mut errors = Vec::new();
        if cmds.is_empty() {
            return errors;
        }
        if let Some(m) = &self.modbus {
            if let Err(e) = m.send_all(cmds).await {
                errors.push(e);
            }
            return errors;
        }
        let mut port = self.port.lock().await;
        for c in cmds {
            if let Err(e) = self.command_locked(&mut port, c).await {
                errors.push(e);
            }
        }
        let reader_closed = port.reader.as_ref().is_some_and(|r| r.is_closed());
        let stream_ended = self
            .stream
            .as_ref()
            .and_then(|s| s.state.lock().ok().map(|st| st.ended.is_some()))
            .unwrap_or(false);
        if errors.is_empty() && (reader_closed || stream_ended) {
            errors.push(BenchError::Closed {
                instrument: self.cfg.name.clone(),
                command: format!(
                    "{what} {}; make sure by hand that it is safe",
                    cmds.join(" / ")
                ),
            });
        }
        errors
    }

    /// Send the safe-state sequence; every command is tried even when one fails.
    pub async fn safe_state(&self) -> Vec<BenchError> {
        if let Some(m) = &self.modbus {
            return m.safe_state(&self.cfg.safe_state).await;
        }
        let cmds = self.cfg.safe_state.clone();
        self.send_sequence(&cmds, "safe state").await
    }
}
