//! Record writer and readers: rows on disk as soon as they are appended, distinct folders for
//! runs started in the same second, atomic run.json, incomplete-record detection, and a
//! reading cut short by a killed process being skipped.

use chrono::{TimeZone, Utc};
use regulus::control::InstrumentIdentity;
use regulus::measure::{LoadMode, Quantity, Role};
use regulus::record::*;
use std::io::Write;

fn info(unit: &str) -> RunInfo {
    RunInfo {
        schema_version: SCHEMA_VERSION,
        tool_version: "0.1.0".into(),
        unit: unit.into(),
        plan_name: "bring-up".into(),
        design: DesignRef {
            path: "d.toml".into(),
            sha256: "00".into(),
            name: "lab-12v".into(),
        },
        instruments: vec![InstrumentIdentity {
            name: "load".into(),
            roles: vec![Role::Load],
            link: "tcp 127.0.0.1:5025".into(),
            identity: None,
        }],
        operator: Some("bench 2".into()),
        note: None,
        started_utc: String::new(),
        ended_utc: None,
        outcome: Outcome::Running,
        reason: None,
        rows: 0,
    }
}

fn snaps() -> Snapshots<'static> {
    Snapshots {
        design: b"design = 1\n",
        bench: b"bench = 2\n",
        plan: b"name = \"bring-up\"\n",
    }
}

fn row(point: usize, v: f64) -> Row {
    Row {
        utc: "2026-12-01T22:40:01.123Z".into(),
        elapsed_s: 1.5 + point as f64,
        step: 0,
        step_kind: StepKind::LoadSweep,
        point,
        load_mode: LoadState::On(LoadMode::ConstantCurrent),
        setpoint: Some(0.25 * point as f64),
        source_volts: None,
        samples: 3,
        cells: [
            (
                Quantity::OutputVoltage,
                Some(Cell::Value {
                    mean: v,
                    spread: 0.002,
                }),
            ),
            (Quantity::OutputCurrent, Some(Cell::Overrange)),
            (
                Quantity::Temperature,
                Some(Cell::Value {
                    mean: 31.25,
                    spread: 0.0,
                }),
            ),
        ]
        .into(),
        flags: if point == 1 {
            Flags::from(vec![Flag::Overrange, Flag::Recovery])
        } else {
            Flags::from(vec![Flag::Overrange])
        },
    }
}

fn started() -> chrono::DateTime<Utc> {
    Utc.with_ymd_and_hms(2026, 12, 1, 22, 40, 0).unwrap()
}

#[test]
fn each_row_is_on_disk_while_the_writer_is_alive() {
    let tmp = tempfile::tempdir().unwrap();
    let mut w = RecordWriter::create(tmp.path(), started(), info("SN-0042"), &snaps()).unwrap();
    let csv = w.dir().join(READINGS_FILE);
    assert_eq!(read_rows(&csv).unwrap().len(), 0);
    for k in 0..5 {
        let r = row(k, 12.0 - 0.01 * k as f64);
        w.append(&r).unwrap();
        let back = read_rows(&csv).unwrap();
        assert_eq!(back.len(), k + 1, "row {k} not on disk after append");
        assert_eq!(back[k], r, "row {k} does not read back identically");
    }
    // The header is exactly the documented one.
    let text = std::fs::read_to_string(&csv).unwrap();
    assert_eq!(text.lines().next(), Some(READINGS_HEADER));
    let info = read_info(w.dir()).unwrap();
    assert_eq!(info.outcome, Outcome::Running);
    assert_eq!(info.started_utc, "2026-12-01T22:40:00.000Z");
    assert_eq!(record_state(w.dir(), &info), RecordState::Running);
    drop(w);
}

#[test]
fn runs_in_the_same_second_get_distinct_folders() {
    let tmp = tempfile::tempdir().unwrap();
    let a = RecordWriter::create(tmp.path(), started(), info("SN-1"), &snaps()).unwrap();
    let b = RecordWriter::create(tmp.path(), started(), info("SN-1"), &snaps()).unwrap();
    let c = RecordWriter::create(tmp.path(), started(), info("SN-1"), &snaps()).unwrap();
    let name = |w: &RecordWriter| w.dir().file_name().unwrap().to_string_lossy().to_string();
    assert_eq!(name(&a), "20261201T224000Z_bring-up");
    assert_eq!(name(&b), "20261201T224000Z_bring-up-2");
    assert_eq!(name(&c), "20261201T224000Z_bring-up-3");
    // Snapshots are byte-for-byte copies.
    assert_eq!(
        std::fs::read(a.dir().join(PLAN_SNAPSHOT)).unwrap(),
        snaps().plan
    );
    let runs = list_runs(tmp.path(), "SN-1").unwrap();
    assert_eq!(runs.len(), 3);
    assert_eq!(runs[2].dir, c.dir());
}

