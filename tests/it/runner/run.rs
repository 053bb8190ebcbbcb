//! The runner against an in-memory test double of the bench (`FakeBench`): a full plan
//! completes and leaves a readable record; each interlock trips, runs the safe state and
//! records the reason; cancellation and instrument failures still reach the safe state.

use regulus::measure::{Quantity, Role};
use regulus::plan::{Plan, Step};
use regulus::record::{read_run, DesignRef, Outcome, RecordState, Row, Snapshots, READINGS_FILE};
use regulus::runner::{self, CancelToken, Observer, RunReport, RunSetup, StepResult};
use regulus::testkit::{targets, FakeBench, Foldback};
use std::path::{Path, PathBuf};
use std::time::{Duration, Instant};

const FULL: &str = r#"
name = "full"
settle = "1 ms"
samples = 2

[[step]]
kind = "load_sweep"
from = "0 A"
to = "max_load"
points = 5

[[step]]
kind = "limit_trace"
mode = "cv"
from = "100 % of vout"
to = "20 % of vout"
points = 5
samples = 1

[[step]]
kind = "knee_search"

[[step]]
kind = "short_circuit"
dwell = "60 ms"
interval = "20 ms"
recovery_time = "40 ms"

[[step]]
kind = "line_sweep"
from = "16 V"
to = "20 V"
points = 3
load = "500 mA"

[[step]]
kind = "soak"
load = "80 % of max_load"
duration = "40 ms"
interval = "10 ms"
"#;

fn plan(text: &str) -> Plan {
    Plan::parse(text, "plan.toml", &targets()).expect("test plan is valid")
}

/// Records every callback and checks, on each point, that the row is already on disk.
#[derive(Default)]
struct Probe {
    record_dir: Option<PathBuf>,
    started: Vec<usize>,
    points: Vec<Row>,
    finished: Vec<(usize, StepResult)>,
    stopping: Vec<String>,
}

impl Observer for Probe {
    fn step_started(&mut self, index: usize, _step: &Step) {
        self.started.push(index);
    }
    fn point_taken(&mut self, _index: usize, row: &Row) {
        self.points.push(row.clone());
        if let Some(dir) = &self.record_dir {
            let text = std::fs::read_to_string(dir.join(READINGS_FILE)).unwrap();
            assert_eq!(
                text.lines().count(),
                self.points.len() + 1,
                "row not on disk when reported"
            );
        }
    }
    fn step_finished(&mut self, index: usize, _step: &Step, result: &StepResult) {
        self.finished.push((index, result.clone()));
    }
    fn stopping(&mut self, reason: &str) {
        self.stopping.push(reason.to_string());
    }
}

fn setup(records: &Path) -> RunSetup<'_> {
    RunSetup {
        records,
        unit: "SN-0007".into(),
        operator: Some("station 1".into()),
        note: None,
        design: DesignRef {
            path: "design.toml".into(),
            sha256: "ab".into(),
            name: "lab-12v".into(),
        },
        snapshots: Snapshots {
            design: b"d",
            bench: b"b",
            plan: FULL.as_bytes(),
        },
    }
}

async fn go(bench: &mut FakeBench, p: &Plan, obs: &mut Probe, cancel: &CancelToken) -> RunReport {
    let tmp = tempfile::tempdir().unwrap().keep();
    runner::run(bench, p, setup(&tmp), obs, cancel)
        .await
        .expect("runner starts")
}

/// The safe state must be the last thing the runner does to the bench.
fn assert_safe_state_last(bench: &FakeBench) {
    assert_eq!(bench.safe_state_calls, 1, "safe state runs exactly once");
    let pos = bench.log.iter().position(|l| l == "safe_state").unwrap();
    let after: Vec<&String> = bench.log[pos + 1..].iter().collect();
    assert!(
        after.iter().all(|l| l.starts_with("safe ")),
        "commands after safe state: {after:?}"
    );
    assert!(!bench.load_on || bench.faults.load_dies_from.is_some());
    assert!(!bench.source_on, "source left on");
}

