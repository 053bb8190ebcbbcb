//! Running ngspice in batch mode behind the small [`Simulator`] trait, and the simulated V-I
//! curve of a design. Only [`Ngspice`] starts a process.
use super::curve::CurveSummary;
use super::netlist::{self, ModelMode, Netlist, NetlistOptions};
use super::{build, curve_from_print, summarize, KNEE_DROP};
use crate::design::Design;
use std::io::Read;
use std::path::{Path, PathBuf};
use std::process::{Command, Stdio};
use std::sync::atomic::{AtomicU64, Ordering};
use std::time::{Duration, Instant};

/// How to install the simulator, for messages.
pub const INSTALL_HINT: &str =
    "install ngspice (Debian/Ubuntu: apt-get install ngspice) and make sure `ngspice` is on the PATH";

/// Longest a simulation may run before it is stopped.
pub const SIMULATION_TIMEOUT: Duration = Duration::from_secs(60);

/// Errors of the simulator cross-check.
#[derive(Debug, thiserror::Error)]
pub enum SpiceError {
    #[error("ngspice was not found on the PATH: {INSTALL_HINT}")]
    NotInstalled,
    #[error("{0}")]
    Netlist(#[from] netlist::NetlistError),
    #[error("{what}: {source}")]
    Io {
        what: String,
        #[source]
        source: std::io::Error,
    },
    #[error("ngspice failed ({status}) on {netlist}; its last output lines:\n{tail}")]
    Failed {
        status: String,
        netlist: String,
        tail: String,
    },
    #[error("ngspice did not finish within {} s on {netlist}; stopped", .seconds)]
    Timeout { seconds: u64, netlist: String },
    #[error("unexpected ngspice output at line {line}: {message}")]
    Output { line: usize, message: String },
    #[error("{path}:{line}: {message}")]
    Csv {
        path: String,
        line: usize,
        message: String,
    },
    #[error("the simulated curve has no points to summarise")]
    EmptyCurve,
}

/// Runs a netlist and returns what the simulator printed on standard output.
pub trait Simulator {
    /// Name and version, e.g. `ngspice-39`.
    fn version(&self) -> Result<String, SpiceError>;
    /// Run `netlist` (the text of a netlist file) in batch mode; an error when it prints no
    /// table.
    fn run(&self, netlist: &str) -> Result<String, SpiceError>;
}

/// The ngspice program on the PATH (or at a given path), run in batch mode (`ngspice -b`).
#[derive(Debug, Clone)]
pub struct Ngspice {
    program: PathBuf,
    timeout: Duration,
}

impl Default for Ngspice {
    fn default() -> Self {
        Ngspice {
            program: PathBuf::from("ngspice"),
            timeout: SIMULATION_TIMEOUT,
        }
    }
}

static RUN_COUNTER: AtomicU64 = AtomicU64::new(0);

fn spawn_error(e: std::io::Error, what: &str) -> SpiceError {
    if e.kind() == std::io::ErrorKind::NotFound {
        SpiceError::NotInstalled
    } else {
        SpiceError::Io {
            what: what.to_string(),
            source: e,
        }
    }
}

fn tail(text: &str, n: usize) -> String {
    let lines: Vec<&str> = text.lines().filter(|l| !l.trim().is_empty()).collect();
    lines[lines.len().saturating_sub(n)..].join("\n")
}

/// The simulator's name and version from the text `ngspice -v` prints (`** ngspice-39 : ...`).
pub fn parse_version(text: &str) -> Option<String> {
    text.split_whitespace()
        .find(|t| t.starts_with("ngspice-"))
        .map(|t| t.trim_end_matches([':', ',']).to_string())
}

impl Ngspice {
    /// Use a specific program instead of `ngspice` on the PATH.
    pub fn with_program(mut self, program: impl Into<PathBuf>) -> Self {
        self.program = program.into();
        self
    }

    pub fn with_timeout(mut self, timeout: Duration) -> Self {
        self.timeout = timeout;
        self
    }

    /// True when the program can be started.
    pub fn available(&self) -> bool {
        self.version().is_ok()
    }

