//! End to end, simulated bench: each interlock of a plan trips on the simulated unit over real
//! pseudo-terminals and TCP (`regulus run` exits 3, the tripping reading is in the record,
//! flagged `interlock`, and the load input is off afterwards), and a short-circuit dwell over
//! the interlock is refused before any port opens (exit 2 with file:line:column).
//! Exit codes and flags: docs/ARCHITECTURE.md.

use crate::support::e2e::{serial, show, Rig};
use regulus::record::{read_run, Outcome, RecordState, Row};
use regulus::sim::{Fault, SimOptions};

const LAB: &str = "teaching-lab-0-20v.toml";

/// Run `plan`, expect an interlock abort naming `interlock`, and return the rows.
fn tripped(rig: &Rig, unit: &str, plan: &str, interlock: &str) -> Vec<Row> {
    let out = rig.run(unit, plan);
    assert_eq!(out.status.code(), Some(3), "{}", show(&out));
    let rec = read_run(&rig.run_dir(unit)).unwrap();
    assert_eq!(rec.state, RecordState::Finished(Outcome::Aborted));
    let reason = rec.info.reason.clone().unwrap_or_default();
    assert!(reason.starts_with("interlock: "), "{reason}");
    assert!(reason.contains(interlock), "{reason}");
    assert!(
        String::from_utf8_lossy(&out.stdout).contains(interlock),
        "{}",
        show(&out)
    );
    // Only the last row carries the flag: the run stopped at the first tripping reading.
    let last = rec.rows.last().expect("the tripping reading is recorded");
    assert!(last.has_flag("interlock"), "{last:?}");
    let n = rec.rows.len();
    assert!(rec.rows[..n - 1].iter().all(|r| !r.has_flag("interlock")));
    let (_, _, c) = rig.sim.state();
    assert!(!c.load.input_on, "load input left on after the trip");
    assert!(!c.source.output_on, "source output left on after the trip");
    rec.rows
}

#[test]
fn max_output_voltage_below_the_regulated_output_trips() {
    let _g = serial();
    let rig = Rig::start(LAB, SimOptions::default().seed(201));
    let vreg = rig.sim.truth().regulated_v;
    let limit = vreg - 2.0;
    let plan = format!(
        "name = \"e2e-ov\"\nsettle = \"50 ms\"\nsamples = 1\n\n[interlocks]\n\
         max_output_voltage = \"{limit} V\"\n\n[[step]]\nkind = \"load_sweep\"\n\
         from = \"0 A\"\nto = \"max_load\"\npoints = 10\n\
         beyond_design = \"interlock test: the limit is set to trip\"\n"
    );
    let rows = tripped(&rig, "E2E-0101", &plan, "max_output_voltage");
    // The unit regulates above the limit from the first point: the first reading trips.
    assert_eq!(rows.len(), 1);
    let v = rows[0]
        .value(regulus::measure::Quantity::OutputVoltage)
        .unwrap();
    assert!(v > limit, "{v} V vs {limit} V");
}

#[test]
fn max_load_power_trips_partway_up_a_load_sweep() {
    let _g = serial();
    let rig = Rig::start(LAB, SimOptions::default().seed(202));
    let plan = "name = \"e2e-power\"\nsettle = \"50 ms\"\nsamples = 1\n\n[interlocks]\n\
                max_load_power = \"8 W\"\n\n[[step]]\nkind = \"load_sweep\"\n\
                from = \"0 A\"\nto = \"max_load\"\npoints = 13\n\
                beyond_design = \"interlock test: the limit is set to trip\"\n";
    let rows = tripped(&rig, "E2E-0102", plan, "max_load_power");
    // P = V x I (power into a load, by definition); the sweep reaches about 20 V x 1.2 A, so
    // it must stop partway, at the first row above 8 W.
    use regulus::measure::Quantity::{OutputCurrent, OutputVoltage};
    let p = |r: &Row| r.value(OutputVoltage).unwrap() * r.value(OutputCurrent).unwrap();
    let n = rows.len();
    assert!(n > 1 && n < 13, "{n} rows");
    assert!(p(&rows[n - 1]) > 8.0, "{}", p(&rows[n - 1]));
    assert!(rows[..n - 1].iter().all(|r| p(r) <= 8.0));
}

#[test]
fn max_temperature_trips_on_a_unit_with_a_poor_heatsink() {
    let _g = serial();
    // No heatsink: the case alone, 12 degC/W to ambient, in place of the designed one. The
    // simulated unit heats through the design's network without the heatsink's mass (the case's
    // 10 J/degC through about 12 degC/W: a first-order stage of about two minutes, textbook step
    // response), so at full load the case passes 40 degC within seconds, well inside the soak.
    let fault = Fault::parse("theta_sa=12").unwrap();
    let rig = Rig::start(LAB, SimOptions::default().seed(203).fault(fault));
    let plan = "name = \"e2e-hot\"\nsettle = \"50 ms\"\nsamples = 1\n\n[interlocks]\n\
                max_temperature = \"40 degC\"\n\n[[step]]\nkind = \"soak\"\n\
                load = \"max_load\"\nduration = \"60 s\"\ninterval = \"100 ms\"\n\
                beyond_design = \"interlock test: full rated load on a poor heatsink\"\n";
    let rows = tripped(&rig, "E2E-0103", plan, "max_temperature");
    use regulus::measure::Quantity::Temperature;
    let t: Vec<f64> = rows.iter().map(|r| r.value(Temperature).unwrap()).collect();
    let n = t.len();
    assert!(n > 1, "{t:?}");
    assert!(t[0] < 40.0, "starts near ambient: {t:?}");
    assert!(t[n - 1] > 40.0, "{t:?}");
    assert!(t[..n - 1].iter().all(|x| *x <= 40.0), "{t:?}");
}

