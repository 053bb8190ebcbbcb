//! The simulated bench: an as-built unit drawn from a design ([`mod@unit`]) and simulated
//! instruments that speak the project's wire protocol ([`instruments`]) on pseudo-terminals and
//! loopback TCP ([`serve`]). It is a product feature for learning and rehearsing, and the ground
//! the end-to-end tests run on. [`SimBench`] starts everything and writes a bench file for its
//! ports; it must not parse bench files or drive a test plan itself.

pub mod instruments;
pub mod serve;
pub mod unit;

use crate::design::Design;
use instruments::{FaultSchedule, InstrumentKind, InstrumentState, Noise, PortFaults};
use serde::Serialize;
use serve::{lock, Endpoint, Shared, World};
use std::collections::BTreeMap;
use std::fmt::Write as _;
use std::net::{SocketAddr, TcpListener};
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::{Arc, Mutex};
use std::thread::JoinHandle;
use std::time::{Duration, Instant};
pub use unit::{Controls, OperatingPoint, SimUnit, Thermal, Truth, UnitFault, UnitModel};

/// Pseudo-terminal pair creation is not thread-safe: every pair in this process is created
/// while holding this lock. Tests that create pairs themselves should hold it too.
pub static PTY_PAIR_LOCK: Mutex<()> = Mutex::new(());

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
}

impl TransportMix {
    fn uses_pty(self, kind: InstrumentKind) -> bool {
        match self {
            TransportMix::AllPty => true,
            TransportMix::AllTcp => false,
            TransportMix::Mixed => !matches!(kind, InstrumentKind::Load | InstrumentKind::Source),
        }
    }
    pub fn parse(s: &str) -> Option<TransportMix> {
        match s {
            "mixed" => Some(TransportMix::Mixed),
            "pty" => Some(TransportMix::AllPty),
            "tcp" => Some(TransportMix::AllTcp),
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
}

impl Fault {
    /// Parse a fault spec. Unit faults: `sense=0.56`, `diodes=+1`, `diodes=-1`, `theta_sa=12`,
    /// `vref=5.3`. Port faults name an instrument (`dmm`, `ammeter`, `eload`, `psu`, `thermo`):
    /// `dmm:garbage=5` (a garbage line before every 5th reply), `dmm:drop=3` (every 3rd reply
    /// lost), `eload:slow=800` (every reply 800 ms late), `psu:close-after=20` (port closes
    /// after 20 commands; streaming meter: lines), `thermo:close-at=5` (closes 5 s after start).
    pub fn parse(spec: &str) -> Result<Fault, String> {
        let Some((inst, rest)) = spec.split_once(':') else {
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
                     (garbage, drop, slow, close-after, close-at)"
                ))
            }
        };
        Ok(Fault::Port(kind, f))
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
    Unit(#[from] unit::UnitError),
    #[error("cannot create a pseudo-terminal for '{instrument}': {detail} (check that /dev/ptmx exists and is usable, or put every instrument on TCP)")]
    Pty { instrument: String, detail: String },
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

/// Where an instrument listens.
#[derive(Debug, Clone, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Link {
    /// A pseudo-terminal: the bench opens this path (e.g. `/dev/pts/4`).
    Pty(String),
    /// A TCP listener on 127.0.0.1.
    Tcp(SocketAddr),
}

impl std::fmt::Display for Link {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            Link::Pty(p) => write!(f, "serial {p}"),
            Link::Tcp(a) => write!(f, "tcp {a}"),
        }
    }
}

/// One simulated instrument's port.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct PortInfo {
    pub kind: InstrumentKind,
    pub name: &'static str,
    pub link: Link,
}

/// A running simulated bench. Dropping it shuts it down (ports closed, threads joined).
pub struct SimBench {
    design_name: String,
    options: SimOptions,
    ports: Vec<PortInfo>,
    truth: Truth,
    world: Arc<Mutex<World>>,
    endpoints: BTreeMap<InstrumentKind, Arc<Mutex<Endpoint>>>,
    stop: Arc<AtomicBool>,
    threads: Vec<JoinHandle<()>>,
}

impl std::fmt::Debug for SimBench {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("SimBench")
            .field("ports", &self.ports)
            .finish_non_exhaustive()
    }
}

