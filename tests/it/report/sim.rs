//! End to end on the simulated bench: `regulus demo` tests two simulated units of the
//! teaching-lab design over pseudo-terminals and loopback TCP (one built with a 0.68 ohm sense
//! resistor where the design has 0.39 ohm); `regulus report`, `history` and `compare` then
//! judge the records it wrote. The demo runs as its own process, so this test creates no
//! pseudo-terminals itself.

use crate::support::lock::serial;
use std::path::{Path, PathBuf};
use std::process::Command;

fn regulus(args: &[&str], cwd: &Path) -> std::process::Output {
    Command::new(env!("CARGO_BIN_EXE_regulus"))
        .args(args)
        .current_dir(cwd)
        .output()
        .expect("run regulus")
}

fn record_of(records: &Path, unit: &str) -> PathBuf {
    let dir = records.join(unit);
    let mut runs: Vec<PathBuf> = std::fs::read_dir(&dir)
        .unwrap_or_else(|e| panic!("{}: {e}", dir.display()))
        .filter_map(|e| e.ok().map(|e| e.path()))
        .filter(|p| p.join("run.json").is_file())
        .collect();
    runs.sort();
    runs.pop().expect("one record")
}

#[test]
fn simulated_units_are_judged_and_the_wrong_sense_resistor_is_named() {
    let _g = serial();
    let tmp = tempfile::tempdir().unwrap();
    let out = regulus(&["demo", "--records", "out"], tmp.path());
    assert_eq!(
        out.status.code(),
        Some(0),
        "demo failed: {}",
        String::from_utf8_lossy(&out.stderr)
    );
    let records = tmp.path().join("out");
    let good = record_of(&records, "TLB-0001");
    let bad = record_of(&records, "TLB-0002");

    // The record's own design snapshot is the default design.
    let r = regulus(&["report", good.to_str().unwrap()], tmp.path());
    let stdout = String::from_utf8_lossy(&r.stdout);
    assert_eq!(
        r.status.code(),
        Some(0),
        "{stdout}{}",
        String::from_utf8_lossy(&r.stderr)
    );
    assert!(stdout.contains("verdict: PASS"), "{stdout}");
    assert!(good.join("report.html").is_file() && good.join("summary.json").is_file());

    let r = regulus(&["report", bad.to_str().unwrap()], tmp.path());
    let stdout = String::from_utf8_lossy(&r.stdout);
    assert_eq!(r.status.code(), Some(1), "{stdout}");
    // The diagnosis ranks the wrong part first (the demo's unit has 0.68 ohm fitted).
    let first = stdout.lines().find(|l| l.starts_with("likely cause: "));
    assert!(
        first.is_some_and(|l| l.contains("a 0.68 ohm sense resistor fitted instead of 0.39 ohm")),
        "{stdout}"
    );

    // Judging both against the design file the demo used: exit 1, the bad unit named.
    let design = records.join("inputs/teaching-lab-0-20v.toml");
    let c = regulus(
        &[
            "compare",
            "--design",
            design.to_str().unwrap(),
            good.to_str().unwrap(),
            bad.to_str().unwrap(),
        ],
        tmp.path(),
    );
    let stdout = String::from_utf8_lossy(&c.stdout);
    assert_eq!(c.status.code(), Some(1), "{stdout}");
    assert!(stdout.contains("PASS       TLB-0001"), "{stdout}");
    assert!(stdout.contains("FAIL       TLB-0002"), "{stdout}");

    let h = regulus(
        &["history", "TLB-0002", "--records", "out", "--csv"],
        tmp.path(),
    );
    assert_eq!(h.status.code(), Some(0));
    assert!(String::from_utf8_lossy(&h.stdout).contains(",completed,fail,"));
}
