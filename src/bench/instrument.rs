//! One open instrument: its port (one mutex, so never two commands in flight), the query and
//! stream reading styles, retries, command gaps, init / identity / safe-state sequences and
//! the traffic log. Knows nothing of other instruments.

use super::config::{InstrumentConfig, LinkConfig, ReadingStyle, StreamPick};
use super::{BenchError, IoCause};
use crate::measure::{Reading, Role};
use crate::protocol::{ReplyError, Template};
use crate::transport::{
    open_serial, open_tcp, BoxTransport, LineReader, LineWriter, LinkError, OpenError, TrafficLog,
};
use std::collections::VecDeque;
use std::sync::{Arc, Mutex as StdMutex};
use std::time::Duration;
use tokio::io::{ReadHalf, WriteHalf};
use tokio::sync::{Mutex, Notify};
use tokio::task::JoinHandle;
use tokio::time::Instant;

type Reader = LineReader<ReadHalf<BoxTransport>>;
type Writer = LineWriter<WriteHalf<BoxTransport>>;

/// Lines kept from a streaming instrument (older ones are dropped first).
const STREAM_KEEP: usize = 2048;

/// Lines received from a streaming instrument, with their arrival times.
#[derive(Default)]
struct StreamState {
    lines: VecDeque<(Instant, String)>,
    ended: Option<LinkError>,
    /// When the bench last changed a setting (load, source): lines that arrived before it
    /// describe the old operating point and never count towards a later reading.
    fresh_after: Option<Instant>,
}

struct Stream {
    state: StdMutex<StreamState>,
    notify: Notify,
}

struct Port {
    writer: Writer,
    /// `None` for a streaming instrument (its background task owns the reader).
    reader: Option<Reader>,
    last_write: Option<Instant>,
}

