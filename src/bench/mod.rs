//! The bench: instruments by role, built from a checked bench file, talking over transports.
//! Owns the bench file format ([`config`]), opening links, init and identity queries,
//! concurrent reads (one task per instrument, never two commands in flight on one port) and the
//! safe state. It implements [`crate::control::BenchControl`] for the runner. It must not parse
//! replies itself (that is [`crate::protocol`]) nor know about plans or records.

pub mod config;

pub use config::{
    BenchConfig, CommandSet, FlowControl, InstrumentConfig, LinkConfig, Parity, ReadingStyle,
    SerialSettings, StreamPick, PRESET_NAMES,
};

/// Everything that can go wrong with a bench, phrased as what to check.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum BenchError {
    #[error("{file}:{line}:{column}: {message}")]
    Config {
        file: String,
        line: usize,
        column: usize,
        message: String,
    },
    #[error("cannot read bench file {path}: {detail}; check the path")]
    ReadFile { path: String, detail: String },
    #[error("instrument '{instrument}': serial port {port} does not exist; check the cable, the adapter and the port name in the bench file")]
    PortMissing { instrument: String, port: String },
    #[error("instrument '{instrument}': permission denied opening {port}; add your user to the group that owns the port (often 'dialout') or check its permissions")]
    PermissionDenied { instrument: String, port: String },
    #[error("instrument '{instrument}': serial port {port} is busy; close the other program using it (or another regulus run)")]
    PortBusy { instrument: String, port: String },
    #[error("instrument '{instrument}': cannot open {link}: {detail}")]
    Open {
        instrument: String,
        link: String,
        detail: String,
    },
    #[error("instrument '{instrument}': connection refused by {addr}; is the instrument on, on the network, and listening on that port (often 5025)?")]
    ConnectionRefused { instrument: String, addr: String },
    #[error("instrument '{instrument}': no connection to {addr} within {ms} ms; check the address, the network and that the instrument is on")]
    ConnectTimeout {
        instrument: String,
        addr: String,
        ms: u128,
    },
    #[error("instrument '{instrument}': no reply to '{command}' within {ms} ms; check the cable, baud rate and terminators, and that the instrument knows this command")]
    NoReply {
        instrument: String,
        command: String,
        ms: u128,
    },
    #[error("instrument '{instrument}': reply to '{command}' cannot be read: {reason}; raw line {raw:?}, pattern {pattern:?}; check the reply pattern, scale and the instrument's mode")]
    Unparseable {
        instrument: String,
        command: String,
        raw: String,
        pattern: String,
        reason: String,
    },
    #[error("instrument '{instrument}': connection closed (while '{command}'); check the cable or network and that the instrument is still on")]
    Closed { instrument: String, command: String },
    #[error("instrument '{instrument}': input/output error (while '{command}'): {detail}")]
    Io {
        instrument: String,
        command: String,
        detail: String,
    },
    #[error("instrument '{instrument}': {detail}")]
    Command { instrument: String, detail: String },
    #[error(
        "no instrument on this bench holds role '{role}'; add it to a [[instrument]] roles list"
    )]
    NoRole { role: crate::measure::Role },
    #[error("no instrument named '{name}' in the bench file; it has: {known}")]
    NoInstrument { name: String, known: String },
}

impl BenchError {
    /// True for errors in the bench file itself (exit code 2), false for instrument failures.
    pub fn is_config(&self) -> bool {
        matches!(
            self,
            BenchError::Config { .. }
                | BenchError::ReadFile { .. }
                | BenchError::NoInstrument { .. }
        )
    }

    /// The instrument concerned, if any.
    pub fn instrument(&self) -> Option<&str> {
        match self {
            BenchError::PortMissing { instrument, .. }
            | BenchError::PermissionDenied { instrument, .. }
            | BenchError::PortBusy { instrument, .. }
            | BenchError::Open { instrument, .. }
            | BenchError::ConnectionRefused { instrument, .. }
            | BenchError::ConnectTimeout { instrument, .. }
            | BenchError::NoReply { instrument, .. }
            | BenchError::Unparseable { instrument, .. }
            | BenchError::Closed { instrument, .. }
            | BenchError::Io { instrument, .. }
            | BenchError::Command { instrument, .. } => Some(instrument),
            _ => None,
        }
    }
}

mod instrument;
mod probe;

pub use instrument::{connect, Instrument};
pub use probe::{probe, write_probe_table, ProbeReport, ProbeRow};

use crate::control::{BenchControl, ControlError, InstrumentIdentity};
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
}