#[tokio::test]
async fn full_plan_completes_and_writes_a_readable_record() {
    let mut bench = FakeBench::full();
    let p = plan(FULL);
    let mut obs = Probe::default();
    let r = go(&mut bench, &p, &mut obs, &CancelToken::new()).await;
    assert_eq!(r.outcome, Outcome::Completed, "{:?}", r.reason);
    assert_eq!(r.reason, None);
    assert_safe_state_last(&bench);
    assert_eq!(obs.started, vec![0, 1, 2, 3, 4, 5]);
    // The load input is off before the source switches the unit on.
    assert_eq!(bench.log[0], "load_input off");
    assert_eq!(bench.log[1], "source 18");
    assert_eq!(bench.log[2], "source_output on");
    assert_eq!(obs.finished.len(), 6);

    let rec = read_run(&r.dir).unwrap();
    assert_eq!(rec.state, RecordState::Finished(Outcome::Completed));
    assert_eq!(rec.rows.len() as u64, r.rows);
    assert_eq!(rec.info.rows, r.rows);
    assert_eq!(rec.rows, obs.points);
    assert_eq!(
        std::fs::read(r.dir.join("plan.toml")).unwrap(),
        FULL.as_bytes()
    );

    // Fixed-length steps write exactly their planned points.
    for (k, step) in p.steps.iter().enumerate() {
        if k == 2 {
            continue; // knee search: adaptive
        }
        let n = rec.rows.iter().filter(|r| r.step == k).count();
        assert_eq!(n, step.planned_points(), "step {k}");
    }
    // Load sweep rows: CC, setpoints 0 .. 1 A, output regulated (12 V - 20 mohm * I).
    let sweep: Vec<&Row> = rec.rows.iter().filter(|r| r.step == 0).collect();
    assert_eq!(sweep[4].setpoint, Some(1.0));
    let v = sweep[4].value(Quantity::OutputVoltage).unwrap();
    assert!((v - (12.0 - 0.02)).abs() < 1e-6, "{v}");
    assert_eq!(sweep[0].samples, 2);
    assert_eq!(sweep[0].source_volts, Some(18.0));

    // Knee search: within 0.5 % of the double's true knee, in at most 20 points.
    let knee = obs.finished[2].1.knee.expect("knee result");
    let v_ref = bench
        .supply
        .operate(regulus::measure::LoadMode::ConstantResistance, 12.0 / 0.15)
        .0;
    let truth = bench.supply.current_at(0.99 * v_ref);
    let est = knee.limit_current_a.unwrap();
    assert!(
        (est - truth).abs() / truth <= 0.005,
        "est {est} truth {truth}"
    );
    assert!(knee.points <= 20);

    // Short circuit: one reading before, dwell rows flagged, recovery rows flagged, recovered.
    let sc: Vec<&Row> = rec.rows.iter().filter(|r| r.step == 3).collect();
    assert_eq!(sc[0].load_mode, "cc");
    assert!(sc[1].has_flag("dwell_start"));
    assert_eq!(sc[1].load_mode, "cr");
    assert!(sc[3].has_flag("dwell_end"));
    assert!(
        sc[1].value(Quantity::OutputVoltage).unwrap() < 0.2,
        "short holds V low"
    );
    assert!(sc[4..].iter().all(|r| r.has_flag("recovery")));
    let rec_check = obs.finished[3].1.recovery.expect("recovery check");
    assert!(rec_check.recovered, "{rec_check:?}");

    // Line sweep rows carry the programmed source voltage; it is restored afterwards.
    let line: Vec<Option<f64>> = rec
        .rows
        .iter()
        .filter(|r| r.step == 4)
        .map(|r| r.source_volts)
        .collect();
    assert_eq!(line, vec![Some(16.0), Some(18.0), Some(20.0)]);
    assert_eq!(rec.rows.last().unwrap().source_volts, Some(18.0));
}

