//! An open bench: every instrument of a checked bench file connected, initialised and
//! identified; reads all measuring roles concurrently (one task per instrument), sends settings
//! through the command-key table and runs the safe state. Knows nothing of plans or records.

use super::config::{BenchConfig, CommandKey};
use super::instrument::{connect, Instrument};
use super::lockstep::SettingCommand;
use super::BenchError;
use crate::measure::{LoadMode, Measurement, Reading, Role};
use crate::transport::BoxTransport;
use std::sync::Arc;
use std::time::Duration;
use tokio::task::JoinSet;
use tokio::time::Instant;

/// An open bench: every instrument connected, initialised and identified.
pub struct Bench {
    config: BenchConfig,
    instruments: Vec<Arc<Instrument>>,
    /// The guardian process of the run in progress, if one was started.
    guardian: Option<crate::guardian::Guardian>,
}

impl Bench {
    /// Connect every instrument of a checked bench file, send each init sequence and identity
    /// query. On failure, instruments already opened get their safe state before the error
    /// is returned. Must run inside a tokio runtime (with I/O and time enabled).
    pub async fn open(cfg: &BenchConfig) -> Result<Bench, BenchError> {
        let mut links = Vec::with_capacity(cfg.instruments.len());
        for inst in &cfg.instruments {
            match connect(inst).await {
                Ok(l) => links.push(l),
                Err(e) => {
                    // The instruments already connected may have been left on by an earlier
                    // run: they get their safe state before the error is returned.
                    let mut opened = Vec::new();
                    for (c, io) in cfg.instruments.iter().zip(links) {
                        if let Ok(i) = Instrument::new(c.clone(), io) {
                            opened.push(Arc::new(i));
                        }
                    }
                    let partial = Bench {
                        config: cfg.clone(),
                        instruments: opened,
                        guardian: None,
                    };
                    let _ = partial.run_safe_state().await;
                    return Err(e);
                }
            }
        }
        Bench::with_transports(cfg, links).await
    }

    /// Like [`Bench::open`] over links opened elsewhere (one per instrument, in file order),
    /// e.g. in-memory links for benchmarks.
    pub async fn with_transports(
        cfg: &BenchConfig,
        links: Vec<BoxTransport>,
    ) -> Result<Bench, BenchError> {
        if links.len() != cfg.instruments.len() {
            return Err(BenchError::Command {
                instrument: "bench".into(),
                detail: format!(
                    "{} links given for {} instruments",
                    links.len(),
                    cfg.instruments.len()
                ),
            });
        }
        let mut instruments = Vec::with_capacity(links.len());
        for (c, io) in cfg.instruments.iter().zip(links) {
            instruments.push(Arc::new(Instrument::new(c.clone(), io)?));
        }
        let bench = Bench {
            config: cfg.clone(),
            instruments,
            guardian: None,
        };
        // Init and identity, all instruments concurrently.
        let mut set = JoinSet::new();
        for (i, inst) in bench.instruments.iter().enumerate() {
            let inst = Arc::clone(inst);
            set.spawn(async move { (i, inst.initialise().await) });
        }
        let mut first: Option<(usize, BenchError)> = None;
        while let Some(done) = set.join_next().await {
            if let Ok((i, Err(e))) = done {
                if first.as_ref().is_none_or(|(j, _)| i < *j) {
                    first = Some((i, e));
                }
            }
        }
        if let Some((_, e)) = first {
            let _ = bench.run_safe_state().await;
            return Err(e);
        }
        Ok(bench)
    }

    pub fn config(&self) -> &BenchConfig {
        &self.config
    }

    pub fn instruments(&self) -> &[Arc<Instrument>] {
        &self.instruments
    }

    fn holder(&self, role: Role) -> Result<&Arc<Instrument>, BenchError> {
        self.instruments
            .iter()
            .find(|i| i.cfg.roles.contains(&role))
            .ok_or(BenchError::NoRole { role })
    }

    /// Read one measuring role, with the time it took.
    pub async fn read_role(&self, role: Role) -> Result<(Reading, Duration), BenchError> {
        let inst = self.holder(role)?;
        let t0 = Instant::now();
        let r = inst.read(role).await?;
        Ok((r, t0.elapsed()))
    }

