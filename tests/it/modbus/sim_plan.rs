//! The standard plan against the simulator's Modbus load and source, over Modbus RTU on
//! pseudo-terminals and Modbus TCP on loopback: the `regulus` binary runs from the bench file
//! `regulus sim` writes, and the tests check the exit code, the record and what the simulated
//! load and source were left holding (docs/ARCHITECTURE.md: record layout, exit codes, safe
//! state: load input off first, then the source output), with exception replies, lost replies
//! and a closing port.

use crate::support::e2e::{check_record, sample, serial, show, Rig};
use regulus::record::{read_run, Outcome, RecordState};
use regulus::sim::instruments::InstrumentKind;
use regulus::sim::{Fault, SimOptions, TransportMix};

const LAB: &str = "teaching-lab-0-20v.toml";

/// A long load sweep from the simulated source (faults strike during it).
const LONG: &str = r#"
name = "modbus-long"
source = "100 % of vin"
settle = "20 ms"
samples = 1

[[step]]
kind = "load_sweep"
from = "0 A"
to = "95 % of max_load"
points = 200
"#;

fn standard_plan_completes(mix: TransportMix, unit: &str, seed: u64) {
    let _g = serial();
    let rig = Rig::start(LAB, SimOptions::default().seed(seed).transport(mix));
    let bench = std::fs::read_to_string(&rig.bench).unwrap();
    assert_eq!(bench.matches("[instrument.modbus]").count(), 2, "{bench}");
    let plan_text = std::fs::read_to_string(sample("plans/standard.toml")).unwrap();
    let out = rig.run(unit, &plan_text);
    let stdout = String::from_utf8_lossy(&out.stdout);
    assert!(stdout.contains("run completed"), "{}", show(&out));
    assert!(stdout.contains("knee search located"), "{}", show(&out));
    assert!(stdout.contains(": recovered"), "{}", show(&out));
    let dir = rig.run_dir(unit);
    let plan = rig.dir.path().join("plan.toml");
    let rec = check_record(&dir, &rig.design_path, &rig.bench, &plan);
    assert_eq!(rec.state, RecordState::Finished(Outcome::Completed));
    // The identities came from the devices' identity registers.
    let ids: Vec<String> = rec
        .info
        .instruments
        .iter()
        .filter_map(|i| i.identity.clone())
        .collect();
    assert_eq!(
        ids.iter().filter(|i| i.contains("(Modbus)")).count(),
        2,
        "{ids:?}"
    );
    let (_, _, c) = rig.sim.state();
    assert!(!c.load.input_on, "load input left on");
    assert!(!c.source.output_on, "source output left on");
}

#[test]
fn standard_plan_over_modbus_rtu_on_pseudo_terminals() {
    standard_plan_completes(TransportMix::Modbus, "MB-RTU-1", 201);
}

#[test]
fn standard_plan_over_modbus_tcp() {
    standard_plan_completes(TransportMix::ModbusTcp, "MB-TCP-1", 202);
}

/// Run LONG with a fault; the run must stop with exit 4 (ERROR: an instrument failed) and the reason given.
fn aborts(
    mix: TransportMix,
    fault: &str,
    unit: &str,
    edit: impl Fn(String) -> String,
) -> (String, Rig) {
    let rig = Rig::start(
        LAB,
        SimOptions::default()
            .seed(210)
            .transport(mix)
            .fault(Fault::parse(fault).unwrap()),
    );
    let text = edit(std::fs::read_to_string(&rig.bench).unwrap());
    std::fs::write(&rig.bench, text).unwrap();
    let out = rig.run(unit, LONG);
    assert_eq!(out.status.code(), Some(4), "{}", show(&out));
    let dir = rig.run_dir(unit);
    let rec = read_run(&dir).unwrap();
    assert_eq!(rec.state, RecordState::Finished(Outcome::Error));
    assert_eq!(rec.info.rows as usize, rec.rows.len());
    assert!(rec.rows.len() < 200);
    (rec.info.reason.clone().unwrap_or_default(), rig)
}

// Exception code 0x04, server device failure (Modbus Application Protocol V1.1b3 section 7).
#[test]
fn an_exception_reply_aborts_to_the_safe_state() {
    for (mix, unit) in [
        (TransportMix::Modbus, "MB-EX-1"),
        (TransportMix::ModbusTcp, "MB-EX-2"),
    ] {
        let _g = serial();
        let (reason, rig) = aborts(mix, "eload:exception=30", unit, |t| t);
        assert!(reason.contains("eload"), "{reason}");
        assert!(reason.contains("exception 0x04 from unit 1"), "{reason}");
        assert!(reason.contains("server device failure"), "{reason}");
        let (_, _, c) = rig.sim.state();
        assert!(!c.load.input_on, "load input left on");
        assert!(!c.source.output_on, "source output left on");
    }
}