#[test]
fn finish_replaces_run_json_and_leaves_no_temp_file() {
    let tmp = tempfile::tempdir().unwrap();
    let mut w = RecordWriter::create(tmp.path(), started(), info("SN-2"), &snaps()).unwrap();
    w.append(&row(0, 12.0)).unwrap();
    w.append(&row(1, 11.9)).unwrap();
    let dir = w.dir().to_path_buf();
    let end = Utc.with_ymd_and_hms(2026, 12, 1, 22, 45, 0).unwrap();
    let fin = w
        .finish(end, Outcome::Aborted, Some("interlock: test".into()))
        .unwrap();
    assert_eq!(fin.rows, 2);
    let rec = read_run(&dir).unwrap();
    assert_eq!(rec.info, fin);
    assert_eq!(rec.state, RecordState::Finished(Outcome::Aborted));
    assert_eq!(
        rec.info.ended_utc.as_deref(),
        Some("2026-12-01T22:45:00.000Z")
    );
    assert_eq!(rec.rows.len(), 2);
    let names: Vec<String> = std::fs::read_dir(&dir)
        .unwrap()
        .map(|e| e.unwrap().file_name().to_string_lossy().to_string())
        .collect();
    assert!(!names.iter().any(|n| n.ends_with(".tmp")), "{names:?}");
}

#[test]
fn a_dead_writer_leaves_an_incomplete_record_without_the_reading_in_flight() {
    let tmp = tempfile::tempdir().unwrap();
    let mut w = RecordWriter::create(tmp.path(), started(), info("SN-3"), &snaps()).unwrap();
    w.append(&row(0, 12.0)).unwrap();
    let dir = w.dir().to_path_buf();
    // The process dies: its file handles close (as a killed process's do) without finish().
    drop(w);
    // ...in the middle of writing the next row.
    let mut f = std::fs::OpenOptions::new()
        .append(true)
        .open(dir.join(READINGS_FILE))
        .unwrap();
    f.write_all(b"2026-12-01T22:40:09.000Z,9.000,0,load_sweep,1,cc,0.5,,3,11.9")
        .unwrap();
    drop(f);
    let rec = read_run(&dir).unwrap();
    assert_eq!(rec.state, RecordState::Incomplete);
    assert_eq!(rec.rows.len(), 1, "the half-written row is dropped");
    let hist = list_runs(tmp.path(), "SN-3").unwrap();
    assert_eq!(hist[0].state, Some(RecordState::Incomplete));
}

#[test]
fn unsafe_unit_ids_and_foreign_files_are_refused() {
    let tmp = tempfile::tempdir().unwrap();
    for bad in ["../x", "", ".hidden", "a/b"] {
        let e = RecordWriter::create(tmp.path(), started(), info(bad), &snaps()).unwrap_err();
        assert!(e.to_string().contains("unit id"), "{e}");
    }
    let p = tmp.path().join("other.csv");
    std::fs::write(&p, "a,b\n1,2\n").unwrap();
    let e = read_rows(&p).unwrap_err();
    assert!(e.to_string().contains("line 1"), "{e}");
    // A bad number is reported with its line.
    let p = tmp.path().join("bad.csv");
    std::fs::write(
        &p,
        format!(
            "{READINGS_HEADER}\n2026-12-01T22:40:09.000Z,x,0,load_sweep,1,cc,0.5,,3,,,,,,,,,,,\n"
        ),
    )
    .unwrap();
    let e = read_rows(&p).unwrap_err();
    assert!(e.to_string().contains("line 2"), "{e}");
    assert!(e.to_string().contains("elapsed_s"), "{e}");
}

/// Child side of the kill test (not a test of its own): writes rows forever into the folder
/// named by the parent, which kills it.
#[test]
#[ignore = "child process of a_killed_writer_process_leaves_an_incomplete_but_readable_record"]
fn child_writer_for_kill_test() {
    let root = std::env::var("REGULUS_KILL_TEST_ROOT").expect("spawned by the kill test");
    let mut w = RecordWriter::create(
        std::path::Path::new(&root),
        started(),
        info("SN-KILL"),
        &snaps(),
    )
    .unwrap();
    let mut k = 0;
    loop {
        w.append(&row(k, 12.0)).unwrap();
        k += 1;
        std::thread::sleep(std::time::Duration::from_millis(5));
    }
}

#[cfg(unix)]
#[test]
fn a_killed_writer_process_leaves_an_incomplete_but_readable_record() {
    use std::time::{Duration, Instant};
    let tmp = tempfile::tempdir().unwrap();
    let mut child = std::process::Command::new(std::env::current_exe().unwrap())
        .args([
            "--exact",
            "runner::record::child_writer_for_kill_test",
            "--ignored",
            "--nocapture",
        ])
        .env("REGULUS_KILL_TEST_ROOT", tmp.path())
        .stdout(std::process::Stdio::null())
        .stderr(std::process::Stdio::null())
        .spawn()
        .unwrap();
    // Wait until the child has written some rows and is seen as running.
    let unit = tmp.path().join("SN-KILL");
    let deadline = Instant::now() + Duration::from_secs(30);
    let dir = loop {
        assert!(Instant::now() < deadline, "child wrote nothing");
        if let Ok(mut rd) = std::fs::read_dir(&unit) {
            if let Some(Ok(e)) = rd.next() {
                let d = e.path();
                if read_rows(&d.join(READINGS_FILE))
                    .map(|r| r.len() >= 10)
                    .unwrap_or(false)
                {
                    break d;
                }
            }
        }
        std::thread::sleep(Duration::from_millis(10));
    };
    let info = read_info(&dir).unwrap();
    assert_eq!(record_state(&dir, &info), RecordState::Running);
    child.kill().unwrap(); // SIGKILL: no destructors, no finish()
    child.wait().unwrap();
    let rec = read_run(&dir).unwrap();
    assert_eq!(rec.state, RecordState::Incomplete);
    assert!(rec.rows.len() >= 10);
    for (k, r) in rec.rows.iter().enumerate() {
        assert_eq!(r.point, k, "rows are whole and in order");
    }
}