    /// Read every measuring role once: one task per instrument, all instruments at the same
    /// time (a step costs the slowest instrument, not the sum). Roles of one instrument are
    /// read one after the other on its port. Returns the first failure, after all finished.
    pub async fn read_all(&self) -> Result<Measurement, BenchError> {
        let mut set = JoinSet::new();
        for (i, inst) in self.instruments.iter().enumerate() {
            let roles: Vec<Role> = inst.cfg.measuring_roles().collect();
            if roles.is_empty() {
                continue;
            }
            let inst = Arc::clone(inst);
            set.spawn(async move {
                let mut out = Vec::with_capacity(roles.len());
                for role in roles {
                    match inst.read(role).await {
                        Ok(r) => out.push((role, r)),
                        Err(e) => return (i, Err(e)),
                    }
                }
                (i, Ok(out))
            });
        }
        let mut m = Measurement::default();
        // Report the failure of the first instrument in file order (deterministic).
        let mut first: Option<(usize, BenchError)> = None;
        while let Some(done) = set.join_next().await {
            let (i, res) = match done {
                Ok(x) => x,
                Err(join) => (
                    usize::MAX,
                    Err(BenchError::Command {
                        instrument: "bench".into(),
                        detail: format!("reading task failed: {join}"),
                    }),
                ),
            };
            match res {
                Ok(rows) => {
                    for (role, r) in rows {
                        if let Some(q) = role.quantity() {
                            m.set(q, r);
                        }
                    }
                }
                Err(e) => {
                    if first.as_ref().is_none_or(|(j, _)| i < *j) {
                        first = Some((i, e));
                    }
                }
            }
        }
        match first {
            Some((_, e)) => Err(e),
            None => Ok(m),
        }
    }

    /// The instruments in safe-state order: loads first, then sources, then the rest.
    fn safe_order(&self) -> Vec<&Arc<Instrument>> {
        let rank = |i: &Instrument| {
            if i.cfg.roles.contains(&Role::Load) {
                0
            } else if i.cfg.roles.contains(&Role::InputSource) {
                1
            } else {
                2
            }
        };
        let mut order: Vec<&Arc<Instrument>> = self.instruments.iter().collect();
        order.sort_by_key(|i| rank(i));
        order
    }

    /// Start the guardian process for a run recorded in `record` (see [`crate::guardian`]):
    /// it holds every link (serial, TCP, USB-TMC, Modbus RTU and TCP) and sends the safe
    /// state (the switch-off commands, then the safe-state sequence) if regulus ends without
    /// standing it down. Text links get lines; a USB-TMC link gets each line as one message;
    /// a Modbus link gets the register map's write requests as whole frames. Does nothing
    /// when this process does not start guardians.
    pub fn guard(&mut self, record: &std::path::Path) -> Result<(), crate::guardian::GuardError> {
        let spec = crate::guardian::GuardSpec {
            record: Some(record.to_path_buf()),
            links: self.guard_links(),
        };
        self.guardian = crate::guardian::start(&spec)?;
        Ok(())
    }

    /// Every link the guardian holds, in safe-state order, with what makes it safe.
    pub fn guard_links(&self) -> Vec<crate::guardian::GuardLink> {
        use crate::guardian::{GuardFrame, GuardLink, GuardPayload};
        use crate::transport::LinkConfig;
        let mut links = Vec::new();
        for inst in self.safe_order() {
            let Some(fd) = inst.raw_fd() else { continue };
            let mut lines: Vec<String> = Vec::new();
            for (role, key) in crate::bench::config::SAFE_STATE_KEYS {
                if inst.cfg.roles.contains(&role) {
                    if let Some(Ok(l)) = inst.cfg.commands.get(key).map(|t| t.render(0.0)) {
                        lines.push(l);
                    }
                }
            }
            for l in &inst.cfg.safe_state {
                if !lines.contains(l) {
                    lines.push(l.clone());
                }
            }
            let terminator = inst.cfg.write_terminator.clone();
            let safe_state = if let Some(m) = inst.modbus() {
                m.guard_payload(&lines)
            } else if matches!(inst.cfg.link, LinkConfig::UsbTmc(_)) {
                GuardPayload::Frames {
                    gap_us: inst.cfg.command_gap.as_micros() as u64,
                    frames: lines
                        .into_iter()
                        .map(|l| GuardFrame {
                            bytes: format!("{l}{terminator}").into_bytes(),
                            what: l,
                        })
                        .collect(),
                }
            } else {
                GuardPayload::Lines { terminator, lines }
            };
            if safe_state.is_empty() {
                continue;
            }
            links.push(GuardLink {
                name: inst.cfg.name.clone(),
                fd,
                safe_state,
            });
        }
        links
    }

