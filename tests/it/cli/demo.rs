//! `regulus demo` end to end: the built binary, no arguments beyond a records folder, runs the
//! standard plan on two simulated units over real pseudo-terminals and loopback TCP, and the
//! unit with a wrong sense resistor fails with that part named.

use crate::support::lock::serial;
use std::process::Command;

#[test]
fn demo_passes_the_good_unit_and_names_the_wrong_part() {
    let _g = serial();
    let tmp = tempfile::tempdir().unwrap();
    let records = tmp.path().join("demo");
    let out = Command::new(env!("CARGO_BIN_EXE_regulus"))
        .args(["demo", "--records"])
        .arg(&records)
        .output()
        .unwrap();
    let stdout = String::from_utf8_lossy(&out.stdout);
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(0), "{stdout}\n{stderr}");
    assert!(!stderr.contains("panicked"), "{stderr}");

    let summary = |unit: &str| -> serde_json::Value {
        let runs = regulus::record::list_runs(&records, unit).unwrap();
        assert_eq!(runs.len(), 1, "{unit}");
        let dir = &runs[0].dir;
        for f in [
            "readings.csv",
            "run.json",
            "design.toml",
            "bench.toml",
            "plan.toml",
            "report.html",
        ] {
            assert!(dir.join(f).is_file(), "{unit}: {f} missing");
        }
        let info = regulus::record::read_info(dir).unwrap();
        assert_eq!(info.outcome, regulus::record::Outcome::Completed);
        serde_json::from_slice(&std::fs::read(dir.join("summary.json")).unwrap()).unwrap()
    };
    let good = summary("TLB-0001");
    assert_eq!(good["verdict"], "pass", "{good:#}");
    let bad = summary("TLB-0002");
    assert_eq!(bad["verdict"], "fail", "{bad:#}");
    // A 0.68 ohm part where the design has 0.39 ohm: I = V_sense / R, so the limit falls to
    // about 0.39 / 0.68 = 57 % of the design's (transistor-limiter law, textbook).
    let causes = bad["comparison"]["likely_causes"].to_string();
    assert!(
        causes.contains("0.68 ohm sense resistor fitted instead of 0.39 ohm"),
        "{causes}"
    );
    // The closing recap names both units, the cause and where the reports are.
    assert!(stdout.contains("TLB-0001  PASS"), "{stdout}");
    assert!(stdout.contains("TLB-0002  FAIL"), "{stdout}");
    assert!(stdout.matches("report: ").count() >= 2, "{stdout}");
}