#[test]
fn short_dwell_over_the_interlock_is_refused_before_any_port_opens() {
    let _g = serial();
    let rig = Rig::start(LAB, SimOptions::default().seed(204));
    let plan = "name = \"e2e-dwell\"\nsettle = \"50 ms\"\n\n[interlocks]\n\
                max_short_dwell = \"1 s\"\n\n[[step]]\nkind = \"short_circuit\"\n\
                dwell = \"3 s\"\n";
    let out = rig.run("E2E-0104", plan);
    assert_eq!(out.status.code(), Some(2), "{}", show(&out));
    // Where the offending value sits in the plan file (1-based line and column).
    let at = plan.find("\"3 s\"").unwrap();
    let line = plan[..at].matches('\n').count() + 1;
    let column = at - plan[..at].rfind('\n').map_or(0, |k| k + 1) + 1;
    let stderr = String::from_utf8_lossy(&out.stderr);
    let path = rig.dir.path().join("plan.toml");
    let want = format!("{}:{line}:{column}:", path.display());
    assert!(stderr.contains(&want), "want {want} in:\n{stderr}");
    assert!(stderr.contains("max_short_dwell"), "{stderr}");
    // Nothing was recorded and nothing on the bench was switched on.
    assert!(!rig.records.exists());
    let (_, _, c) = rig.sim.state();
    assert!(!c.load.input_on && !c.source.in_use);
}

// The interlocks are watched between recorded readings too: a soak read every 30 s still
// stops within about a second of the case passing its limit.
#[test]
fn max_temperature_trips_between_the_readings_of_a_slow_soak() {
    let _g = serial();
    let fault = Fault::parse("theta_sa=12").unwrap();
    let rig = Rig::start(LAB, SimOptions::default().seed(204).fault(fault));
    let plan = "name = \"e2e-hot-slow\"\nsettle = \"50 ms\"\nsamples = 1\n\n[interlocks]\n\
                max_temperature = \"40 degC\"\n\n[[step]]\nkind = \"soak\"\n\
                load = \"max_load\"\nduration = \"60 s\"\ninterval = \"30 s\"\n\
                beyond_design = \"interlock test: full rated load on a poor heatsink\"\n";
    let t0 = std::time::Instant::now();
    let out = rig.run("E2E-0104", plan);
    assert!(
        t0.elapsed() < std::time::Duration::from_secs(29),
        "{:?}",
        t0.elapsed()
    );
    assert_eq!(out.status.code(), Some(3), "{}", show(&out));
    let rec = read_run(&rig.run_dir("E2E-0104")).unwrap();
    let reason = rec.info.reason.clone().unwrap_or_default();
    assert!(reason.contains("max_temperature"), "{reason}");
    assert!(reason.contains("between readings"), "{reason}");
    // Only the soak's first reading was due before the trip.
    assert_eq!(rec.rows.len(), 1, "{:?}", rec.rows);
    let (_, _, c) = rig.sim.state();
    assert!(!c.load.input_on && !c.source.output_on);
}

// Regression: with every third source reply lost, the interlock cancelling a reading in
// flight lost the port's reader, and the safe state read "connection closed" although the
// source had switched off.
#[test]
fn a_reading_cancelled_by_an_interlock_keeps_the_link_for_the_safe_state() {
    let _g = serial();
    let fault = Fault::parse("psu:drop=3").unwrap();
    let rig = Rig::start(LAB, SimOptions::default().seed(205).fault(fault));
    // Retries enough for a link that loses one reply in three (each setting's lockstep takes
    // three replies).
    let text = std::fs::read_to_string(&rig.bench).unwrap();
    std::fs::write(
        &rig.bench,
        text.replace("reply_timeout_ms", "retries = 4\nreply_timeout_ms"),
    )
    .unwrap();
    let plan =
        "name = \"e2e-drop\"\nsource = \"100 % of vin\"\nsettle = \"50 ms\"\nsamples = 3\n\n\
                [interlocks]\nmax_short_dwell = \"600 ms\"\n\n[[step]]\nkind = \"short_circuit\"\n\
                dwell = \"500 ms\"\ninterval = \"100 ms\"\nrecovery_time = \"200 ms\"\n";
    let out = rig.run("E2E-0105", plan);
    let rec = read_run(&rig.run_dir("E2E-0105")).unwrap();
    let reason = rec.info.reason.clone().unwrap_or_default();
    // The dwell limit cut a reading short (a lost reply's deadline is longer than the dwell).
    assert!(
        reason.contains("max_short_dwell"),
        "{reason}\n{}",
        show(&out)
    );
    assert!(
        !reason.contains("safe state incomplete"),
        "{reason}\n{}",
        show(&out)
    );
    assert!(!reason.contains("connection closed"), "{reason}");
    let (_, _, c) = rig.sim.state();
    assert!(!c.load.input_on, "load input left on");
    assert!(!c.source.output_on, "source output left on");
}
