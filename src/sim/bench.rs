//! The running simulated bench: builds the as-built unit, opens every instrument's port
//! (pseudo-terminal or loopback TCP), starts the serving threads and shuts them down on drop.

use super::bench_file::bench_toml;
use super::instruments::{FaultSchedule, InstrumentKind, InstrumentState, Noise, PortFaults};
use super::options::{Fault, PortFault, SimError, SimOptions};
use super::ports::{Link, PortInfo, PortProtocol};
use super::serve::{self, lock, Endpoint, Shared, World};
use super::unit::{Controls, OperatingPoint, SimUnit, Thermal, Truth, UnitFault};
use crate::design::Design;
use std::collections::BTreeMap;
use std::net::TcpListener;
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::{Arc, Mutex};
use std::thread::JoinHandle;
use std::time::Instant;

/// Pseudo-terminal pair creation is not thread-safe: every pair in this process is created
/// while holding this lock. Tests that create pairs themselves should hold it too.
pub static PTY_PAIR_LOCK: Mutex<()> = Mutex::new(());

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
                        pf.apply_to(&mut faults);
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
            // Modbus devices (see `modbus`): the load and source of the Modbus mixes.
            let exception_every = opts.faults.iter().find_map(|f| match f {
                Fault::Port(k, PortFault::ExceptionEvery(e)) if *k == kind => Some(*e),
                _ => None,
            });
            let modbus = opts.transport.modbus(kind);
            opts.check_faults()?;
            let protocol = if modbus {
                PortProtocol::Modbus
            } else {
                PortProtocol::Text
            };
            let ms = modbus.then(|| super::modbus::ModbusShared {
                shared: sh.clone(),
                device: Arc::new(Mutex::new(super::modbus_map::ModbusDeviceState::new(
                    kind,
                    &format!("SIM{}-{}", opts.seed, n + 1),
                    opts.seed
                        .wrapping_mul(0x9E37_79B9)
                        .wrapping_add(n as u64 + 101),
                    opts.noise,
                ))),
                exception_every,
                requests: Arc::new(std::sync::atomic::AtomicU32::new(0)),
            });
            // On any error `bench` is dropped, which stops the threads already started.
            let (link, handle) = if opts.transport.uses_pty(kind) {
                let (master, path) = open_pty(name)?;
                let port = serve::PtyPort {
                    master,
                    slave_path: path.clone(),
                };
                let h = match ms {
                    Some(ms) => super::modbus::spawn_rtu(port, ms),
                    None => serve::spawn_pty(port, sh),
                }
                .map_err(|source| SimError::Thread {
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
                let h = match ms {
                    Some(ms) => super::modbus::spawn_tcp(listener, ms),
                    None => serve::spawn_tcp(listener, sh),
                }
                .map_err(|source| SimError::Thread {
                    instrument: name.to_string(),
                    source,
                })?;
                (Link::Tcp(addr), h)
            };
            bench.threads.push(handle);
            bench.ports.push(PortInfo {
                kind,
                name,
                link,
                protocol,
            });
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

    /// The unit's thermal state at each moment an instrument looked at it (wall clock, oldest
    /// first; the most recent [`super::serve::HISTORY_LEN`]).
    pub fn thermal_history(&self) -> Vec<(chrono::DateTime<chrono::Utc>, Thermal)> {
        lock(&self.world).history.iter().copied().collect()
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