#[tokio::test]
async fn rows_reach_disk_before_the_observer_hears_of_them() {
    let mut bench = FakeBench::full();
    let p = plan(FULL);
    let tmp = tempfile::tempdir().unwrap();
    // Learn the folder from the first callback: every later callback checks the file.
    struct Finder<'a>(&'a Path, Probe);
    impl Observer for Finder<'_> {
        fn point_taken(&mut self, index: usize, row: &Row) {
            if self.1.record_dir.is_none() {
                let unit = self.0.join("SN-0007");
                let dir = std::fs::read_dir(unit).unwrap().next().unwrap().unwrap();
                self.1.record_dir = Some(dir.path());
            }
            self.1.point_taken(index, row);
        }
    }
    let mut f = Finder(tmp.path(), Probe::default());
    let r = runner::run(
        &mut bench,
        &p,
        setup(tmp.path()),
        &mut f,
        &CancelToken::new(),
    )
    .await
    .unwrap();
    assert_eq!(r.outcome, Outcome::Completed);
    assert_eq!(f.1.points.len() as u64, r.rows);
}

async fn expect_abort(
    mut bench: FakeBench,
    text: &str,
    reason_has: &str,
) -> (FakeBench, RunReport) {
    let p = plan(text);
    let mut obs = Probe::default();
    let r = go(&mut bench, &p, &mut obs, &CancelToken::new()).await;
    // An instrument failure is the station's (error); an interlock stops the run (aborted).
    let want = if reason_has == "instrument failure" {
        Outcome::Error
    } else {
        Outcome::Aborted
    };
    assert_eq!(r.outcome, want);
    let reason = r.reason.clone().unwrap_or_default();
    assert!(reason.contains(reason_has), "reason: {reason}");
    assert_eq!(obs.stopping.len(), 1);
    assert_safe_state_last(&bench);
    let rec = read_run(&r.dir).unwrap();
    assert_eq!(rec.state, RecordState::Finished(want));
    assert_eq!(rec.info.reason.as_deref(), Some(reason.as_str()));
    (bench, r)
}

const SWEEP: &str = r#"
name = "sweep"
settle = "1 ms"
samples = 1
[[step]]
kind = "load_sweep"
from = "0 A"
to = "1 A"
points = 11
"#;

#[tokio::test]
async fn over_voltage_trips_and_the_tripping_row_is_flagged() {
    let mut bench = FakeBench::full();
    bench.faults.overvoltage_from = Some((4, 15.0));
    let (_, r) = expect_abort(bench, SWEEP, "max_output_voltage").await;
    let rec = read_run(&r.dir).unwrap();
    assert_eq!(rec.rows.len(), 5);
    assert!(rec.rows[4].has_flag("interlock"));
    assert!(!rec.rows[3].has_flag("interlock"));
}

#[tokio::test]
async fn load_power_trips() {
    let text = SWEEP.replace(
        "samples = 1\n",
        "samples = 1\n[interlocks]\nmax_load_power = \"6 W\"\n",
    );
    let (_, r) = expect_abort(FakeBench::full(), &text, "max_load_power").await;
    // Load power P = V I (Joule): 11.99 V * 0.5 A = 5.995 W is allowed; 11.988 V * 0.6 A =
    // 7.19 W is not, so point 6 trips.
    let rec = read_run(&r.dir).unwrap();
    assert_eq!(rec.rows.last().unwrap().point, 6);
}

#[tokio::test]
async fn temperature_trips_only_with_a_thermometer() {
    let mut bench = FakeBench::full();
    bench.faults.hot_from = Some((2, 120.0));
    expect_abort(bench, SWEEP, "max_temperature").await;

    // Without a thermometer role, temperature is not read and cannot trip.
    let mut cold = FakeBench::new(&[Role::Load, Role::OutputVoltmeter, Role::OutputAmmeter]);
    cold.faults.hot_from = Some((2, 120.0));
    let mut obs = Probe::default();
    let r = go(&mut cold, &plan(SWEEP), &mut obs, &CancelToken::new()).await;
    assert_eq!(r.outcome, Outcome::Completed);
}

