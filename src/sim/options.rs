//! What a simulated bench is asked for: its options (seed, faults, latency, transports,
//! noise, model, omitted instruments), the fault specs and the errors of starting one. Pure.

use super::instruments::InstrumentKind;
use super::unit::{UnitError, UnitFault, UnitModel};
use serde::Serialize;
use std::time::Duration;

/// Which kind of port each instrument gets.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum TransportMix {
    /// Meters and thermometer on pseudo-terminals, load and source on TCP.
    #[default]
    Mixed,
    /// Every instrument on a pseudo-terminal.
    AllPty,
    /// Every instrument on TCP.
    AllTcp,
    /// Load and source as Modbus RTU devices, every instrument on a pseudo-terminal.
    Modbus,
    /// Load and source as Modbus TCP devices, every instrument on loopback TCP.
    ModbusTcp,
}

impl TransportMix {
    pub(super) fn uses_pty(self, kind: InstrumentKind) -> bool {
        match self {
            TransportMix::AllPty | TransportMix::Modbus => true,
            TransportMix::AllTcp | TransportMix::ModbusTcp => false,
            TransportMix::Mixed => !matches!(kind, InstrumentKind::Load | InstrumentKind::Source),
        }
    }
    /// True when `kind` speaks Modbus (the load and the source of the Modbus mixes).
    pub(super) fn modbus(self, kind: InstrumentKind) -> bool {
        matches!(self, TransportMix::Modbus | TransportMix::ModbusTcp)
            && matches!(kind, InstrumentKind::Load | InstrumentKind::Source)
    }
    pub fn parse(s: &str) -> Option<TransportMix> {
        match s {
            "mixed" => Some(TransportMix::Mixed),
            "pty" => Some(TransportMix::AllPty),
            "tcp" => Some(TransportMix::AllTcp),
            "modbus" => Some(TransportMix::Modbus),
            "modbus-tcp" => Some(TransportMix::ModbusTcp),
            _ => None,
        }
    }
}

/// A fault: built into the unit, or injected on one instrument's port.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub enum Fault {
    Unit(UnitFault),
    Port(InstrumentKind, PortFault),
}

/// One kind of port fault (see [`Fault::parse`] for the spec syntax).
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub enum PortFault {
    GarbageEvery(u32),
    DropEvery(u32),
    SlowMs(u64),
    CloseAfter(u32),
    CloseAtSecs(f64),
    /// Every setting command is answered: `OK`, or `ERR <code>,"<text>"` when refused.
    Acknowledge,
    /// The Nth setting command that carries a value is refused (error -222, not applied).
    RefuseNth(u32),
    /// Settings take effect this many milliseconds after they arrive, in order; `*OPC?`
    /// answers once they have.
    LagMs(u64),
    /// Every Nth reply is sent [`LATE_MS`] late (beyond the written bench file's deadline).
    LateEvery(u32),
    /// Every Nth request of a Modbus device is answered with an exception (0x04).
    ExceptionEvery(u32),
}

/// How late a `late=N` reply is (the bench file `sim --write-bench` writes waits 1 s plus
/// the latency).
pub const LATE_MS: u64 = 1500;

impl Fault {
    /// Parse a fault spec. Unit faults: `sense=0.56`, `diodes=+1`, `diodes=-1`, `theta_sa=12`,
    /// `vref=5.3`, `fb_top=27000`, `fb_bottom=4700`, `fb_swap`, `fold_top=1500`,
    /// `fold_bottom=330`, `pass_stage` (the other stage). Port faults name an instrument (`dmm`, `ammeter`, `eload`, `psu`, `thermo`):
    /// `dmm:garbage=5` (a garbage line before every 5th reply), `dmm:drop=3` (every 3rd reply
    /// lost), `eload:slow=800` (every reply 800 ms late), `psu:close-after=20` (port closes
    /// after 20 commands; streaming meter: lines), `thermo:close-at=5` (closes 5 s after start),
    /// `eload:ack=on` (settings answered `OK` / `ERR`), `eload:refuse=4` (the 4th setting with a
    /// value refused), `eload:lag=300` (settings applied 300 ms late, in order), `dmm:late=3`
    /// (every 3rd reply 1.5 s late).
    /// `eload:exception=4` (a Modbus device answers every 4th request with an exception).
    pub fn parse(spec: &str) -> Result<Fault, String> {
        let Some((inst, rest)) = spec.split_once(':') else {
            if let Some(part) = super::unit::PartFault::parse(spec) {
                return part.map(|p| Fault::Unit(UnitFault::Part(p)));
            }
            return UnitFault::parse(spec).map(Fault::Unit);
        };
        let kind = InstrumentKind::parse(inst.trim()).ok_or_else(|| {
            format!(
                "fault '{spec}': unknown instrument '{inst}' (dmm, ammeter, eload, psu, thermo)"
            )
        })?;
        let (key, value) = rest
            .split_once('=')
            .ok_or_else(|| format!("fault '{spec}': expected INSTRUMENT:KIND=VALUE"))?;
        let count = |v: &str| -> Result<u32, String> {
            v.trim()
                .parse::<u32>()
                .ok()
                .filter(|n| *n > 0)
                .ok_or_else(|| format!("fault '{spec}': '{v}' is not a whole number above 0"))
        };
        let f = match key.trim() {
            "garbage" => PortFault::GarbageEvery(count(value)?),
            "drop" => PortFault::DropEvery(count(value)?),
            "slow" => PortFault::SlowMs(count(value)? as u64),
            "close-after" => PortFault::CloseAfter(count(value)?),
            "ack" => match value.trim() {
                "on" | "1" => PortFault::Acknowledge,
                v => return Err(format!("fault '{spec}': '{v}' is not on")),
            },
            "refuse" => PortFault::RefuseNth(count(value)?),
            "lag" => PortFault::LagMs(count(value)? as u64),
            "late" => PortFault::LateEvery(count(value)?),
            "exception" => PortFault::ExceptionEvery(count(value)?),
            "close-at" => {
                let s: f64 = value
                    .trim()
                    .trim_end_matches('s')
                    .parse()
                    .ok()
                    .filter(|x: &f64| x.is_finite() && *x >= 0.0)
                    .ok_or_else(|| format!("fault '{spec}': '{value}' is not seconds"))?;
                PortFault::CloseAtSecs(s)
            }
            other => {
                return Err(format!(
                    "fault '{spec}': unknown port fault '{other}' \
                     (garbage, drop, slow, close-after, close-at, ack, refuse, lag, late, exception)"
                ))
            }
        };
        Ok(Fault::Port(kind, f))
    }
}

