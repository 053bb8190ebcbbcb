//! Helpers of the production-floor tests: a simulated bench with a station file beside it (a
//! calibration due date added to the meter's entry of the bench file), a short plan that
//! still judges the output voltage, the limit and the short-circuit current, and headless
//! Chromium runs (dump the DOM, take a screenshot) with a fresh profile.

#![allow(dead_code)]

use super::e2e::Rig;
use regulus::sim::SimOptions;
use std::path::{Path, PathBuf};
use std::process::Command;

pub const LAB: &str = "teaching-lab-0-20v.toml";

/// A short plan: a load sweep, the knee search and a short dwell.
pub const QUICK: &str = r#"
name = "floor-quick"
source = "100 % of vin"
settle = "40 ms"
samples = 1

[interlocks]
max_short_dwell = "1 s"

[[step]]
kind = "load_sweep"
from = "0 A"
to = "95 % of max_load"
points = 4

[[step]]
kind = "knee_search"
drop = "2 %"
resolution = "2 %"

[[step]]
kind = "short_circuit"
dwell = "300 ms"
interval = "100 ms"
recovery_time = "300 ms"
"#;

/// A simulated bench and a station file (`station.toml`) naming it.
pub struct Floor {
    pub rig: Rig,
    pub station: PathBuf,
}

impl Floor {
    pub fn start(seed: u64, pattern: &str) -> Floor {
        Floor::start_with(seed, pattern, SimOptions::default().seed(seed))
    }

    pub fn start_with(seed: u64, pattern: &str, opts: SimOptions) -> Floor {
        Floor::start_station("ST-07", seed, pattern, opts)
    }

    /// A station with its own id, simulated bench and records folder.
    pub fn start_station(id: &str, _seed: u64, pattern: &str, opts: SimOptions) -> Floor {
        let rig = Rig::start(LAB, opts);
        // Several stations' children run at once: none may inherit another bench's
        // pseudo-terminals (an inherited slave keeps a port's exclusive lock alive).
        {
            let guard = super::lock::pty();
            super::lock::cloexec_ptys(&guard);
        }
        let bench = std::fs::read_to_string(&rig.bench).unwrap();
        let bench = bench.replacen(
            "name = \"dmm\"\n",
            "name = \"dmm\"\ncalibration_due = 2027-06-30\n",
            1,
        );
        assert!(bench.contains("calibration_due"), "{bench}");
        std::fs::write(&rig.bench, bench).unwrap();
        let plan = rig.write_plan(QUICK);
        let station = rig.dir.path().join("station.toml");
        std::fs::write(
            &station,
            format!(
                "id = \"{id}\"\nbench = \"bench.toml\"\ndesign = \"{}\"\nplan = \"{}\"\n\
                 records = \"records\"\noperator = \"Operator One\"\nunit_pattern = \"{pattern}\"\n",
                rig.design_path,
                plan.file_name().unwrap().to_string_lossy()
            ),
        )
        .unwrap();
        Floor { rig, station }
    }

    pub fn regulus(&self) -> Command {
        let mut c = Command::new(env!("CARGO_BIN_EXE_regulus"));
        c.current_dir(self.rig.dir.path())
            .env_remove("REGULUS_STATION")
            .env("XDG_CONFIG_HOME", self.rig.dir.path().join("no-config"));
        c
    }
}

/// The browser, or `None` (then a test skips with a notice, or fails when `CI` is set).
pub fn chromium_or_skip(what: &str) -> Option<PathBuf> {
    match regulus::report::pdf::find_chromium() {
        Some(p) => Some(p),
        None if std::env::var_os("CI").is_some() => {
            panic!("chromium is not installed and CI is set: {what} cannot be skipped")
        }
        None => {
            eprintln!("NOTICE: chromium not found; skipping the browser part of {what}");
            None
        }
    }
}

/// Run headless Chromium on a local page with extra flags.
pub fn chromium(exe: &Path, extra: &[&str], page: &Path) -> std::process::Output {
    let profile = tempfile::tempdir().expect("profile dir");
    Command::new(exe)
        .args(regulus::report::pdf::headless_flags(profile.path()))
        .arg("--disable-quic")
        .args(extra)
        .arg(format!("file://{}", page.display()))
        .output()
        .expect("run chromium")
}

/// The page's DOM after rendering, and a screenshot of it at `shot` (checked to be a PNG of
/// some size, and to hold more than one colour: a blank page is one colour).
pub fn render(exe: &Path, page: &Path, shot: &Path, size: &str) -> String {
    let dom = chromium(exe, &["--dump-dom"], page);
    assert!(
        dom.status.success(),
        "chromium --dump-dom failed: {}",
        String::from_utf8_lossy(&dom.stderr)
    );
    let out = chromium(
        exe,
        &[
            &format!("--screenshot={}", shot.display()),
            &format!("--window-size={size}"),
        ],
        page,
    );
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let png = std::fs::read(shot).expect("screenshot written");
    assert_eq!(&png[..8], b"\x89PNG\r\n\x1a\n");
    assert!(
        png.len() > 10_000,
        "screenshot of {} is only {} bytes",
        page.display(),
        png.len()
    );
    String::from_utf8_lossy(&dom.stdout).into_owned()
}
