//! `kill -9` of `regulus run` in the middle of a load sweep against the simulator's Modbus
//! load and source, over RTU on pseudo-terminals and over Modbus TCP on loopback: the guardian
//! process holds both Modbus links and writes the register map's safe-state requests as whole
//! frames, so the simulated load input and source output are off within 250 ms of regulus
//! ending and stay off, and `guardian.txt` in the record names both instruments
//! (docs/ARCHITECTURE.md, safe state: the bench is left safe when regulus is killed).
//! The same approach as the text-link test in `lockstep::kill`.

use crate::support::e2e::{wait_rows, Rig};
use crate::support::lock::{cloexec_ptys, pty, serial};
use regulus::bench::BenchConfig;
use regulus::guardian::NOTE_FILE;
use regulus::measure::Role;
use regulus::sim::{SimOptions, TransportMix};
use std::time::Duration;

const LAB: &str = "teaching-lab-0-20v.toml";

/// A load sweep long enough to be killed in (several seconds on the simulated bench).
const LONG: &str = r#"
name = "modbus-kill"
source = "100 % of vin"
settle = "20 ms"
samples = 1

[[step]]
kind = "load_sweep"
from = "10 % of max_load"
to = "95 % of max_load"
points = 400
"#;

fn kill_mid_run_leaves_the_modbus_load_and_source_off(mix: TransportMix, unit: &str, seed: u64) {
    let _g = serial();
    let rig = Rig::start(LAB, SimOptions::default().seed(seed).transport(mix));
    // The regulus child must not inherit the simulator's pseudo-terminal ends (a child
    // holding one would keep a port open that the test expects closed).
    cloexec_ptys(&pty());
    let bench_text = std::fs::read_to_string(&rig.bench).unwrap();
    assert_eq!(
        bench_text.matches("[instrument.modbus]").count(),
        2,
        "{bench_text}"
    );
    let cfg = BenchConfig::parse(&bench_text, "bench.toml").unwrap_or_else(|e| panic!("{e}"));
    let name_of = |role: Role| {
        cfg.instruments
            .iter()
            .find(|i| i.roles.contains(&role) && i.modbus.is_some())
            .map(|i| i.name.clone())
            .unwrap_or_else(|| panic!("no Modbus instrument for {role}: {bench_text}"))
    };
    let load = name_of(Role::Load);
    let source = name_of(Role::InputSource);

    let mut child = rig.spawn(unit, LONG);
    let dir = rig.wait_run_dir(unit, Duration::from_secs(20));
    wait_rows(&dir, 5, Duration::from_secs(30));
    // Mid-sweep: regulus has the load sinking and the source on (else the kill proves
    // nothing).
    let (_, _, before) = rig.sim.state();
    assert!(
        before.load.input_on && before.source.output_on,
        "not mid-run: {before:?}"
    );
    child.signal(libc::SIGKILL);
    let status = child.0.wait().unwrap();
    assert_eq!(status.code(), None, "regulus was not killed: {status:?}");
    std::thread::sleep(Duration::from_millis(250));
    let (_, _, c) = rig.sim.state();
    assert!(!c.load.input_on, "load input left on after kill -9");
    assert!(!c.source.output_on, "source output left on after kill -9");
    // Nothing regulus had queued switches them back on later.
    std::thread::sleep(Duration::from_millis(750));
    let (_, _, later) = rig.sim.state();
    assert!(!later.load.input_on, "the load input came back on");
    assert!(!later.source.output_on, "the source output came back on");
    // The record says the guardian acted, for both instruments, and that both were sent.
    let note = std::fs::read_to_string(dir.join(NOTE_FILE)).unwrap_or_default();
    assert!(
        note.contains("the guardian sent the safe state"),
        "{note:?}"
    );
    for name in [&load, &source] {
        let at = note
            .find(&format!("{name}: "))
            .unwrap_or_else(|| panic!("{name} not named in {note:?}"));
        let entry = note[at..].split(';').next().unwrap_or_default();
        assert!(entry.contains("(sent)"), "{name}: {entry:?} in {note:?}");
    }
    // The load came first (loads before sources).
    assert!(
        note.find(&format!("{load}: ")) < note.find(&format!("{source}: ")),
        "{note:?}"
    );
}

#[test]
fn kill_9_over_modbus_rtu_leaves_the_load_and_source_off() {
    kill_mid_run_leaves_the_modbus_load_and_source_off(TransportMix::Modbus, "MB-KILL-RTU", 411);
}

#[test]
fn kill_9_over_modbus_tcp_leaves_the_load_and_source_off() {
    kill_mid_run_leaves_the_modbus_load_and_source_off(TransportMix::ModbusTcp, "MB-KILL-TCP", 412);
}
