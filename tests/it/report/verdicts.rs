//! The outcome contract on records read back by `report` and `compare` (built binary,
//! SYNTHETIC records from `support::report` in a temp folder): a record that did not finish,
//! lacks a metric its plan promised, or judged nothing is INCOMPLETE (exit 3), never PASS; a
//! station failure is ERROR (exit 4); `compare` counts units, not records, and says what it
//! left out. Exit codes: docs/ARCHITECTURE.md "Exit codes".

use crate::support::report as sup;
use regulus::rng::Rng;
use std::path::{Path, PathBuf};
use std::process::Command;

fn regulus(args: &[&str], cwd: &Path) -> std::process::Output {
    Command::new(env!("CARGO_BIN_EXE_regulus"))
        .args(args)
        .current_dir(cwd)
        .output()
        .expect("run regulus")
}

fn design() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/report_golden/bench12.toml")
}

/// A plan snapshot with the steps the synthetic rows come from.
const PLAN: &str = "name = \"standard\"\n[[step]]\nkind = \"load_sweep\"\nfrom = \"0 A\"\n\
to = \"max_load\"\npoints = 5\n[[step]]\nkind = \"limit_trace\"\nmode = \"cv\"\n\
from = \"95 % of vout\"\nto = \"10 % of vout\"\npoints = 5\n[[step]]\n\
kind = \"short_circuit\"\ndwell = \"1 s\"\n";

/// A finished, good synthetic record of `unit` started on `day`, with the plan snapshot
/// and the design snapshot.
fn good_record(root: &Path, unit: &str, day: i64, seed: u64) -> PathBuf {
    let mut rng = Rng::new(seed);
    let u = sup::Unit::draw(&mut rng);
    let rows = sup::run_rows(&u, &mut rng, sup::day(day), 30, 30, 20.0, 0.5);
    let dir = sup::write_record(&root.join("records"), unit, sup::day(day), &rows);
    std::fs::write(dir.join("plan.toml"), PLAN).unwrap();
    std::fs::copy(design(), dir.join("design.toml")).unwrap();
    dir
}

fn set_outcome(dir: &Path, outcome: &str, reason: Option<&str>) {
    let p = dir.join("run.json");
    let mut v: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(&p).unwrap()).unwrap();
    v["outcome"] = outcome.into();
    v["reason"] = reason.map(Into::into).unwrap_or(serde_json::Value::Null);
    std::fs::write(&p, serde_json::to_vec_pretty(&v).unwrap()).unwrap();
}

fn text(o: &std::process::Output) -> String {
    format!(
        "exit {:?}\n{}{}",
        o.status.code(),
        String::from_utf8_lossy(&o.stdout),
        String::from_utf8_lossy(&o.stderr)
    )
}

#[test]
fn a_good_finished_record_passes_and_the_same_record_stopped_is_incomplete() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = good_record(tmp.path(), "SN-0200", 0, 5);
    let d = dir.to_str().unwrap();
    let ok = regulus(&["report", d], tmp.path());
    assert_eq!(ok.status.code(), Some(0), "{}", text(&ok));
    assert!(text(&ok).contains("verdict: PASS"), "{}", text(&ok));

    // Stopped by an interlock: every metric passes, the run did not: INCOMPLETE, not FAIL.
    set_outcome(
        &dir,
        "aborted",
        Some("interlock: load power 50 W exceeds 40 W"),
    );
    let stopped = regulus(&["report", d], tmp.path());
    let t = text(&stopped);
    assert_eq!(stopped.status.code(), Some(3), "{t}");
    assert!(t.contains("verdict: INCOMPLETE"), "{t}");
    assert!(t.contains("interlock: load power"), "{t}");
    assert!(!t.contains("verdict: FAIL"), "{t}");
    let summary: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(dir.join("summary.json")).unwrap()).unwrap();
    assert_eq!(summary["verdict"], "incomplete");
    assert!(summary["reasons"][0]
        .as_str()
        .unwrap()
        .contains("stopped before the end"));
    let html = std::fs::read_to_string(dir.join("report.html")).unwrap();
    assert!(html.contains("INCOMPLETE"), "the page shows the outcome");

    // The station failed (an instrument stopped answering): ERROR, exit 4.
    set_outcome(&dir, "error", Some("instrument failure: dmm: no reply"));
    let err = regulus(&["report", d], tmp.path());
    assert_eq!(err.status.code(), Some(4), "{}", text(&err));
    assert!(text(&err).contains("verdict: ERROR"), "{}", text(&err));
}