    fn run_file(&self, path: &Path) -> Result<String, SpiceError> {
        let mut child = Command::new(&self.program)
            .arg("-b")
            .arg(path)
            .stdin(Stdio::null())
            .stdout(Stdio::piped())
            .stderr(Stdio::piped())
            .spawn()
            .map_err(|e| spawn_error(e, "starting ngspice"))?;
        // Drain both pipes on threads so a chatty simulator cannot block on a full pipe.
        let mut out_pipe = child.stdout.take();
        let mut err_pipe = child.stderr.take();
        let out_t = std::thread::spawn(move || {
            let mut b = Vec::new();
            if let Some(p) = out_pipe.as_mut() {
                let _ = p.read_to_end(&mut b);
            }
            String::from_utf8_lossy(&b).into_owned()
        });
        let err_t = std::thread::spawn(move || {
            let mut b = Vec::new();
            if let Some(p) = err_pipe.as_mut() {
                let _ = p.read_to_end(&mut b);
            }
            String::from_utf8_lossy(&b).into_owned()
        });
        let start = Instant::now();
        let status = loop {
            match child.try_wait() {
                Ok(Some(st)) => break st,
                Ok(None) if start.elapsed() > self.timeout => {
                    let _ = child.kill();
                    let _ = child.wait();
                    return Err(SpiceError::Timeout {
                        seconds: self.timeout.as_secs(),
                        netlist: path.display().to_string(),
                    });
                }
                Ok(None) => std::thread::sleep(Duration::from_millis(5)),
                Err(e) => {
                    return Err(SpiceError::Io {
                        what: "waiting for ngspice".into(),
                        source: e,
                    })
                }
            }
        };
        let stdout = out_t.join().unwrap_or_default();
        let stderr = err_t.join().unwrap_or_default();
        if !status.success() {
            return Err(SpiceError::Failed {
                status: status.to_string(),
                netlist: path.display().to_string(),
                tail: tail(&format!("{stdout}\n{stderr}"), 12),
            });
        }
        if !stdout.lines().any(|l| l.starts_with("Index")) {
            // ngspice often exits with success after a failed analysis (no convergence, a
            // bad element): its reasons are on stderr.
            return Err(SpiceError::Failed {
                status: "finished without printing the sweep table".into(),
                netlist: path.display().to_string(),
                tail: tail(&format!("{stdout}\n{stderr}"), 12),
            });
        }
        Ok(stdout)
    }
}

impl Simulator for Ngspice {
    fn version(&self) -> Result<String, SpiceError> {
        let out = Command::new(&self.program)
            .arg("-v")
            .stdin(Stdio::null())
            .output()
            .map_err(|e| spawn_error(e, "starting ngspice -v"))?;
        let text = String::from_utf8_lossy(&out.stdout).to_string()
            + &String::from_utf8_lossy(&out.stderr);
        Ok(parse_version(&text).unwrap_or_else(|| "ngspice (version not reported)".into()))
    }

    fn run(&self, netlist: &str) -> Result<String, SpiceError> {
        let n = RUN_COUNTER.fetch_add(1, Ordering::Relaxed);
        let path =
            std::env::temp_dir().join(format!("regulus-spice-{}-{n}.cir", std::process::id()));
        std::fs::write(&path, netlist).map_err(|source| SpiceError::Io {
            what: format!("writing the netlist {}", path.display()),
            source,
        })?;
        let result = self.run_file(&path);
        let _ = std::fs::remove_file(&path);
        result
    }
}

/// A simulated V-I curve of a design.
#[derive(Debug, Clone, PartialEq)]
pub struct SimulatedCurve {
    /// (load current [A], output voltage [V]) in sweep order, open circuit first, short last.
    pub points: Vec<(f64, f64)>,
    /// Simulator name and version, e.g. `ngspice-39`.
    pub simulator: String,
    pub models: ModelMode,
    pub summary: CurveSummary,
    /// The netlist that produced it.
    pub netlist: Netlist,
}

/// Simulate a design with junction models matched to its drops, using ngspice on the PATH.
pub fn simulate(d: &Design) -> Result<SimulatedCurve, SpiceError> {
    simulate_with(d, &NetlistOptions::default(), &Ngspice::default())
}

/// Simulate a design with the given options and simulator.
pub fn simulate_with(
    d: &Design,
    opts: &NetlistOptions,
    sim: &impl Simulator,
) -> Result<SimulatedCurve, SpiceError> {
    let netlist = build(d, opts)?;
    let simulator = sim.version()?;
    let out = sim.run(&netlist.text)?;
    let points = curve_from_print(&out)?;
    let summary = summarize(&points, KNEE_DROP).ok_or(SpiceError::EmptyCurve)?;
    Ok(SimulatedCurve {
        points,
        simulator,
        models: opts.models,
        summary,
        netlist,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn version_is_read_from_the_banner() {
        let banner = "******\n** ngspice-39 : Circuit level simulation program\n";
        assert_eq!(parse_version(banner).as_deref(), Some("ngspice-39"));
        assert_eq!(parse_version("nothing here"), None);
    }

    #[test]
    fn a_missing_program_reads_as_not_installed() {
        let sim = Ngspice::default().with_program("/nonexistent/regulus-test/ngspice");
        assert!(matches!(sim.version(), Err(SpiceError::NotInstalled)));
        assert!(matches!(
            sim.run("* x\n.end\n"),
            Err(SpiceError::NotInstalled)
        ));
        assert!(SpiceError::NotInstalled
            .to_string()
            .contains("apt-get install ngspice"));
    }
}