#[test]
fn a_lost_reply_without_retries_aborts_to_the_safe_state() {
    let _g = serial();
    // Every 40th reply of the source is lost; with no retries the first loss stops the run.
    let (reason, rig) = aborts(TransportMix::Modbus, "psu:drop=40", "MB-TO-1", |t| {
        t.replace(
            "reply_timeout_ms = 1003",
            "reply_timeout_ms = 600\nretries = 0",
        )
    });
    assert!(reason.contains("psu"), "{reason}");
    assert!(
        reason.contains("no valid reply from unit 2 within 600 ms"),
        "{reason}"
    );
    let (_, _, c) = rig.sim.state();
    assert!(!c.load.input_on, "load input left on");
    assert!(!c.source.output_on, "source output left on");
}

#[test]
fn lost_and_garbled_replies_are_retried() {
    let _g = serial();
    let rig = Rig::start(
        LAB,
        SimOptions::default()
            .seed(211)
            .transport(TransportMix::Modbus)
            .fault(Fault::parse("eload:garbage=3").unwrap())
            .fault(Fault::parse("psu:drop=7").unwrap()),
    );
    let text = std::fs::read_to_string(&rig.bench)
        .unwrap()
        .replace("reply_timeout_ms = 1003", "reply_timeout_ms = 600");
    std::fs::write(&rig.bench, text).unwrap();
    let out = rig.run("MB-RETRY-1", &LONG.replace("points = 200", "points = 12"));
    assert_eq!(out.status.code(), Some(0), "{}", show(&out));
    let rec = read_run(&rig.run_dir("MB-RETRY-1")).unwrap();
    assert_eq!(rec.state, RecordState::Finished(Outcome::Completed));
    assert_eq!(rec.rows.len(), 12);
}

#[test]
fn a_closing_load_port_aborts_and_the_source_goes_off() {
    for (mix, unit) in [
        (TransportMix::Modbus, "MB-CL-1"),
        (TransportMix::ModbusTcp, "MB-CL-2"),
    ] {
        let _g = serial();
        let (reason, rig) = aborts(mix, "eload:close-after=25", unit, |t| t);
        assert!(rig.sim.is_closed(InstrumentKind::Load));
        assert!(reason.contains("eload"), "{reason}");
        // The load is gone: the source removes power, and the reason says to check the load.
        let (_, _, c) = rig.sim.state();
        assert!(!c.source.output_on, "source output left on");
        assert!(reason.contains("safe state incomplete"), "{reason}");
        assert!(reason.contains("load_input_off"), "{reason}");
    }
}

#[test]
fn regulus_sim_writes_a_bench_file_for_its_modbus_devices() {
    use std::process::Command;
    let _g = serial();
    let t = tempfile::tempdir().unwrap();
    let bench = t.path().join("bench.toml");
    let out = Command::new(env!("CARGO_BIN_EXE_regulus"))
        .args([
            "sim",
            "--design",
            &sample(LAB),
            "--transport",
            "modbus-tcp",
            "--run-for",
            "0.2",
        ])
        .arg("--write-bench")
        .arg(&bench)
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(0), "{}", show(&out));
    let stdout = String::from_utf8_lossy(&out.stdout);
    assert!(stdout.contains("modbus unit 1, tcp 127.0.0.1:"), "{stdout}");
    let cfg = regulus::bench::BenchConfig::load(&bench).unwrap_or_else(|e| panic!("{e}"));
    let eload = cfg.instruments.iter().find(|i| i.name == "eload").unwrap();
    assert!(eload
        .link_description()
        .starts_with("modbus tcp unit 1 on tcp 127.0.0.1:"));
    // An exception fault on an instrument that does not speak Modbus is a usage error.
    let out = Command::new(env!("CARGO_BIN_EXE_regulus"))
        .args([
            "sim",
            "--design",
            &sample(LAB),
            "--fault",
            "dmm:exception=3",
            "--run-for",
            "0",
        ])
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(2), "{}", show(&out));
    assert!(String::from_utf8_lossy(&out.stderr).contains("only eload and psu speak Modbus"));
}
