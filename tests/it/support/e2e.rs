//! Shared helpers of the end-to-end tests: an in-process simulated bench with its bench file
//! in a temp folder, the `regulus` binary run against it, and checks of a finished record.
//! The simulated bench's ports are real pseudo-terminals and loopback TCP; only the bench
//! file is handed to the binary, as a user would.

#![allow(dead_code)]

use regulus::design::Design;
use regulus::record::{read_run, RunRecord, READINGS_HEADER};
use regulus::sim::{SimBench, SimOptions};
use std::path::{Path, PathBuf};
use std::process::{Child, Command, Output, Stdio};
use std::time::{Duration, Instant};

/// End-to-end tests run one at a time (with the other tests that take the binary-wide
/// serial lock): each starts a simulated bench and a child process.
pub use super::lock::serial;

pub fn sample(name: &str) -> String {
    format!("{}/samples/{name}", env!("CARGO_MANIFEST_DIR"))
}

pub fn design(name: &str) -> Design {
    Design::load(Path::new(&sample(name))).unwrap()
}

/// A simulated bench and a temp folder holding its bench file, the plan and the records.
pub struct Rig {
    pub sim: SimBench,
    pub dir: tempfile::TempDir,
    pub design_path: String,
    pub bench: PathBuf,
    pub records: PathBuf,
}

impl Rig {
    pub fn start(design_name: &str, opts: SimOptions) -> Rig {
        let design_path = sample(design_name);
        let sim = SimBench::start(&design(design_name), opts).unwrap();
        let dir = tempfile::tempdir().unwrap();
        let bench = dir.path().join("bench.toml");
        std::fs::write(&bench, sim.bench_toml()).unwrap();
        let records = dir.path().join("records");
        Rig {
            sim,
            dir,
            design_path,
            bench,
            records,
        }
    }

    pub fn write_plan(&self, text: &str) -> PathBuf {
        let p = self.dir.path().join("plan.toml");
        std::fs::write(&p, text).unwrap();
        p
    }

    /// `regulus run` for `unit` with this rig's bench and records and the given plan.
    pub fn command(&self, unit: &str, plan: &Path) -> Command {
        let mut c = Command::new(env!("CARGO_BIN_EXE_regulus"));
        c.args([
            "run",
            "--yes",
            "--unit",
            unit,
            "--design",
            &self.design_path,
        ])
        .arg("--bench")
        .arg(&self.bench)
        .arg("--plan")
        .arg(plan)
        .arg("--records")
        .arg(&self.records);
        c
    }

    pub fn run(&self, unit: &str, plan_text: &str) -> Output {
        let plan = self.write_plan(plan_text);
        self.command(unit, &plan).output().unwrap()
    }

    pub fn spawn(&self, unit: &str, plan_text: &str) -> ChildGuard {
        let plan = self.write_plan(plan_text);
        ChildGuard(
            self.command(unit, &plan)
                .stdout(Stdio::piped())
                .stderr(Stdio::piped())
                .spawn()
                .unwrap(),
        )
    }

    /// The one run folder of `unit`.
    pub fn run_dir(&self, unit: &str) -> PathBuf {
        let mut dirs: Vec<PathBuf> = std::fs::read_dir(self.records.join(unit))
            .unwrap()
            .map(|e| e.unwrap().path())
            .collect();
        assert_eq!(dirs.len(), 1, "{dirs:?}");
        dirs.remove(0)
    }

    /// Wait for the run folder of `unit` to appear (the child creates it).
    pub fn wait_run_dir(&self, unit: &str, limit: Duration) -> PathBuf {
        let t0 = Instant::now();
        loop {
            if let Ok(mut rd) = std::fs::read_dir(self.records.join(unit)) {
                if let Some(Ok(e)) = rd.next() {
                    return e.path();
                }
            }
            assert!(t0.elapsed() < limit, "no run folder after {limit:?}");
            std::thread::sleep(Duration::from_millis(10));
        }
    }

    /// Is the electronic load's input on, as the simulated load holds it?
    pub fn load_input_on(&self) -> bool {
        self.sim.state().2.load.input_on
    }
}

/// Ends the child if a test fails before it exits.
pub struct ChildGuard(pub Child);

impl Drop for ChildGuard {
    fn drop(&mut self) {
        let _ = self.0.kill();
        let _ = self.0.wait();
    }
}

impl ChildGuard {
    /// Exit code, stdout and stderr once the child has exited.
    pub fn finish(mut self) -> (Option<i32>, String, String) {
        let mut out = String::new();
        let mut err = String::new();
        if let Some(mut s) = self.0.stdout.take() {
            let _ = std::io::Read::read_to_string(&mut s, &mut out);
        }
        if let Some(mut s) = self.0.stderr.take() {
            let _ = std::io::Read::read_to_string(&mut s, &mut err);
        }
        let code = self.0.wait().unwrap().code();
        (code, out, err)
    }

    pub fn signal(&self, sig: libc::c_int) {
        // SAFETY: kill(2) on our own child's pid; no memory is touched.
        let r = unsafe { libc::kill(self.0.id() as libc::pid_t, sig) };
        assert_eq!(r, 0, "kill({sig}) failed");
    }
}

/// Complete data lines of readings.csv (a line still being written is left out).
pub fn complete_rows(dir: &Path) -> Vec<String> {
    let text = std::fs::read_to_string(dir.join("readings.csv")).unwrap_or_default();
    let mut lines: Vec<String> = Vec::new();
    let mut rest = text.as_str();
    while let Some(k) = rest.find('\n') {
        lines.push(rest[..k].to_string());
        rest = &rest[k + 1..];
    }
    if !lines.is_empty() {
        lines.remove(0); // header
    }
    lines
}

/// Poll readings.csv until it holds at least `n` complete rows.
pub fn wait_rows(dir: &Path, n: usize, limit: Duration) -> Vec<String> {
    let t0 = Instant::now();
    loop {
        let rows = complete_rows(dir);
        if rows.len() >= n {
            return rows;
        }
        assert!(
            t0.elapsed() < limit,
            "only {} rows after {limit:?}",
            rows.len()
        );
        std::thread::sleep(Duration::from_millis(10));
    }
}

/// Read a run back and check what every record must satisfy (docs/ARCHITECTURE.md, record
/// layout): header exact, every row parses, snapshots byte-for-byte, rows counted in run.json
/// match readings.csv when the run finished.
pub fn check_record(dir: &Path, design: &str, bench: &Path, plan: &Path) -> RunRecord {
    let text = std::fs::read_to_string(dir.join("readings.csv")).unwrap();
    assert_eq!(text.lines().next(), Some(READINGS_HEADER));
    let rec = read_run(dir).unwrap_or_else(|e| panic!("record does not read back: {e}"));
    assert_eq!(
        std::fs::read(dir.join("design.toml")).unwrap(),
        std::fs::read(design).unwrap()
    );
    assert_eq!(
        std::fs::read(dir.join("bench.toml")).unwrap(),
        std::fs::read(bench).unwrap()
    );
    assert_eq!(
        std::fs::read(dir.join("plan.toml")).unwrap(),
        std::fs::read(plan).unwrap()
    );
    assert_eq!(rec.rows.len(), text.lines().count() - 1);
    rec
}

pub fn show(o: &Output) -> String {
    format!(
        "exit {:?}\nstdout:\n{}\nstderr:\n{}",
        o.status.code(),
        String::from_utf8_lossy(&o.stdout),
        String::from_utf8_lossy(&o.stderr)
    )
}