#[tokio::test]
async fn short_circuit_dwell_trips_when_readings_run_late() {
    let text = r#"
name = "short"
settle = "1 ms"
samples = 1
[interlocks]
max_short_dwell = "100 ms"
[[step]]
kind = "short_circuit"
dwell = "100 ms"
interval = "50 ms"
"#;
    let mut bench = FakeBench::full();
    // Each reading takes 80 ms: the second ends 160 ms into the short.
    bench.faults.measure_delay = Some(Duration::from_millis(80));
    let (bench, _) = expect_abort(bench, text, "max_short_dwell").await;
    assert!(!bench.load_on);
}

/// Regression: a meter that hangs during a short must not hold the short beyond the dwell
/// limit (the reading is abandoned at the limit and the safe state runs).
#[tokio::test]
async fn a_hung_meter_does_not_extend_a_short() {
    let text = r#"
name = "short"
settle = "1 ms"
samples = 1
[interlocks]
max_short_dwell = "200 ms"
[[step]]
kind = "short_circuit"
dwell = "200 ms"
interval = "50 ms"
"#;
    let mut bench = FakeBench::full();
    // The reading before the short (call 0) answers; every reading during the short hangs.
    bench.faults.measure_hangs_from = Some(1);
    let t0 = std::time::Instant::now();
    let (bench, r) = expect_abort(bench, text, "max_short_dwell").await;
    // Without the limit the run would wait an hour on the meter.
    assert!(t0.elapsed() < Duration::from_secs(20), "{:?}", t0.elapsed());
    assert!(!bench.load_on);
    assert!(r
        .reason
        .unwrap_or_default()
        .contains("waiting for a reading"));
}

#[tokio::test]
async fn cancellation_reaches_the_safe_state() {
    let cancel = CancelToken::new();
    let mut bench = FakeBench::full();
    bench.faults.cancel_at = Some((3, cancel.clone()));
    let p = plan(SWEEP);
    let mut obs = Probe::default();
    let r = go(&mut bench, &p, &mut obs, &cancel).await;
    assert_eq!(r.outcome, Outcome::Aborted);
    assert!(r.reason.as_deref().unwrap_or("").contains("interrupted"));
    assert!(r.rows <= 4, "stopped promptly, {} rows", r.rows);
    assert_safe_state_last(&bench);
}

#[tokio::test]
async fn cancellation_interrupts_a_long_wait() {
    let text = SWEEP.replace("settle = \"1 ms\"", "settle = \"60 s\"");
    let cancel = CancelToken::new();
    let c2 = cancel.clone();
    std::thread::spawn(move || {
        std::thread::sleep(Duration::from_millis(100));
        c2.cancel();
    });
    let mut bench = FakeBench::full();
    let t = Instant::now();
    let mut obs = Probe::default();
    let r = go(&mut bench, &plan(&text), &mut obs, &cancel).await;
    assert_eq!(r.outcome, Outcome::Aborted);
    // A 60 s settle was cut short (a generous bound: this is not a speed test).
    assert!(t.elapsed() < Duration::from_secs(20));
    assert_safe_state_last(&bench);
}

#[tokio::test]
async fn meter_failure_mid_run_aborts_and_runs_safe_state() {
    let mut bench = FakeBench::full();
    bench.faults.measure_fails_from = Some(5);
    let (_, r) = expect_abort(bench, SWEEP, "instrument failure").await;
    let reason = r.reason.unwrap();
    assert!(reason.contains("'dmm'"), "names the instrument: {reason}");
    assert!(
        reason.contains("MEAS:VOLT:DC?"),
        "names the command: {reason}"
    );
    assert_eq!(r.rows, 5);
}

#[tokio::test]
async fn dead_load_still_lets_the_source_switch_off() {
    let mut bench = FakeBench::full();
    bench.faults.load_dies_from = Some(3);
    let p = plan(SWEEP);
    let mut obs = Probe::default();
    let r = go(&mut bench, &p, &mut obs, &CancelToken::new()).await;
    // A dead instrument is a station error, not a stopped run.
    assert_eq!(r.outcome, Outcome::Error);
    // The runner's own load-off and the load's safe-state sequence both fail; only the dead
    // load fails: the source still switches off.
    assert!(!r.safe_state_errors.is_empty());
    assert!(
        r.safe_state_errors.iter().all(|e| e.instrument == "load"),
        "{:?}",
        r.safe_state_errors
    );
    let reason = r.reason.unwrap();
    assert!(reason.contains("'load'"), "{reason}");
    assert!(reason.contains("safe state incomplete"), "{reason}");
    assert_safe_state_last(&bench);
    assert!(bench.log.iter().any(|l| l == "safe source_output off"));
}

