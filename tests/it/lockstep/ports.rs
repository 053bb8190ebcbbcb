//! A port closing in each kind of step: the run stops as an instrument failure naming the
//! instrument, every kept reading is whole, and the load and the source end off.

use crate::support::e2e::{check_record, serial, show, Rig};
use crate::support::lock::{cloexec_ptys, pty};
use regulus::record::{Outcome, RecordState};
use regulus::sim::{Fault, SimOptions};

const LAB: &str = "teaching-lab-0-20v.toml";

const HEAD: &str = r#"
name = "one-step"
source = "100 % of vin"
settle = "60 ms"
samples = 2

[interlocks]
max_short_dwell = "2 s"
"#;

/// One plan per step kind (the simulated bench supports all of them).
const STEPS: [(&str, &str); 6] = [
    ("load_sweep", "kind = \"load_sweep\"\nfrom = \"0 A\"\nto = \"95 % of max_load\"\npoints = 8"),
    ("limit_trace", "kind = \"limit_trace\"\nmode = \"cv\"\nfrom = \"95 % of vout\"\nto = \"10 % of vout\"\npoints = 8"),
    ("knee_search", "kind = \"knee_search\"\ndrop = \"2 %\"\nresolution = \"1 %\""),
    ("short_circuit", "kind = \"short_circuit\"\ndwell = \"1 s\"\ninterval = \"100 ms\"\nrecovery_time = \"300 ms\""),
    ("line_sweep", "kind = \"line_sweep\"\nfrom = \"90 % of vin\"\nto = \"110 % of vin\"\npoints = 8\nload = \"50 % of max_load\""),
    ("soak", "kind = \"soak\"\nduration = \"2 s\"\ninterval = \"100 ms\"\nload = \"50 % of max_load\""),
];

#[test]
fn a_meter_port_closing_in_each_kind_of_step_stops_the_run_safely() {
    let _g = serial();
    for (n, (kind, step)) in STEPS.iter().enumerate() {
        // The identity query and a few readings, then the port closes inside the step.
        let fault = Fault::parse("dmm:close-after=5").unwrap();
        let rig = Rig::start(LAB, SimOptions::default().seed(300 + n as u64).fault(fault));
        cloexec_ptys(&pty());
        let unit = format!("LP-{n:04}");
        let out = rig.run(&unit, &format!("{HEAD}\n[[step]]\n{step}\n"));
        assert_eq!(out.status.code(), Some(4), "{kind}: {}", show(&out));
        let dir = rig.run_dir(&unit);
        let plan = rig.dir.path().join("plan.toml");
        let rec = check_record(&dir, &rig.design_path, &rig.bench, &plan);
        assert_eq!(rec.state, RecordState::Finished(Outcome::Error), "{kind}");
        let reason = rec.info.reason.clone().unwrap_or_default();
        assert!(reason.contains("instrument failure"), "{kind}: {reason}");
        assert!(reason.contains("'dmm'"), "{kind}: {reason}");
        let (_, _, c) = rig.sim.state();
        assert!(!c.load.input_on, "{kind}: load input left on");
        assert!(!c.source.output_on, "{kind}: source output left on");
    }
}

// The load's own port closing inside each kind of step: the load cannot be reached any more,
// so the source removes power from the unit, and the reason tells the operator to check the
// load by hand.
#[test]
fn the_load_port_closing_in_each_kind_of_step_switches_the_source_off() {
    let _g = serial();
    for (n, (kind, step)) in STEPS.iter().enumerate() {
        // The identity, the initial input-off in lockstep, then the step's first setting.
        let fault = Fault::parse("eload:close-after=14").unwrap();
        let rig = Rig::start(LAB, SimOptions::default().seed(320 + n as u64).fault(fault));
        cloexec_ptys(&pty());
        let unit = format!("LL-{n:04}");
        let out = rig.run(&unit, &format!("{HEAD}\n[[step]]\n{step}\n"));
        assert_eq!(out.status.code(), Some(4), "{kind}: {}", show(&out));
        let dir = rig.run_dir(&unit);
        let plan = rig.dir.path().join("plan.toml");
        let rec = check_record(&dir, &rig.design_path, &rig.bench, &plan);
        assert_eq!(rec.state, RecordState::Finished(Outcome::Error), "{kind}");
        let reason = rec.info.reason.clone().unwrap_or_default();
        assert!(reason.contains("instrument failure"), "{kind}: {reason}");
        assert!(reason.contains("'eload'"), "{kind}: {reason}");
        assert!(reason.contains("safe state incomplete"), "{kind}: {reason}");
        let (_, _, c) = rig.sim.state();
        assert!(!c.source.output_on, "{kind}: source output left on");
    }
}