/// An instrument with an open link.
pub struct Instrument {
    pub(crate) cfg: InstrumentConfig,
    port: Mutex<Port>,
    stream: Option<Arc<Stream>>,
    stream_task: Option<JoinHandle<()>>,
    log: Option<Arc<TrafficLog>>,
    identity: StdMutex<Option<String>>,
    /// The driver of a Modbus instrument (see `modbus`); `None` for text instruments.
    modbus: Option<super::modbus::ModbusDevice>,
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
        LinkConfig::UsbTmc(u) => crate::transport::open_usbtmc(&u.path).map_err(|e| {
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
        let (r, w) = tokio::io::split(io);
        let mut reader = Some(LineReader::new(r, &cfg.read_terminator));
        let writer = LineWriter::new(w, &cfg.write_terminator);
        let (stream, stream_task) = if matches!(cfg.reading, ReadingStyle::Stream { .. }) {
            let s = Arc::new(Stream {
                state: StdMutex::new(StreamState::default()),
                notify: Notify::new(),
            });
            let mut rd = reader.take();
            let s2 = Arc::clone(&s);
            let log2 = log.clone();
            let task = tokio::spawn(async move {
                let Some(rd) = rd.as_mut() else { return };
                loop {
                    let far = Instant::now() + Duration::from_secs(3600);
                    match rd.read_line(far).await {
                        Ok(line) => {
                            if let Some(l) = &log2 {
                                l.line(false, &line);
                            }
                            if let Ok(mut st) = s2.state.lock() {
                                if st.lines.len() >= STREAM_KEEP {
                                    st.lines.pop_front();
                                }
                                st.lines.push_back((Instant::now(), line));
                            }
                            s2.notify.notify_waiters();
                        }
                        Err(LinkError::Timeout) => continue,
                        Err(e) => {
                            if let Ok(mut st) = s2.state.lock() {
                                st.ended = Some(e);
                            }
                            s2.notify.notify_waiters();
                            return;
                        }
                    }
                }
            });
            (Some(s), Some(task))
        } else {
            (None, None)
        };
        Ok(Instrument {
            cfg,
            port: Mutex::new(Port {
                writer,
                reader,
                last_write: None,
            }),
            stream,
            stream_task,
            log,
            identity: StdMutex::new(None),
            modbus,
        })
    }

    pub fn name(&self) -> &str {
        &self.cfg.name
    }

    pub fn config(&self) -> &InstrumentConfig {
        &self.cfg
    }

    /// The identity reply, if it was queried.
    pub fn identity(&self) -> Option<String> {
        self.identity.lock().ok().and_then(|g| g.clone())
    }

    fn err(&self, command: &str, e: LinkError) -> BenchError {
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

    async fn send_locked(&self, port: &mut Port, line: &str) -> Result<(), BenchError> {
        self.write_locked(port, line)
            .await
            .map_err(|e| self.err(line, e))
    }

    /// Write one line, keeping the command gap and the traffic log; the link's own error.
    async fn write_locked(&self, port: &mut Port, line: &str) -> Result<(), LinkError> {
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

    /// Send commands that get no reply, in order.
    pub async fn send_all(&self, lines: &[String]) -> Result<(), BenchError> {
        if let Some(m) = &self.modbus {
            return m.send_all(lines).await;
        }
        let mut port = self.port.lock().await;
        for l in lines {
            self.send_locked(&mut port, l).await?;
        }
        Ok(())
    }

    /// Render and send a template (`value` ignored by templates without placeholder).
    pub async fn send_template(&self, t: &Template, value: f64) -> Result<(), BenchError> {
        if let Some(m) = &self.modbus {
            return m.send(t.source(), value).await;
        }
        let line = t.render(value).map_err(|error| BenchError::Render {
            instrument: self.cfg.name.clone(),
            template: t.source().to_string(),
            error,
        })?;
        let mut port = self.port.lock().await;
        self.send_locked(&mut port, &line).await
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

    /// Wait until the instrument has applied the settings sent so far, when it has a confirm
    /// query (`*OPC?` for SCPI loads and sources); any reply line confirms.
    pub async fn confirm(&self) -> Result<(), BenchError> {
        if let Some(m) = &self.modbus {
            return m.confirm().await;
        }
        match self.cfg.confirm_query.clone() {
            Some(q) => self.raw_query(&q).await.map(|_| ()),
            None => Ok(()),
        }
    }

    /// Send a query and return its first non-empty reply line as text (identity and such).
    /// On a streaming instrument, the first line after sending that is not a stream line.
    pub async fn raw_query(&self, q: &str) -> Result<String, BenchError> {
        if let Some(m) = &self.modbus {
            return m.query(q).await;
        }
        let mut last = BenchError::NoReply {
            instrument: self.cfg.name.clone(),
            command: q.to_string(),
            ms: self.cfg.reply_timeout.as_millis(),
        };
        for _ in 0..=self.cfg.retries {
            let mut port = self.port.lock().await;
            if let Some(stream) = &self.stream {
                let sent = Instant::now();
                self.send_locked(&mut port, q).await?;
                drop(port);
                let deadline = sent + self.cfg.reply_timeout;
                // The reply is a line that is not a stream line. A partial stream line (the
                // link opened mid-line) is not one either, so prefer a reply in the IEEE 488.2
                // identity form (four comma-separated fields); otherwise take the last
                // non-stream line seen when the deadline passes.
                let mut fallback: Option<String> = None;
                let got = self
                    .wait_stream(stream, deadline, |t, line| {
                        let l = line.trim();
                        if t < sent || l.is_empty() || self.cfg.reply.parse(line).is_ok() {
                            return None;
                        }
                        if crate::protocol::parse_identity(l).is_some() {
                            return Some(l.to_string());
                        }
                        fallback = Some(l.to_string());
                        None
                    })
                    .await;
                match (got, fallback) {
                    (Ok(s), _) => return Ok(s),
                    (Err(LinkError::Timeout), Some(f)) => return Ok(f),
                    (Err(e), _) => last = self.err(q, e),
                }
                continue;
            }
            let mut reader = match port.reader.take() {
                Some(r) => r,
                None => return Err(self.err(q, LinkError::Closed)),
            };
            let r = self.query_text(&mut port, &mut reader, q).await;
            port.reader = Some(reader);
            match r {
                Ok(s) => return Ok(s),
                Err(
                    e @ (LinkError::Closed | LinkError::Io(_) | LinkError::WriteTimeout { .. }),
                ) => return Err(self.err(q, e)),
                Err(e) => last = self.err(q, e),
            }
        }
        Err(last)
    }

    async fn query_text(
        &self,
        port: &mut Port,
        reader: &mut Reader,
        q: &str,
    ) -> Result<String, LinkError> {
        self.drain(reader).await?;
        // Keep the write's own cause (a write timeout is not a closed link).
        self.write_locked(port, q).await?;
        let deadline = Instant::now() + self.cfg.reply_timeout;
        loop {
            let line = reader.read_line(deadline).await?;
            if let Some(l) = &self.log {
                l.line(false, &line);
            }
            if !line.trim().is_empty() {
                return Ok(line.trim().to_string());
            }
        }
    }

    async fn drain(&self, reader: &mut Reader) -> Result<(), LinkError> {
        let stale = reader.drain().await?;
        if let Some(l) = &self.log {
            for s in &stale {
                l.line(false, s);
                l.note("discarded: arrived before the query");
            }
        }
        Ok(())
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

    /// Take one reading for `role`: a query, or the stream's newest / averaged fresh lines.
    pub async fn read(&self, role: Role) -> Result<Reading, BenchError> {
        if let Some(m) = &self.modbus {
            return m.read(role).await;
        }
        match &self.cfg.reading {
            ReadingStyle::Query => {
                let Some(t) = self.cfg.commands.measure.get(&role) else {
                    return Err(BenchError::Command {
                        instrument: self.cfg.name.clone(),
                        detail: format!("no measuring command for role '{role}'"),
                    });
                };
                let cmd = t.source().to_string();
                self.query_reading(&cmd).await
            }
            ReadingStyle::Stream {
                pick,
                window,
                max_age,
                tags,
            } => {
                let tag = tags.get(&role).map(String::as_str);
                self.stream_reading(role, *pick, *window, *max_age, tag)
                    .await
            }
        }
    }

    async fn query_reading(&self, cmd: &str) -> Result<Reading, BenchError> {
        let mut port = self.port.lock().await;
        let mut reader = match port.reader.take() {
            Some(r) => r,
            None => return Err(self.err(cmd, LinkError::Closed)),
        };
        let r = self.query_reading_locked(&mut port, &mut reader, cmd).await;
        port.reader = Some(reader);
        r
    }

    async fn query_reading_locked(
        &self,
        port: &mut Port,
        reader: &mut Reader,
        cmd: &str,
    ) -> Result<Reading, BenchError> {
        let mut last_err = None;
        for attempt in 0..=self.cfg.retries {
            if attempt > 0 {
                if let Some(l) = &self.log {
                    l.note(&format!("retry {attempt} of '{cmd}'"));
                }
            }
            self.drain(reader).await.map_err(|e| self.err(cmd, e))?;
            self.send_locked(port, cmd).await?;
            let deadline = Instant::now() + self.cfg.reply_timeout;
            let mut bad: Option<(String, ReplyError)> = None;
            let outcome = loop {
                match reader.read_line(deadline).await {
                    Ok(line) => {
                        if let Some(l) = &self.log {
                            l.line(false, &line);
                        }
                        if line.trim().is_empty() {
                            continue;
                        }
                        match self.cfg.reply.parse(&line) {
                            Ok(r) => return Ok(r),
                            // A stray or garbled line: keep listening until the deadline.
                            Err(e) => bad = Some((line, e)),
                        }
                    }
                    Err(LinkError::Timeout) => break LinkError::Timeout,
                    Err(e) => return Err(self.err(cmd, e)),
                }
            };
            last_err = Some(match bad {
                Some((raw, reason)) => BenchError::Unparseable {
                    instrument: self.cfg.name.clone(),
                    command: cmd.to_string(),
                    raw,
                    pattern: self.cfg.reply.pattern_text().to_string(),
                    reason: Box::new(reason),
                },
                None => self.err(cmd, outcome),
            });
            if let (Some(l), Some(e)) = (&self.log, &last_err) {
                l.note(&e.to_string());
            }
        }
        Err(last_err.unwrap_or_else(|| self.err(cmd, LinkError::Timeout)))
    }

    /// Wait until `accept` picks something from the stream's lines, or the deadline passes.
    async fn wait_stream<T>(
        &self,
        stream: &Stream,
        deadline: Instant,
        mut accept: impl FnMut(Instant, &str) -> Option<T>,
    ) -> Result<T, LinkError> {
        loop {
            let notified = stream.notify.notified();
            tokio::pin!(notified);
            notified.as_mut().enable();
            {
                let st = stream.state.lock().map_err(|_| LinkError::Poisoned)?;
                for (t, line) in st.lines.iter() {
                    if let Some(v) = accept(*t, line) {
                        return Ok(v);
                    }
                }
                if let Some(e) = &st.ended {
                    return Err(e.clone());
                }
            }
            if tokio::time::timeout_at(deadline, notified).await.is_err() {
                return Err(LinkError::Timeout);
            }
        }
    }

    async fn stream_reading(
        &self,
        role: Role,
        pick: StreamPick,
        window: Duration,
        max_age: Duration,
        tag: Option<&str>,
    ) -> Result<Reading, BenchError> {
        let Some(stream) = &self.stream else {
            return Err(self.err(role.as_str(), LinkError::Closed));
        };
        let what = format!("stream ({role})");
        let deadline = Instant::now() + self.cfg.reply_timeout;
        let mut bad: Option<(String, ReplyError)> = None;
        loop {
            let notified = stream.notify.notified();
            tokio::pin!(notified);
            notified.as_mut().enable();
            {
                let mut st = stream
                    .state
                    .lock()
                    .map_err(|_| self.err(&what, LinkError::Poisoned))?;
                let now = Instant::now();
                // Stale lines (too old, or from before the last setting change) are dropped
                // for good.
                let fresh_after = st.fresh_after;
                while st.lines.front().is_some_and(|(t, _)| {
                    now.duration_since(*t) > max_age || fresh_after.is_some_and(|f| *t < f)
                }) {
                    st.lines.pop_front();
                }
                let span = match pick {
                    StreamPick::Newest => max_age,
                    StreamPick::Average => window.min(max_age),
                };
                let mut sum = 0.0;
                let mut n = 0usize;
                let mut over = false;
                for (t, line) in st.lines.iter().rev() {
                    if now.duration_since(*t) > span {
                        break;
                    }
                    if line.trim().is_empty() {
                        continue;
                    }
                    match self.cfg.reply.parse_tagged(line) {
                        Ok((ltag, r)) => {
                            if let Some(want) = tag {
                                if ltag != Some(want) {
                                    continue;
                                }
                            }
                            match r {
                                Reading::Overrange => over = true,
                                Reading::Value(v) => {
                                    sum += v;
                                    n += 1;
                                }
                            }
                            if pick == StreamPick::Newest {
                                break;
                            }
                        }
                        Err(e) => {
                            if bad.is_none() {
                                bad = Some((line.clone(), e));
                            }
                        }
                    }
                }
                if over {
                    return Ok(Reading::Overrange);
                }
                if n > 0 {
                    return Ok(Reading::Value(sum / n as f64));
                }
                if let Some(e) = &st.ended {
                    return Err(self.err(&what, e.clone()));
                }
            }
            if tokio::time::timeout_at(deadline, notified).await.is_err() {
                return Err(match bad {
                    Some((raw, reason)) => BenchError::Unparseable {
                        instrument: self.cfg.name.clone(),
                        command: what,
                        raw,
                        pattern: self.cfg.reply.pattern_text().to_string(),
                        reason: Box::new(reason),
                    },
                    None => self.err(&what, LinkError::Timeout),
                });
            }
        }
    }

    /// Send the safe-state sequence; every command is tried even when one fails.
    pub async fn safe_state(&self) -> Vec<BenchError> {
        if let Some(m) = &self.modbus {
            return m.safe_state(&self.cfg.safe_state).await;
        }
        let mut errors = Vec::new();
        let cmds = self.cfg.safe_state.clone();
        if cmds.is_empty() {
            return errors;
        }
        let mut port = self.port.lock().await;
        for c in &cmds {
            if let Err(e) = self.send_locked(&mut port, c).await {
                errors.push(e);
            }
        }
        // A link known to be closed cannot have delivered the sequence, even if the write
        // went into a socket buffer: say so, so the user checks the instrument by hand.
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
                    "safe state {}; make sure by hand that it is safe",
                    cmds.join(" / ")
                ),
            });
        }
        errors
    }
}