#[tokio::test]
async fn missing_roles_are_refused_before_anything_is_switched() {
    let mut bench = FakeBench::new(&[Role::Load, Role::OutputVoltmeter]);
    let p = plan(FULL); // has a line sweep: needs an input source
    let tmp = tempfile::tempdir().unwrap();
    let err = runner::run(
        &mut bench,
        &p,
        setup(tmp.path()),
        &mut Probe::default(),
        &CancelToken::new(),
    )
    .await
    .unwrap_err();
    assert!(err.to_string().contains("input_source"), "{err}");
    assert!(bench.log.is_empty(), "bench touched: {:?}", bench.log);
    assert!(!tmp.path().join("SN-0007").exists());
}

#[tokio::test]
async fn current_overrange_is_recorded_and_voltage_overrange_trips() {
    // An ammeter overrange is recorded explicitly (never as a number) and flagged.
    let mut bench = FakeBench::full();
    bench.faults.current_overrange_from = Some(6);
    let mut obs = Probe::default();
    let r = go(&mut bench, &plan(SWEEP), &mut obs, &CancelToken::new()).await;
    assert_eq!(r.outcome, Outcome::Completed, "{:?}", r.reason);
    let rec = read_run(&r.dir).unwrap();
    assert_eq!(
        rec.rows[5]
            .cell(Quantity::OutputCurrent)
            .map(|c| c == regulus::record::Cell::Overrange),
        Some(false)
    );
    assert_eq!(
        rec.rows[6].cell(Quantity::OutputCurrent),
        Some(regulus::record::Cell::Overrange)
    );
    assert!(rec.rows[6].has_flag("overrange"));
    assert!(!rec.rows[5].has_flag("overrange"));

    // An overrange output voltage is unknown, hence unsafe: it trips.
    let mut bench = FakeBench::full();
    bench.faults.voltage_overrange_from = Some(2);
    expect_abort(bench, SWEEP, "overrange").await;
}

/// A latching foldback supply: the knee search must still find the knee, in CR mode (unique
/// operating point) and in CC mode (the runner returns to the reference load between probes,
/// below I_sc, which releases the latch).
#[tokio::test]
async fn knee_search_finds_a_foldback_knee_in_cr_and_cc() {
    let f = Foldback {
        v0: 12.0,
        r_out: 0.02,
        i_knee: 1.6,
        i_sc: 0.9,
    };
    for mode in ["cr", "cc"] {
        let text = format!(
            "name = \"fb\"\nsettle = \"1 ms\"\nsamples = 1\n[[step]]\nkind = \"knee_search\"\nmode = \"{mode}\"\ndrop = \"1 %\"\n"
        );
        let mut bench = FakeBench::full();
        bench.foldback = Some(f);
        let mut obs = Probe::default();
        let r = go(&mut bench, &plan(&text), &mut obs, &CancelToken::new()).await;
        assert_eq!(r.outcome, Outcome::Completed, "{mode}: {:?}", r.reason);
        let knee = obs.finished[0].1.knee.expect("knee result");
        // Reference at 10 % of the designed 1.5 A: 0.15 A on the regulated line.
        let v_ref = if mode == "cc" {
            12.0 - 0.02 * 0.15
        } else {
            let r_ref = 12.0 / 0.15;
            12.0 * r_ref / (r_ref + 0.02)
        };
        let truth = f.limit_line_current(0.99 * v_ref);
        let est = knee.limit_current_a.expect("bracketed");
        assert!(
            (est - truth).abs() / truth <= 0.005,
            "{mode}: est {est} truth {truth} ({:?})",
            knee
        );
        assert!(knee.points <= 20);
    }
}