impl PortFault {
    /// Add this fault to an instrument's fault set.
    pub fn apply_to(self, f: &mut super::instruments::PortFaults) {
        match self {
            PortFault::GarbageEvery(e) => f.garbage_every = Some(e),
            PortFault::DropEvery(e) => f.drop_every = Some(e),
            PortFault::SlowMs(ms) => f.slow_ms = ms,
            PortFault::CloseAfter(c) => f.close_after = Some(c),
            PortFault::CloseAtSecs(s) => f.close_at_s = Some(s),
            PortFault::Acknowledge => f.acknowledge = true,
            PortFault::RefuseNth(n) => f.refuse_nth = Some(n),
            PortFault::LagMs(ms) => f.lag_ms = ms,
            PortFault::LateEvery(n) => f.late_every = Some(n),
            // Answered by the Modbus devices themselves (`sim::modbus`), not the text ports.
            PortFault::ExceptionEvery(_) => {}
        }
    }
}

/// Options of a simulated bench (builder methods take and return `self`).
#[derive(Debug, Clone, Serialize)]
pub struct SimOptions {
    /// Seed of the as-built unit and of the instruments' noise.
    pub seed: u64,
    pub faults: Vec<Fault>,
    /// Reply latency of every instrument (zero allowed).
    pub latency: Duration,
    pub transport: TransportMix,
    /// Noise multiplier (1 = the instruments' own noise, 0 = noiseless readings).
    pub noise: f64,
    pub model: UnitModel,
    /// Instruments left off the bench (e.g. the source, so the unit always runs from its own
    /// input).
    pub omit: Vec<InstrumentKind>,
}

impl Default for SimOptions {
    fn default() -> Self {
        SimOptions {
            seed: 1,
            faults: Vec::new(),
            latency: Duration::from_millis(3),
            transport: TransportMix::Mixed,
            noise: 1.0,
            model: UnitModel::default(),
            omit: Vec::new(),
        }
    }
}

impl SimOptions {
    pub fn seed(mut self, seed: u64) -> Self {
        self.seed = seed;
        self
    }
    pub fn fault(mut self, f: Fault) -> Self {
        self.faults.push(f);
        self
    }
    pub fn latency(mut self, d: Duration) -> Self {
        self.latency = d;
        self
    }
    pub fn transport(mut self, t: TransportMix) -> Self {
        self.transport = t;
        self
    }
    pub fn noise(mut self, scale: f64) -> Self {
        self.noise = scale;
        self
    }
    pub fn model(mut self, m: UnitModel) -> Self {
        self.model = m;
        self
    }
    /// Faults that cannot apply to this bench: an exception fault on an instrument that does
    /// not speak Modbus.
    pub fn check_faults(&self) -> Result<(), SimError> {
        for f in &self.faults {
            if let Fault::Port(k, PortFault::ExceptionEvery(_)) = f {
                if !self.transport.modbus(*k) {
                    return Err(SimError::FaultNeedsModbus {
                        instrument: k.name().to_string(),
                    });
                }
            }
        }
        Ok(())
    }
    pub fn without(mut self, kind: InstrumentKind) -> Self {
        if !self.omit.contains(&kind) {
            self.omit.push(kind);
        }
        self
    }
}

/// The simulated bench could not start.
#[derive(Debug, thiserror::Error)]
pub enum SimError {
    #[error("simulated unit: {0}")]
    Unit(#[from] UnitError),
    #[error("cannot create a pseudo-terminal for '{instrument}': {detail} (check that /dev/ptmx exists and is usable, or put every instrument on TCP)")]
    Pty { instrument: String, detail: String },
    #[error("fault '{instrument}:exception' needs a Modbus device: only eload and psu speak Modbus, with --transport modbus or modbus-tcp")]
    FaultNeedsModbus { instrument: String },
    #[error("cannot listen on 127.0.0.1 for '{instrument}': {source}")]
    Listen {
        instrument: String,
        #[source]
        source: std::io::Error,
    },
    #[error("cannot start a thread for '{instrument}': {source}")]
    Thread {
        instrument: String,
        #[source]
        source: std::io::Error,
    },
}