#[test]
fn a_header_only_record_is_incomplete_and_names_what_is_missing() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = good_record(tmp.path(), "SN-0201", 0, 6);
    std::fs::write(
        dir.join("readings.csv"),
        format!("{}\n", regulus::record::READINGS_HEADER),
    )
    .unwrap();
    let p = dir.join("run.json");
    let mut v: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(&p).unwrap()).unwrap();
    v["rows"] = 0.into();
    std::fs::write(&p, serde_json::to_vec_pretty(&v).unwrap()).unwrap();
    let out = regulus(&["report", dir.to_str().unwrap()], tmp.path());
    let t = text(&out);
    assert_eq!(out.status.code(), Some(3), "{t}");
    assert!(t.contains("verdict: INCOMPLETE"), "{t}");
    // Every metric the plan snapshot's steps promise is named as not measured.
    for m in [
        "output_voltage",
        "load_regulation",
        "limit_current",
        "short_circuit_current",
        "recovery",
    ] {
        assert!(t.contains(&format!("{m} not measured")), "{m}: {t}");
    }
}

#[test]
fn a_plan_whose_metrics_have_no_limit_judges_nothing_and_is_incomplete() {
    // Only a line sweep and a soak: their metrics are measured but the design gives them no
    // limit, so nothing is judged: not PASS.
    let tmp = tempfile::tempdir().unwrap();
    let dir = good_record(tmp.path(), "SN-0202", 0, 7);
    let rows = regulus::record::read_rows(&dir.join("readings.csv")).unwrap();
    let mut line: Vec<regulus::record::Row> = Vec::new();
    for (k, r) in rows.iter().take(6).enumerate() {
        let mut r = r.clone();
        r.step = if k < 3 { 0 } else { 1 };
        r.point = k % 3;
        r.step_kind = if k < 3 {
            regulus::record::StepKind::LineSweep
        } else {
            regulus::record::StepKind::Soak
        };
        r.source_volts = Some(16.0 + k as f64);
        r.flags = Default::default();
        line.push(r);
    }
    std::fs::write(dir.join("readings.csv"), sup::readings_csv(&line)).unwrap();
    std::fs::write(
        dir.join("plan.toml"),
        "name = \"line-soak\"\n[[step]]\nkind = \"line_sweep\"\nfrom = \"16 V\"\nto = \"18 V\"\n\
         points = 3\nload = \"0.5 A\"\n[[step]]\nkind = \"soak\"\nload = \"0.5 A\"\n\
         duration = \"2 s\"\ninterval = \"1 s\"\n",
    )
    .unwrap();
    let out = regulus(&["report", dir.to_str().unwrap()], tmp.path());
    let t = text(&out);
    assert_eq!(out.status.code(), Some(3), "{t}");
    assert!(t.contains("nothing was judged"), "{t}");
    assert!(!t.contains("verdict: PASS"), "{t}");
}