impl SimBench {
    /// Build the as-built unit, open every instrument's port and start serving. Returns once
    /// all ports are listening.
    pub fn start(design: &Design, opts: SimOptions) -> Result<SimBench, SimError> {
        let unit_faults: Vec<UnitFault> = opts
            .faults
            .iter()
            .filter_map(|f| match f {
                Fault::Unit(u) => Some(u.clone()),
                Fault::Port(..) => None,
            })
            .collect();
        let unit = SimUnit::build(design, opts.seed, &unit_faults, opts.model.clone())?;
        let truth = unit.truth();
        let world = Arc::new(Mutex::new(World::new(unit)));
        let stop = Arc::new(AtomicBool::new(false));
        let started = Instant::now();
        let mut bench = SimBench {
            design_name: design.design.name.clone(),
            options: opts.clone(),
            ports: Vec::new(),
            truth,
            world: world.clone(),
            endpoints: BTreeMap::new(),
            stop: stop.clone(),
            threads: Vec::new(),
        };
        for (n, kind) in InstrumentKind::ALL.into_iter().enumerate() {
            if opts.omit.contains(&kind) {
                continue;
            }
            let mut faults = PortFaults::default();
            for f in &opts.faults {
                if let Fault::Port(k, pf) = f {
                    if *k == kind {
                        match *pf {
                            PortFault::GarbageEvery(e) => faults.garbage_every = Some(e),
                            PortFault::DropEvery(e) => faults.drop_every = Some(e),
                            PortFault::SlowMs(ms) => faults.slow_ms = ms,
                            PortFault::CloseAfter(c) => faults.close_after = Some(c),
                            PortFault::CloseAtSecs(s) => faults.close_at_s = Some(s),
                        }
                    }
                }
            }
            let endpoint = Arc::new(Mutex::new(Endpoint {
                state: InstrumentState::new(kind, format!("SIM{}-{}", opts.seed, n + 1)),
                noise: Noise::new(
                    opts.seed
                        .wrapping_mul(0x9E37_79B9)
                        .wrapping_add(n as u64 + 1),
                    opts.noise,
                ),
                faults: FaultSchedule::new(faults),
                latency: opts.latency,
                closed: Arc::new(AtomicBool::new(false)),
            }));
            bench.endpoints.insert(kind, endpoint.clone());
            let sh = Shared {
                world: world.clone(),
                endpoint,
                stop: stop.clone(),
                started,
            };
            let name = kind.name();
            // On any error `bench` is dropped, which stops the threads already started.
            let (link, handle) = if opts.transport.uses_pty(kind) {
                let (master, path) = open_pty(name)?;
                let port = serve::PtyPort {
                    master,
                    slave_path: path.clone(),
                };
                let h = serve::spawn_pty(port, sh).map_err(|source| SimError::Thread {
                    instrument: name.to_string(),
                    source,
                })?;
                (Link::Pty(path), h)
            } else {
                let listener =
                    TcpListener::bind(("127.0.0.1", 0)).map_err(|source| SimError::Listen {
                        instrument: name.to_string(),
                        source,
                    })?;
                let addr = listener.local_addr().map_err(|source| SimError::Listen {
                    instrument: name.to_string(),
                    source,
                })?;
                let h = serve::spawn_tcp(listener, sh).map_err(|source| SimError::Thread {
                    instrument: name.to_string(),
                    source,
                })?;
                (Link::Tcp(addr), h)
            };
            bench.threads.push(handle);
            bench.ports.push(PortInfo { kind, name, link });
        }
        Ok(bench)
    }

    /// The instruments' ports.
    pub fn ports(&self) -> &[PortInfo] {
        &self.ports
    }

    /// The port of one instrument.
    pub fn port(&self, kind: InstrumentKind) -> Option<&Link> {
        self.ports.iter().find(|p| p.kind == kind).map(|p| &p.link)
    }

    /// True values of the as-built unit (junctions at ambient).
    pub fn truth(&self) -> &Truth {
        &self.truth
    }

    /// The unit's present operating point and junction temperatures (advanced to now).
    pub fn state(&self) -> (OperatingPoint, Thermal, Controls) {
        let mut w = lock(&self.world);
        let _ = w.sync();
        let c = w.controls;
        (w.unit.operating_point(&c), w.unit.thermal(), c)
    }

    /// True once an instrument's port has closed for good (a closing fault fired).
    pub fn is_closed(&self, kind: InstrumentKind) -> bool {
        self.endpoints
            .get(&kind)
            .is_some_and(|e| lock(e).closed.load(Ordering::SeqCst))
    }

    /// A bench file for this bench's ports, in the project's bench file format.
    pub fn bench_toml(&self) -> String {
        bench_toml(&self.design_name, &self.options, &self.ports)
    }

