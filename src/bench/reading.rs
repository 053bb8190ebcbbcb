//! Readings from one instrument: a measuring query answered in step (never by a line left
//! over from an unfinished exchange), or the fresh lines of a stream; every reply's unit is
//! checked against its role's quantity. Builds on the exchanges of `instrument.rs`.

use super::config::{ReadingStyle, StreamPick};
use super::instrument::{Instrument, Stream};
use super::BenchError;
use crate::measure::{Reading, Role};
use crate::protocol::{ExpectedUnit, ReplyError};
use crate::transport::LinkError;
use std::time::Duration;
use tokio::time::Instant;

impl Instrument {
    /// Take one reading for `role`: a query, or the stream's newest / averaged fresh lines.
    pub async fn read(&self, role: Role) -> Result<Reading, BenchError> {
        if let Some(m) = self.modbus() {
            return m.read(role).await;
        }
        let expect = self.cfg.expected_unit(role);
        match &self.cfg.reading {
            ReadingStyle::Query => {
                let Some(t) = self.cfg.commands.measure.get(&role) else {
                    return Err(BenchError::Command {
                        instrument: self.cfg.name.clone(),
                        detail: format!("no measuring command for role '{role}'"),
                    });
                };
                let cmd = t.source().to_string();
                self.query_reading(&cmd, &expect).await
            }
            ReadingStyle::Stream {
                pick,
                window,
                max_age,
                tags,
            } => {
                let tag = tags.get(&role).map(String::as_str);
                self.stream_reading(role, *pick, *window, *max_age, tag, &expect)
                    .await
            }
        }
    }

    fn unparseable(&self, cmd: &str, raw: String, reason: ReplyError) -> BenchError {
        BenchError::Unparseable {
            instrument: self.cfg.name.clone(),
            command: cmd.to_string(),
            raw,
            pattern: self.cfg.reply.pattern_text().to_string(),
            reason: Box::new(reason),
        }
    }

    async fn query_reading(&self, cmd: &str, expect: &ExpectedUnit) -> Result<Reading, BenchError> {
        let mut port = self.port.lock().await;
        let mut last_err = None;
        for attempt in 0..=self.cfg.retries {
            if attempt > 0 {
                self.note_retry(&format!("retry {attempt} of '{cmd}'"));
            }
            self.resync(&mut port).await?;
            self.drain(&mut port).await.map_err(|e| self.err(cmd, e))?;
            self.write_locked(&mut port, cmd)
                .await
                .map_err(|e| self.err(cmd, e))?;
            port.unsynced = true;
            let deadline = Instant::now() + self.cfg.reply_timeout;
            let mut bad: Option<(String, ReplyError)> = None;
            let outcome = loop {
                match self.next_line(&mut port, cmd, deadline).await {
                    Ok(line) => match self.cfg.reply.parse_expecting(&line, expect) {
                        Ok((_, r)) => {
                            port.unsynced = false;
                            return Ok(r);
                        }
                        // A reply in the wrong unit is the meter's mode or range, not noise.
                        Err(e @ ReplyError::WrongUnit { .. }) => {
                            port.unsynced = false;
                            return Err(self.unparseable(cmd, line, e));
                        }
                        // A stray or garbled line: keep listening until the deadline.
                        Err(e) => bad = Some((line, e)),
                    },
                    Err(LinkError::Timeout) => break LinkError::Timeout,
                    Err(e) => return Err(self.err(cmd, e)),
                }
            };
            let e = match bad {
                Some((raw, reason)) => self.unparseable(cmd, raw, reason),
                None => self.err(cmd, outcome),
            };
            self.note(&e.to_string());
            last_err = Some(e);
        }
        Err(last_err.unwrap_or_else(|| self.err(cmd, LinkError::Timeout)))
    }

    /// A query on a streaming instrument: its reply is a line that is not a stream line.
    pub(super) async fn stream_query(
        &self,
        stream: &Stream,
        q: &str,
    ) -> Result<String, BenchError> {
        let mut last = self.err(q, LinkError::Timeout);
        for _ in 0..=self.cfg.retries {
            let mut port = self.port.lock().await;
            let sent = Instant::now();
            self.write_locked(&mut port, q)
                .await
                .map_err(|e| self.err(q, e))?;
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
        }
        Err(last)
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
        expect: &ExpectedUnit,
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
                        Ok((ltag, _)) => {
                            if let Some(want) = tag {
                                if ltag != Some(want) {
                                    continue;
                                }
                            }
                            // The line is this role's: its unit must be the role's.
                            let r = match self.cfg.reply.parse_expecting(line, expect) {
                                Ok((_, r)) => r,
                                Err(e) => return Err(self.unparseable(&what, line.clone(), e)),
                            };
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
                    Some((raw, reason)) => self.unparseable(&what, raw, reason),
                    None => self.err(&what, LinkError::Timeout),
                });
            }
        }
    }
}