#[test]
fn compare_judges_units_on_their_latest_finished_run_and_counts_what_it_left_out() {
    // Two units, three records: unit A ran twice (an older run and a newer finished one),
    // unit B once but its run was stopped. n counts units, and the left-out record is named.
    let tmp = tempfile::tempdir().unwrap();
    let a_old = good_record(tmp.path(), "SN-A", 0, 11);
    let a_new = good_record(tmp.path(), "SN-A", 1, 12);
    let b = good_record(tmp.path(), "SN-B", 0, 13);
    set_outcome(&b, "aborted", Some("interrupted by the operator"));
    let records = tmp.path().join("records");
    let out = regulus(
        &[
            "compare",
            "--design",
            design().to_str().unwrap(),
            records.to_str().unwrap(),
        ],
        tmp.path(),
    );
    let t = text(&out);
    // The stopped unit is INCOMPLETE: the worst outcome gives the exit code 3.
    assert_eq!(out.status.code(), Some(3), "{t}");
    assert!(
        t.contains("2 unit(s) judged on 2 of 3 record(s); 1 left out"),
        "{t}"
    );
    assert!(
        t.contains(&format!("left out  SN-A  {}", a_old.display())),
        "{t}"
    );
    assert!(t.contains("an earlier run of SN-A"), "{t}");
    assert!(
        t.contains(&format!("PASS       SN-A  {}", a_new.display())),
        "{t}"
    );
    assert!(t.contains("INCOMPLETE SN-B"), "{t}");
    // Population statistics count units judged on a finished run only (one here), never
    // records: no statistic over two.
    assert!(!t.contains(" n   2 ") && !t.contains(" n   3 "), "{t}");
    let json = regulus(
        &[
            "compare",
            "--json",
            "--design",
            design().to_str().unwrap(),
            records.to_str().unwrap(),
        ],
        tmp.path(),
    );
    let v: serde_json::Value = serde_json::from_slice(&json.stdout).unwrap();
    assert_eq!(v["units"], 2);
    assert_eq!(v["offered"], 3);
    assert_eq!(v["left_out"].as_array().unwrap().len(), 1);
    // --every-record judges all three.
    let every = regulus(
        &[
            "compare",
            "--every-record",
            "--design",
            design().to_str().unwrap(),
            records.to_str().unwrap(),
        ],
        tmp.path(),
    );
    assert!(
        text(&every).contains("2 unit(s) judged on 3 of 3 record(s); 0 left out"),
        "{}",
        text(&every)
    );
}

mod property {
    //! No record with a promised metric missing, or with an unfinished outcome, is ever PASS:
    //! good synthetic readings cut at any row, with any run.json outcome, any record state
    //! and any plan, judged through `report::summarize_record` (what `report`, `history`
    //! and `compare` use). The metric presence is checked here from the metrics themselves,
    //! not through the rule's own list.
    use super::sup;
    use proptest::prelude::*;
    use regulus::compare::Verdict;
    use regulus::record::{Outcome, RecordState, StepKind};
    use regulus::report::{self, ReportOptions};
    use regulus::rng::Rng;

    const KINDS: [StepKind; 6] = [
        StepKind::LoadSweep,
        StepKind::LimitTrace,
        StepKind::KneeSearch,
        StepKind::ShortCircuit,
        StepKind::LineSweep,
        StepKind::Soak,
    ];
    const OUTCOMES: [Outcome; 5] = [
        Outcome::Running,
        Outcome::Completed,
        Outcome::Aborted,
        Outcome::Error,
        Outcome::Failed,
    ];

    fn present(kind: StepKind, m: &regulus::analysis::Metrics) -> bool {
        match kind {
            StepKind::LoadSweep => m.no_load.is_some() && m.load_regulation.is_some(),
            StepKind::LimitTrace | StepKind::KneeSearch => {
                m.no_load.is_some()
                    && m.knee
                        .is_some_and(|k| k.fixed_drop.is_some() || k.two_segment.is_some())
            }
            StepKind::ShortCircuit => m.short_circuit.is_some_and(|s| s.recovered.is_some()),
            StepKind::LineSweep => m.line_regulation.is_some(),
            StepKind::Soak => m.soak.is_some(),
            // The pre-flight reading is no plan step and promises nothing.
            StepKind::Preflight => true,
        }
    }