    /// The run finished with its own safe state: the guardian exits without acting.
    pub fn stand_down(&mut self) {
        if let Some(g) = self.guardian.take() {
            g.stand_down();
        }
    }

    /// Run every instrument's safe-state sequence: loads first, then sources, then the rest,
    /// continuing past failures. Returns the failures.
    pub async fn run_safe_state(&self) -> Vec<BenchError> {
        let order = self.safe_order();
        let mut errors = Vec::new();
        for inst in order {
            errors.extend(inst.safe_state().await);
        }
        errors
    }

    /// Arm (before a stressful step) or disarm every instrument's own limits, in file order;
    /// the first failure is returned after all were tried.
    pub async fn limits(&self, arm: bool) -> Result<(), BenchError> {
        let mut first = None;
        for inst in &self.instruments {
            if let Err(e) = inst.limits(arm).await {
                first.get_or_insert(e);
            }
        }
        first.map_or(Ok(()), Err)
    }

    /// Retries and resynchronisations on any instrument since the last call.
    pub fn take_retries(&self) -> u32 {
        self.instruments.iter().map(|i| i.take_retries()).sum()
    }

    /// Tell streaming instruments that the operating point changed now (even after a failed
    /// command, which may have been acted on).
    pub(super) fn settings_changed(&self) {
        let now = tokio::time::Instant::now();
        for inst in &self.instruments {
            inst.setting_changed(now);
        }
    }

    pub(super) async fn set_load_inner(
        &self,
        mode: LoadMode,
        value: f64,
    ) -> Result<(), BenchError> {
        let inst = self.holder(Role::Load)?;
        let c = &inst.cfg.commands;
        let (mode_key, set_key) = CommandKey::load_mode(mode);
        let Some(set_cmd) = c.get(set_key) else {
            return Err(BenchError::Command {
                instrument: inst.cfg.name.clone(),
                detail: format!(
                    "{} mode is not available: add {} under [instrument.commands]",
                    mode.as_str().to_uppercase(),
                    set_key.name()
                ),
            });
        };
        let mut cmds = Vec::with_capacity(2);
        if let Some(m) = c.get(mode_key) {
            cmds.push(SettingCommand {
                key: mode_key,
                template: m,
                value: 0.0,
            });
        }
        cmds.push(SettingCommand {
            key: set_key,
            template: set_cmd,
            value,
        });
        inst.apply(&cmds).await
    }

    pub(super) async fn switch(&self, role: Role, on: bool) -> Result<(), BenchError> {
        let inst = self.holder(role)?;
        let key = CommandKey::switch(role, on);
        match inst.cfg.commands.get(key) {
            Some(t) => {
                inst.apply(&[SettingCommand {
                    key,
                    template: t,
                    value: 0.0,
                }])
                .await
            }
            None => Err(BenchError::Command {
                instrument: inst.cfg.name.clone(),
                detail: format!(
                    "no {} command: add it under [instrument.commands]",
                    key.name()
                ),
            }),
        }
    }

    pub(super) async fn set_source_inner(&self, volts: f64) -> Result<(), BenchError> {
        let inst = self.holder(Role::InputSource)?;
        match inst.cfg.commands.get(CommandKey::SourceSetVoltage) {
            Some(t) => {
                inst.apply(&[SettingCommand {
                    key: CommandKey::SourceSetVoltage,
                    template: t,
                    value: volts,
                }])
                .await
            }
            None => Err(BenchError::Command {
                instrument: inst.cfg.name.clone(),
                detail: "no source_set_voltage command".into(),
            }),
        }
    }
}