impl Bench {
    /// Connect every instrument of a checked bench file, send each init sequence and identity
    /// query. On failure, instruments already opened get their safe state before the error
    /// is returned. Must run inside a tokio runtime (with I/O and time enabled).
    pub async fn open(cfg: &BenchConfig) -> Result<Bench, BenchError> {
        let mut links = Vec::with_capacity(cfg.instruments.len());
        for inst in &cfg.instruments {
            links.push(connect(inst).await?);
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

    /// Run every instrument's safe-state sequence: loads first, then sources, then the rest,
    /// continuing past failures. Returns the failures.
    pub async fn run_safe_state(&self) -> Vec<BenchError> {
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
        let mut errors = Vec::new();
        for inst in order {
            errors.extend(inst.safe_state().await);
        }
        errors
    }

    /// Tell streaming instruments that the operating point changed now (even after a failed
    /// command, which may have been acted on).
    fn settings_changed(&self) {
        let now = tokio::time::Instant::now();
        for inst in &self.instruments {
            inst.setting_changed(now);
        }
    }

    async fn set_load_inner(&self, mode: LoadMode, value: f64) -> Result<(), BenchError> {
        let inst = self.holder(Role::Load)?;
        let c = &inst.cfg.commands;
        let (mode_cmd, set_cmd, key) = match mode {
            LoadMode::ConstantCurrent => (&c.load_mode_cc, &c.load_set_current, "load_set_current"),
            LoadMode::ConstantVoltage => (&c.load_mode_cv, &c.load_set_voltage, "load_set_voltage"),
            LoadMode::ConstantResistance => (
                &c.load_mode_cr,
                &c.load_set_resistance,
                "load_set_resistance",
            ),
        };
        let Some(set_cmd) = set_cmd else {
            return Err(BenchError::Command {
                instrument: inst.cfg.name.clone(),
                detail: format!(
                    "{} mode is not available: add {key} under [instrument.commands]",
                    mode.as_str().to_uppercase()
                ),
            });
        };
        if let Some(m) = mode_cmd {
            inst.send_template(m, 0.0).await?;
        }
        inst.send_template(set_cmd, value).await?;
        inst.confirm().await
    }

    async fn switch(&self, role: Role, on: bool) -> Result<(), BenchError> {
        let inst = self.holder(role)?;
        let c = &inst.cfg.commands;
        let (t, key) = match (role, on) {
            (Role::Load, true) => (&c.load_input_on, "load_input_on"),
            (Role::Load, false) => (&c.load_input_off, "load_input_off"),
            (_, true) => (&c.source_output_on, "source_output_on"),
            (_, false) => (&c.source_output_off, "source_output_off"),
        };
        match t {
            Some(t) => {
                inst.send_template(t, 0.0).await?;
                inst.confirm().await
            }
            None => Err(BenchError::Command {
                instrument: inst.cfg.name.clone(),
                detail: format!("no {key} command: add it under [instrument.commands]"),
            }),
        }
    }

    async fn set_source_inner(&self, volts: f64) -> Result<(), BenchError> {
        let inst = self.holder(Role::InputSource)?;
        match &inst.cfg.commands.source_set_voltage {
            Some(t) => {
                inst.send_template(t, volts).await?;
                inst.confirm().await
            }
            None => Err(BenchError::Command {
                instrument: inst.cfg.name.clone(),
                detail: "no source_set_voltage command".into(),
            }),
        }
    }
}

/// Turn a bench error into the runner's error type, without repeating the instrument name.
pub fn control_error(e: BenchError) -> ControlError {
    let instrument = e.instrument().unwrap_or("bench").to_string();
    let full = e.to_string();
    let prefix = format!("instrument '{instrument}': ");
    let detail = full.strip_prefix(&prefix).unwrap_or(&full).to_string();
    ControlError { instrument, detail }
}

impl BenchControl for Bench {
    fn has_role(&self, role: Role) -> bool {
        self.instruments.iter().any(|i| i.cfg.roles.contains(&role))
    }

    fn identities(&self) -> Vec<InstrumentIdentity> {
        self.instruments
            .iter()
            .map(|i| InstrumentIdentity {
                name: i.cfg.name.clone(),
                roles: i.cfg.roles.clone(),
                link: i.cfg.link.describe(),
                identity: i.identity(),
            })
            .collect()
    }

    async fn set_load(&mut self, mode: LoadMode, value: f64) -> Result<(), ControlError> {
        let r = self.set_load_inner(mode, value).await;
        self.settings_changed();
        r.map_err(control_error)
    }

    async fn set_load_input(&mut self, on: bool) -> Result<(), ControlError> {
        let r = self.switch(Role::Load, on).await;
        self.settings_changed();
        r.map_err(control_error)
    }

    async fn set_source_voltage(&mut self, volts: f64) -> Result<(), ControlError> {
        let r = self.set_source_inner(volts).await;
        self.settings_changed();
        r.map_err(control_error)
    }

    async fn set_source_output(&mut self, on: bool) -> Result<(), ControlError> {
        let r = self.switch(Role::InputSource, on).await;
        self.settings_changed();
        r.map_err(control_error)
    }

    async fn measure(&mut self) -> Result<Measurement, ControlError> {
        self.read_all().await.map_err(control_error)
    }

    async fn safe_state(&mut self) -> Vec<ControlError> {
        self.run_safe_state()
            .await
            .into_iter()
            .map(control_error)
            .collect()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The runner may move a bench and its futures between threads (tokio::spawn).
    #[allow(dead_code)]
    fn bench_and_its_futures_are_send(b: &mut Bench) {
        fn is_send<T: Send>(_: &T) {}
        fn is_sync<T: Sync>() {}
        is_sync::<Bench>();
        is_send(&b.measure());
        is_send(&b.set_load(LoadMode::ConstantCurrent, 0.1));
        is_send(&b.safe_state());
    }

    #[test]
    fn control_errors_do_not_repeat_the_instrument() {
        let e = control_error(BenchError::NoReply {
            instrument: "dmm".into(),
            command: "MEAS:VOLT?".into(),
            ms: 500,
        });
        assert_eq!(e.instrument, "dmm");
        assert!(
            e.detail
                .starts_with("no reply to 'MEAS:VOLT?' within 500 ms"),
            "{}",
            e.detail
        );
        assert_eq!(e.to_string().matches("'dmm'").count(), 1);
    }
}
