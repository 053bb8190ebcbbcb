//! Conventions: `--json` on `size` and `probe`, shell completions and the manual page made
//! from the command table.

use crate::support::e2e::{serial, show};
use crate::support::floor::Floor;
use std::process::Command;

fn regulus() -> Command {
    Command::new(env!("CARGO_BIN_EXE_regulus"))
}

#[test]
fn size_json_gives_the_sized_parts_in_si_units() {
    let out = regulus()
        .args([
            "size",
            "--current",
            "1.2",
            "--clamp",
            "transistor",
            "--json",
        ])
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(0), "{}", show(&out));
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    let r = v["sense_resistor"]["ohms"].as_f64().unwrap();
    // Transistor limiter: I_lim = V_BE / R_sense (textbook formula); 0.65 V over the E24
    // value chosen for a 1.5 A target (0.65 / 1.5 = 433 mohm -> 430 mohm).
    assert_eq!(r, 0.43);
    let nominal = v["limit_current"]["nominal"].as_f64().unwrap();
    assert!((nominal - 0.65 / 0.43).abs() < 1e-9, "{nominal}");
    assert!(
        v["dissipation"]["sense_resistor"]["watts"]
            .as_f64()
            .unwrap()
            > 0.0
    );
    // --json and --write do not go together (the JSON must stay the whole output).
    let out = regulus()
        .args(["size", "--current", "1.2", "--json", "--write", "x.toml"])
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(2), "{}", show(&out));
}

#[test]
fn probe_json_lists_identities_and_readings() {
    let _g = serial();
    let f = Floor::start(47, "U-[0-9]+");
    // Probing the meter alone, first, touches nothing else: the simulated unit runs from the
    // design's own input (its source was never commanded), so the meter reads the unloaded
    // output inside the design's worst-case band.
    let out = f
        .regulus()
        .args(["probe", "--json", "--instrument", "dmm", "--bench"])
        .arg(&f.rig.bench)
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(0), "{}", show(&out));
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    let rows = v["rows"].as_array().unwrap();
    assert!(rows.iter().all(|r| r["instrument"] == "dmm"), "{v:#}");
    let volts = rows
        .iter()
        .find(|r| r["role"] == "output_voltmeter")
        .and_then(|r| r["reading"].as_f64())
        .expect("a voltmeter reading");
    let d = crate::support::e2e::design(crate::support::floor::LAB);
    let band = regulus::compare::DesignExpectation::from_design(&d, &regulus::design::expect(&d))
        .vout
        .worst_case;
    assert!(
        band.min <= volts && volts <= band.max,
        "{volts} V outside {}..{} V",
        band.min,
        band.max
    );

    let out = f
        .regulus()
        .args(["probe", "--json", "--bench"])
        .arg(&f.rig.bench)
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(0), "{}", show(&out));
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    assert_eq!(v["failed"], false);
    // *IDN? (IEEE 488.2): maker, model, serial, firmware.
    let ids = v["identities"].as_array().unwrap();
    assert!(ids.iter().any(|i| i["identity"]
        .as_str()
        .unwrap()
        .starts_with("Regulus Simulated Bench,")));
    let rows = v["rows"].as_array().unwrap();
    let dmm = rows
        .iter()
        .find(|r| r["role"] == "output_voltmeter")
        .expect("output voltmeter row");
    // A number in volts (SI). The safe states (the source's output off) are sent only once
    // every instrument has been read, so this meter too reads the unloaded output.
    let volts = dmm["reading"].as_f64().unwrap();
    assert!(band.min <= volts && volts <= band.max, "{volts} V");
    assert!(dmm["round_trip_s"].as_f64().unwrap() > 0.0);
}

#[test]
fn completions_and_manual_page_cover_every_command() {
    let out = regulus().args(["completions", "bash"]).output().unwrap();
    assert_eq!(out.status.code(), Some(0), "{}", show(&out));
    let script = String::from_utf8_lossy(&out.stdout).into_owned();
    for cmd in ["batch", "sync", "index", "history", "run", "man"] {
        assert!(script.contains(cmd), "completions lack {cmd}");
    }
    let tmp = tempfile::tempdir().unwrap();
    let file = tmp.path().join("regulus.bash");
    std::fs::write(&file, &script).unwrap();
    let check = Command::new("bash").arg("-n").arg(&file).output().unwrap();
    assert!(
        check.status.success(),
        "{}",
        String::from_utf8_lossy(&check.stderr)
    );

    let out = regulus().arg("man").output().unwrap();
    assert_eq!(out.status.code(), Some(0), "{}", show(&out));
    let page = String::from_utf8_lossy(&out.stdout);
    assert!(
        page.contains(".TH regulus 1") && page.contains("batch"),
        "{page}"
    );
    let out = regulus()
        .args(["man", "--out"])
        .arg(tmp.path().join("man"))
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(0), "{}", show(&out));
    assert!(tmp.path().join("man/regulus-batch.1").is_file());
}
