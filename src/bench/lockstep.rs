//! Settings in lockstep with one instrument: the setting's commands (acknowledged when the
//! instrument answers commands), then the confirm query until its expected reply, the error
//! queue, and the readback of every setting that has one, compared with what was sent within
//! the template's resolution. A refusal aborts at once; a missing or unexpected reply, or a
//! readback that does not match, is retried (commands sent again) and then aborts. Builds on
//! the exchanges of `instrument.rs`.

use super::config::{CommandKey, Readback};
use super::instrument::{Instrument, Port};
use super::BenchError;
use crate::protocol::Template;
use crate::transport::LinkError;
use tokio::time::Instant;

/// Relative slack of a numeric readback beyond the template's resolution (the instrument's
/// reply may carry six significant digits, SCPI NR3 habit).
const READBACK_RELATIVE: f64 = 1e-5;

/// One command of a setting: its key, its template and the value it carries (ignored by a
/// template without placeholder).
#[derive(Debug, Clone, Copy)]
pub struct SettingCommand<'a> {
    pub key: CommandKey,
    pub template: &'a Template,
    pub value: f64,
}

impl Instrument {
    /// Apply a setting in lockstep; returns once the instrument has confirmed it (and read it
    /// back, when configured), or with the error that stopped it.
    pub async fn apply(&self, cmds: &[SettingCommand<'_>]) -> Result<(), BenchError> {
        if let Some(m) = self.modbus() {
            // Modbus: every written object is read back by the driver (its confirmation).
            for c in cmds {
                m.send(c.template.source(), c.value).await?;
            }
            return m.confirm().await;
        }
        let mut lines = Vec::with_capacity(cmds.len());
        for c in cmds {
            lines.push(
                c.template
                    .render(c.value)
                    .map_err(|error| BenchError::Render {
                        instrument: self.cfg.name.clone(),
                        template: c.template.source().to_string(),
                        error,
                    })?,
            );
        }
        let mut port = self.port.lock().await;
        for l in &lines {
            self.command_locked(&mut port, l).await?;
        }
        let mut last = None;
        // How far verification got: a retry goes on from the exchange that failed.
        let mut stage = 0;
        for attempt in 0..=self.cfg.retries {
            if attempt > 0 {
                self.note_retry(&format!("retry {attempt} of '{}'", lines.join(" / ")));
            }
            match self.verify(&mut port, cmds, &lines, &mut stage).await {
                Ok(()) => return Ok(()),
                // Read back as something else: the instrument did not apply it, send again.
                Err(e @ BenchError::Readback { .. }) => {
                    self.note(&e.to_string());
                    last = Some(e);
                    stage = 0;
                    if attempt < self.cfg.retries {
                        for l in &lines {
                            self.command_locked(&mut port, l).await?;
                        }
                    }
                }
                // No (or no recognisable) reply: the next exchange resynchronises the link
                // first, and the instrument, answering in order, has then worked through the
                // commands; confirm again.
                Err(
                    e @ (BenchError::NoReply { .. }
                    | BenchError::UnexpectedReply { .. }
                    | BenchError::Unparseable { .. }),
                ) => {
                    self.note(&e.to_string());
                    last = Some(e);
                }
                Err(e) => return Err(e),
            }
        }
        Err(last.unwrap_or_else(|| self.err(&lines.join(" / "), LinkError::Timeout)))
    }

    /// Confirmation, error queue and readbacks of commands already sent, from `stage` on
    /// (0: confirmation, 1: error queue, 2 + i: readback of command i); `stage` says how far
    /// it got.
    async fn verify(
        &self,
        port: &mut Port,
        cmds: &[SettingCommand<'_>],
        lines: &[String],
        stage: &mut usize,
    ) -> Result<(), BenchError> {
        let what = lines.join(" / ");
        if *stage == 0 {
            self.confirm_locked(port, &what).await?;
            *stage = 1;
        }
        if *stage == 1 {
            self.error_queue_locked(port, &what).await?;
            *stage = 2;
        }
        for (i, (c, line)) in cmds.iter().zip(lines).enumerate() {
            if *stage > 2 + i {
                continue;
            }
            if let Some(rb) = self.cfg.lockstep.readback.get(&c.key) {
                self.readback_locked(port, c, line, rb).await?;
            }
            *stage = 3 + i;
        }
        Ok(())
    }

    /// The confirm query, until a line matching its expected reply; other lines are not the
    /// confirmation (they are logged and discarded).
    async fn confirm_locked(&self, port: &mut Port, what: &str) -> Result<(), BenchError> {
        let Some(c) = self.cfg.lockstep.confirm.clone() else {
            return Ok(());
        };
        self.resync(port).await?;
        let q = c.query.as_str();
        let mut line = self
            .query_locked(port, q)
            .await
            .map_err(|e| self.err(q, e))?;
        let deadline = Instant::now() + self.cfg.reply_timeout;
        loop {
            if c.expect.is_match(&line) {
                port.unsynced = false;
                return Ok(());
            }
            self.note(&format!("discarded: not the confirmation of '{what}'"));
            line = self
                .next_line(port, q, deadline)
                .await
                .map_err(|e| self.err(q, e))?;
        }
    }

    /// The error queue after a setting: any reply but "no error" is a refusal.
    async fn error_queue_locked(&self, port: &mut Port, what: &str) -> Result<(), BenchError> {
        let Some(eq) = self.cfg.lockstep.error_query.clone() else {
            return Ok(());
        };
        self.resync(port).await?;
        let reply = self
            .query_locked(port, &eq.query)
            .await
            .map_err(|e| self.err(&eq.query, e))?;
        port.unsynced = false;
        if eq.none.is_match(&reply) {
            return Ok(());
        }
        Err(BenchError::Refused {
            instrument: self.cfg.name.clone(),
            command: what.to_string(),
            raw: format!("{reply} (from '{}')", eq.query),
        })
    }

    async fn readback_locked(
        &self,
        port: &mut Port,
        c: &SettingCommand<'_>,
        line: &str,
        rb: &Readback,
    ) -> Result<(), BenchError> {
        self.resync(port).await?;
        let q = rb.query();
        let first = self
            .query_locked(port, q)
            .await
            .map_err(|e| self.err(q, e))?;
        let mismatch = |raw: String, expected: String| BenchError::Readback {
            instrument: self.cfg.name.clone(),
            command: line.to_string(),
            query: q.to_string(),
            raw,
            expected,
        };
        match rb {
            Readback::Text { expect, .. } => {
                port.unsynced = false;
                if expect.is_match(&first) {
                    Ok(())
                } else {
                    Err(mismatch(
                        first,
                        format!("a reply matching {:?}", expect.as_str()),
                    ))
                }
            }
            Readback::Value { reply, .. } => {
                let sent = c
                    .template
                    .sent_value(c.value)
                    .ok()
                    .flatten()
                    .unwrap_or(c.value);
                let tol = c.template.resolution(c.value) + READBACK_RELATIVE * sent.abs();
                let deadline = Instant::now() + self.cfg.reply_timeout;
                let mut raw = first;
                loop {
                    if let Ok(r) = reply.parse(&raw) {
                        port.unsynced = false;
                        let got = r.value();
                        return match got {
                            Some(v) if (v - sent).abs() <= tol => Ok(()),
                            _ => Err(mismatch(raw, format!("{sent} (within {tol:.3e})"))),
                        };
                    }
                    // A garbled line: keep listening until the deadline.
                    raw = self
                        .next_line(port, q, deadline)
                        .await
                        .map_err(|e| self.err(q, e))?;
                }
            }
        }
    }

    /// Send the instrument-side limits (`arm` before a stressful step, else `disarm`).
    pub async fn limits(&self, arm: bool) -> Result<(), BenchError> {
        let seq = if arm {
            &self.cfg.limits.arm
        } else {
            &self.cfg.limits.disarm
        };
        if seq.is_empty() {
            return Ok(());
        }
        if let Some(m) = self.modbus() {
            return m.send_all(seq).await;
        }
        let mut port = self.port.lock().await;
        for l in seq {
            self.command_locked(&mut port, l).await?;
        }
        let what = seq.join(" / ");
        self.confirm_locked(&mut port, &what).await?;
        self.error_queue_locked(&mut port, &what).await
    }
}