    proptest! {
        #![proptest_config(ProptestConfig::with_cases(200))]
        #[test]
        fn never_pass_with_a_promised_metric_missing_or_an_unfinished_run(
            seed in 1u64..50,
            keep in 0usize..120,
            outcome in 0usize..5,
            state in 0usize..4,
            plan in proptest::collection::vec(0usize..6, 0..5),
            judged in any::<bool>(),
        ) {
            let mut rng = Rng::new(seed);
            let u = sup::Unit::draw(&mut rng);
            let mut rows = sup::run_rows(&u, &mut rng, sup::day(0), 20, 20, 10.0, 0.5);
            rows.truncate(keep.min(rows.len()));
            let outcome = OUTCOMES[outcome];
            let state = match state {
                0 => None,
                1 => Some(RecordState::Running),
                2 => Some(RecordState::Incomplete),
                _ => Some(RecordState::Finished(outcome)),
            };
            let mut info = sup::run_info("SN-P", sup::day(0), &rows);
            info.outcome = outcome;
            let kinds: Vec<StepKind> = plan.iter().map(|k| KINDS[*k]).collect();
            let opts = ReportOptions {
                plan_steps: Some(kinds.clone()),
                ..ReportOptions::default()
            };
            let exp = sup::expectation();
            let s = report::summarize_record(&info, state, &rows, judged.then_some(&exp), &opts);
            let unfinished = outcome != Outcome::Completed
                || matches!(state, Some(RecordState::Running | RecordState::Incomplete));
            let missing = kinds.iter().any(|k| !present(*k, &s.metrics));
            if unfinished || missing {
                prop_assert_ne!(s.verdict, Some(Verdict::Pass));
                prop_assert_ne!(s.verdict, None, "an unfinished or short record has an outcome");
                prop_assert!(!s.reasons.is_empty());
            }
            if judged && s.comparison.as_ref().is_some_and(|c| c.checks.is_empty()) {
                prop_assert_ne!(s.verdict, Some(Verdict::Pass));
            }
            if s.verdict == Some(Verdict::Pass) {
                prop_assert!(!unfinished && !missing && judged);
            }
        }
    }
}

#[test]
fn help_lists_every_exit_code() {
    let tmp = tempfile::tempdir().unwrap();
    for args in [
        &["--help"][..],
        &["run", "--help"],
        &["report", "--help"],
        &["compare", "--help"],
    ] {
        let out = regulus(args, tmp.path());
        let t = text(&out);
        assert_eq!(out.status.code(), Some(0), "{t}");
        for line in [
            "0  PASS",
            "1  FAIL",
            "2  usage",
            "3  INCOMPLETE",
            "4  ERROR",
            "5  MARGINAL",
        ] {
            assert!(t.contains(line), "{args:?}: {line}: {t}");
        }
    }
}

#[test]
fn plan_limits_make_line_regulation_and_soak_drift_judged_metrics() {
    // The same line-and-soak record as above, with limits in its plan snapshot: the line
    // regulation and the soak drift are judged (a generous limit passes, a tight one fails).
    let tmp = tempfile::tempdir().unwrap();
    let dir = good_record(tmp.path(), "SN-0203", 0, 8);
    let rows = regulus::record::read_rows(&dir.join("readings.csv")).unwrap();
    let mut line: Vec<regulus::record::Row> = Vec::new();
    for (k, r) in rows.iter().take(6).enumerate() {
        let mut r = r.clone();
        r.step = usize::from(k >= 3);
        r.point = k % 3;
        r.step_kind = if k < 3 {
            regulus::record::StepKind::LineSweep
        } else {
            regulus::record::StepKind::Soak
        };
        r.source_volts = Some(16.0 + k as f64);
        // The programmed source voltage is the line (no input voltmeter reading).
        r.cells.set(regulus::measure::Quantity::InputVoltage, None);
        r.flags = Default::default();
        line.push(r);
    }
    std::fs::write(dir.join("readings.csv"), sup::readings_csv(&line)).unwrap();
    let plan = |change: &str, drift: &str| {
        format!(
            "name = \"line-soak\"\n[[step]]\nkind = \"line_sweep\"\nfrom = \"16 V\"\n\
             to = \"18 V\"\npoints = 3\nload = \"0.5 A\"\nmax_change = \"{change}\"\n[[step]]\n\
             kind = \"soak\"\nload = \"0.5 A\"\nduration = \"2 s\"\ninterval = \"1 s\"\n\
             max_drift = \"{drift}\"\n"
        )
    };
    std::fs::write(dir.join("plan.toml"), plan("50 %", "50 %")).unwrap();
    let out = regulus(&["report", dir.to_str().unwrap()], tmp.path());
    let t = text(&out);
    assert_eq!(out.status.code(), Some(0), "{t}");
    assert!(
        t.contains("line_regulation") && t.contains("soak_drift"),
        "{t}"
    );
    assert!(t.contains("verdict: PASS"), "{t}");
    std::fs::write(dir.join("plan.toml"), plan("0.0001 %", "50 %")).unwrap();
    let out = regulus(&["report", dir.to_str().unwrap()], tmp.path());
    let t = text(&out);
    assert_eq!(out.status.code(), Some(1), "{t}");
    assert!(t.contains("line_regulation fail"), "{t}");
}