    /// Close every port and join the serving threads.
    pub fn shutdown(mut self) {
        self.stop_threads();
    }

    fn stop_threads(&mut self) {
        self.stop.store(true, Ordering::SeqCst);
        for h in self.threads.drain(..) {
            let _ = h.join();
        }
    }
}

impl Drop for SimBench {
    fn drop(&mut self) {
        self.stop_threads();
    }
}

/// Create a pseudo-terminal pair (under [`PTY_PAIR_LOCK`]), keep the master, and return the
/// slave's path. The slave handle is closed: the bench reopens it by path.
fn open_pty(name: &str) -> Result<(serialport::TTYPort, String), SimError> {
    use serialport::SerialPort;
    let err = |detail: String| SimError::Pty {
        instrument: name.to_string(),
        detail,
    };
    let _guard = lock(&PTY_PAIR_LOCK);
    let (master, slave) = serialport::TTYPort::pair().map_err(|e| err(e.to_string()))?;
    let path = slave
        .name()
        .ok_or_else(|| err("the pseudo-terminal has no path".to_string()))?;
    drop(slave);
    Ok((master, path))
}

fn toml_str(s: &str) -> String {
    let mut out = String::with_capacity(s.len() + 2);
    out.push('"');
    for c in s.chars() {
        match c {
            '"' => out.push_str("\\\""),
            '\\' => out.push_str("\\\\"),
            c if (c as u32) < 0x20 => {
                let _ = write!(out, "\\u{:04X}", c as u32);
            }
            c => out.push(c),
        }
    }
    out.push('"');
    out
}

/// Bench file text for a simulated bench's ports (instrument names as in [`InstrumentKind`]).
pub fn bench_toml(design_name: &str, opts: &SimOptions, ports: &[PortInfo]) -> String {
    let mut s = String::new();
    let _ = writeln!(
        s,
        "# Bench file written by `regulus sim` for a simulated bench on this machine.\n\
         # The ports below exist only while that simulated bench runs.\n"
    );
    let _ = writeln!(s, "[bench]");
    let _ = writeln!(s, "name = {}", toml_str("simulated bench"));
    let _ = writeln!(
        s,
        "note = {}\n",
        toml_str(&format!(
            "simulated unit of '{design_name}', seed {}",
            opts.seed
        ))
    );
    // Slow-reply faults need a longer whole-reply deadline than the default.
    let slowest = opts
        .faults
        .iter()
        .filter_map(|f| match f {
            Fault::Port(_, PortFault::SlowMs(ms)) => Some(*ms),
            _ => None,
        })
        .max()
        .unwrap_or(0);
    let timeout_ms = 1000 + opts.latency.as_millis() as u64 + slowest;
    for p in ports {
        let _ = writeln!(s, "[[instrument]]");
        let _ = writeln!(s, "name = {}", toml_str(p.name));
        let (roles, preset) = match p.kind {
            InstrumentKind::QueryMeter => ("\"output_voltmeter\"", "scpi_meter"),
            InstrumentKind::StreamMeter => ("\"output_ammeter\"", "tagged_stream_meter"),
            InstrumentKind::Load => ("\"load\"", "scpi_load"),
            InstrumentKind::Source => (
                "\"input_source\", \"input_voltmeter\", \"input_ammeter\"",
                "scpi_source",
            ),
            InstrumentKind::Thermometer => ("\"thermometer\"", "scpi_thermometer"),
        };
        let _ = writeln!(s, "roles = [{roles}]");
        let _ = writeln!(s, "preset = {}", toml_str(preset));
        match &p.link {
            Link::Pty(path) => {
                let _ = writeln!(s, "serial = {{ port = {}, baud = 115200 }}", toml_str(path));
            }
            Link::Tcp(addr) => {
                let _ = writeln!(
                    s,
                    "tcp = {{ host = {}, port = {} }}",
                    toml_str(&addr.ip().to_string()),
                    addr.port()
                );
            }
        }
        let _ = writeln!(s, "reply_timeout_ms = {timeout_ms}");
        if p.kind == InstrumentKind::StreamMeter {
            let _ = writeln!(s, "\n[instrument.reading]");
            let _ = writeln!(s, "style = \"stream\"");
            let _ = writeln!(s, "pick = \"average\"");
            let _ = writeln!(s, "window_ms = 250");
            let _ = writeln!(s, "max_age_ms = 1000");
            let _ = writeln!(s, "tags = {{ output_ammeter = \"DCI\" }}");
        }
        s.push('\n');
    }
    s
}
