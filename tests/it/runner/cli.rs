//! `regulus run` wiring above the bench: `prepare` + `execute` against the in-memory bench
//! double give exit 0 and a completed record on success, exit 3 on an interlock trip.

use regulus::cli::run::{execute, prepare, Args};
use regulus::record::{list_runs, read_run, Outcome, RecordState};
use regulus::runner::CancelToken;
use regulus::testkit::FakeBench;
use sha2::{Digest, Sha256};
use std::path::PathBuf;

fn args(tmp: &std::path::Path, plan: &str) -> Args {
    let plan_path = tmp.join("plan.toml");
    std::fs::write(&plan_path, plan).unwrap();
    Args {
        bench: Some(PathBuf::from("config/bench-loopback-example.toml")),
        design: Some(PathBuf::from("samples/fixed-12v-3a-foldback.toml")),
        plan: Some(plan_path),
        unit: "FX-0001".into(),
        records: Some(tmp.join("records")),
        station: None,
        operator: Some("line 3".into()),
        note: Some("first article".into()),
        yes: true,
        json: false,
        no_preflight: false,
    }
}

const PLAN: &str = r#"
name = "quick"
settle = "1 ms"
samples = 2
[[step]]
kind = "load_sweep"
from = "0 A"
to = "max_load"
points = 4
[[step]]
kind = "knee_search"
"#;

#[tokio::test]
async fn execute_completes_with_exit_0_and_a_full_record() {
    let tmp = tempfile::tempdir().unwrap();
    let a = args(tmp.path(), PLAN);
    let prep = prepare(&a).expect("valid inputs");
    let mut bench = FakeBench::full();
    bench.supply.i_l = 3.4;
    let code = execute(&mut bench, &prep, &a, &CancelToken::new())
        .await
        .expect("runs");
    assert_eq!(code, 0);
    let runs = list_runs(a.records.as_deref().unwrap(), "FX-0001").unwrap();
    assert_eq!(runs.len(), 1);
    let rec = read_run(&runs[0].dir).unwrap();
    assert_eq!(rec.state, RecordState::Finished(Outcome::Completed));
    assert_eq!(rec.info.operator.as_deref(), Some("line 3"));
    assert_eq!(rec.info.note.as_deref(), Some("first article"));
    let design = std::fs::read("samples/fixed-12v-3a-foldback.toml").unwrap();
    assert_eq!(
        rec.info.design.sha256,
        format!("{:x}", Sha256::digest(&design))
    );
    assert_eq!(
        std::fs::read(runs[0].dir.join("design.toml")).unwrap(),
        design
    );
    assert_eq!(
        std::fs::read(runs[0].dir.join("bench.toml")).unwrap(),
        std::fs::read("config/bench-loopback-example.toml").unwrap()
    );
    assert!(rec.rows.len() >= 4 + 3);
}

#[tokio::test]
async fn execute_returns_3_on_an_interlock_trip() {
    let tmp = tempfile::tempdir().unwrap();
    let a = args(tmp.path(), PLAN);
    let prep = prepare(&a).expect("valid inputs");
    let mut bench = FakeBench::full();
    bench.faults.overvoltage_from = Some((1, 20.0));
    let code = execute(&mut bench, &prep, &a, &CancelToken::new())
        .await
        .expect("runs");
    assert_eq!(code, 3);
    assert_eq!(bench.safe_state_calls, 1);
}
