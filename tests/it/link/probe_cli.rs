//! `regulus probe` as a user runs it: the built binary in a temporary folder, against
//! loopback TCP responders. Checks the table, and exit codes 0, 2 (bench file) and 3
//! (instrument failure) as docs/ARCHITECTURE.md defines them.

use crate::support::link::{reply, tcp_responder, Act};
use crate::support::lock::serial;
use std::process::Command;

fn regulus() -> Command {
    Command::new(env!("CARGO_BIN_EXE_regulus"))
}

#[test]
fn probe_prints_identity_readings_and_exits_0() {
    let _g = serial();
    let dmm = tcp_responder(|line| match line {
        "*IDN?" => reply("Regulus Simulated Bench,DMM-1,SN0042,1.0.3"),
        "MEAS:VOLT:DC?" => reply("+1.20034E+01"),
        "MEAS:CURR:DC?" => reply("+5.83000E-01"),
        _ => Act::Silent,
    });
    let load = tcp_responder(|line| match line {
        "*IDN?" => reply("Regulus Simulated Bench,LOAD-1,SN0043,1.0.3"),
        _ => Act::Silent,
    });
    let dir = tempfile::tempdir().unwrap();
    let bench = dir.path().join("bench.toml");
    std::fs::write(
        &bench,
        format!(
            "[[instrument]]\nname = \"dmm\"\nroles = [\"output_voltmeter\", \"output_ammeter\"]\npreset = \"scpi_meter\"\ntcp = {{ host = \"127.0.0.1\", port = {} }}\ntraffic_log = \"logs/dmm.log\"\n\n[[instrument]]\nname = \"eload\"\nroles = [\"load\"]\npreset = \"scpi_load\"\ntcp = {{ host = \"127.0.0.1\", port = {} }}\n",
            dmm.address, load.address
        ),
    )
    .unwrap();
    let out = regulus()
        .current_dir(dir.path())
        .args(["probe", "--bench"])
        .arg(&bench)
        .output()
        .unwrap();
    let stdout = String::from_utf8_lossy(&out.stdout);
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(0), "{stdout}\n{stderr}");
    assert!(
        stdout.contains(
            "dmm: maker Regulus Simulated Bench, model DMM-1, serial SN0042, firmware 1.0.3"
        ),
        "{stdout}"
    );
    let row = stdout
        .lines()
        .find(|l| l.starts_with("dmm") && l.contains("output_voltmeter"))
        .unwrap_or_else(|| panic!("{stdout}"));
    assert!(row.contains("12.0 V"), "{row}");
    assert!(row.contains("s "), "round trip missing: {row}");
    assert!(
        stdout
            .lines()
            .any(|l| l.contains("output_ammeter") && l.contains("583 mA")),
        "{stdout}"
    );
    assert!(
        stdout
            .lines()
            .any(|l| l.starts_with("eload") && l.contains("load")),
        "{stdout}"
    );
    // Probe ends with the safe state: the load's input is switched off.
    std::thread::sleep(std::time::Duration::from_millis(50));
    assert_eq!(load.received().last().map(String::as_str), Some("INP OFF"));
    // Raw traffic log, relative to the bench file, with direction markers.
    let log = std::fs::read_to_string(dir.path().join("logs/dmm.log")).unwrap();
    assert!(
        log.contains("> MEAS:VOLT:DC?") && log.contains("< +1.20034E+01"),
        "{log}"
    );
}

#[test]
fn probe_of_a_bad_bench_file_exits_2_with_its_position() {
    let _g = serial();
    let dir = tempfile::tempdir().unwrap();
    let bench = dir.path().join("bad.toml");
    std::fs::write(
        &bench,
        "[[instrument]]\nname = \"dmm\"\nroles = [\"output_voltmeter\"]\npreset = \"scpi_meter\"\ntcp = { host = \"127.0.0.1\" }\nbaud = 9600\n",
    )
    .unwrap();
    let out = regulus()
        .args(["probe", "--bench"])
        .arg(&bench)
        .output()
        .unwrap();
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(2), "{stderr}");
    assert!(stderr.contains("bad.toml:6:1"), "{stderr}");
    assert!(stderr.contains("unknown field `baud`"), "{stderr}");
}

#[test]
fn probe_with_a_dead_instrument_exits_4_and_says_what_to_check() {
    let _g = serial();
    let port = {
        let l = std::net::TcpListener::bind("127.0.0.1:0").unwrap();
        l.local_addr().unwrap().port()
    };
    let dir = tempfile::tempdir().unwrap();
    let bench = dir.path().join("bench.toml");
    std::fs::write(
        &bench,
        format!("[[instrument]]\nname = \"psu\"\nroles = [\"input_source\"]\npreset = \"scpi_source\"\ntcp = {{ host = \"127.0.0.1\", port = {port} }}\n"),
    )
    .unwrap();
    let out = regulus()
        .args(["probe", "--bench"])
        .arg(&bench)
        .output()
        .unwrap();
    let stdout = String::from_utf8_lossy(&out.stdout);
    // A dead instrument is a station error: exit 4.
    assert_eq!(out.status.code(), Some(4), "{stdout}");
    assert!(
        stdout.contains("connection refused") && stdout.contains("psu"),
        "{stdout}"
    );
}

#[test]
fn probe_of_an_unknown_instrument_name_exits_2() {
    let _g = serial();
    let dir = tempfile::tempdir().unwrap();
    let bench = dir.path().join("bench.toml");
    std::fs::write(
        &bench,
        "[[instrument]]\nname = \"dmm\"\nroles = [\"output_voltmeter\"]\npreset = \"scpi_meter\"\ntcp = { host = \"127.0.0.1\", port = 9 }\n",
    )
    .unwrap();
    let out = regulus()
        .args(["probe", "--instrument", "dvm", "--bench"])
        .arg(&bench)
        .output()
        .unwrap();
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(2), "{stderr}");
    assert!(
        stderr.contains("no instrument named 'dvm'") && stderr.contains("dmm"),
        "{stderr}"
    );
}
