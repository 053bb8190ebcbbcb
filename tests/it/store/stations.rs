//! Eight stations, each its own process with its own simulated bench, finish runs and sync
//! twice each into one PostgreSQL server, while some syncs are killed part-way and the server
//! is stopped once for a few seconds (the stations keep testing meanwhile). Afterwards the
//! store holds every run exactly once and every reading row of every record.

use crate::support::e2e::{serial, show, ChildGuard};
use crate::support::floor::{chromium_or_skip, render, Floor};
use crate::support::pg::Pg;
use regulus::sim::SimOptions;
use std::io::Write;
use std::process::{Child, Stdio};
use std::time::Duration;

const STATIONS: usize = 8;

fn batch(f: &Floor, serials: &str) -> Child {
    let mut c = f
        .regulus()
        .args(["batch", "--yes", "--no-pdf", "--station"])
        .arg(&f.station)
        .stdin(Stdio::piped())
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .unwrap();
    c.stdin
        .take()
        .unwrap()
        .write_all(serials.as_bytes())
        .unwrap();
    c
}

fn sync(f: &Floor, url: &str) -> Child {
    f.regulus()
        .args(["sync", "--store", url, "--station"])
        .arg(&f.station)
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .unwrap()
}

fn finish(c: Child) -> (Option<i32>, String) {
    let out = c.wait_with_output().unwrap();
    (out.status.code(), show(&out))
}

#[test]
fn eight_stations_sync_through_killed_syncs_and_a_server_outage() {
    let _g = serial();
    let Some(pg) = Pg::start_or_skip("the eight-station store test") else {
        return;
    };
    let floors: Vec<Floor> = (0..STATIONS)
        .map(|k| {
            let seed = 600 + k as u64;
            Floor::start_station(
                &format!("ST-{k:02}"),
                seed,
                "U[0-9]-[0-9]{3}",
                SimOptions::default().seed(seed),
            )
        })
        .collect();

    // Every station tests two units, all at once.
    let runs: Vec<Child> = floors
        .iter()
        .enumerate()
        .map(|(k, f)| batch(f, &format!("U{k}-001\nU{k}-002\n")))
        .collect();
    for c in runs {
        let (code, text) = finish(c);
        assert_eq!(code, Some(0), "{text}");
        assert!(
            text.contains("batch ended: tally: 2 unit(s)")
                && text.contains("0 incomplete, 0 error"),
            "{text}"
        );
    }

    // First sync of every station at once; three are killed part-way.
    let syncs: Vec<ChildGuard> = floors
        .iter()
        .map(|f| ChildGuard(sync(f, &pg.url)))
        .collect();
    let mut killed_running = 0;
    for (k, mut s) in syncs.into_iter().enumerate() {
        if k % 3 == 0 {
            std::thread::sleep(Duration::from_millis(40 * k as u64 + 30));
            if s.0.try_wait().unwrap().is_none() {
                killed_running += 1;
            }
            let _ = s.0.kill();
            let _ = s.0.wait();
        } else {
            let (code, _out, _err) = s.finish();
            // A sync finishing while its neighbours are killed completes (0).
            assert_eq!(code, Some(0));
        }
    }

    assert!(killed_running >= 1, "no sync was still running when killed");

    // The server goes away; the stations keep testing, and a sync only queues.
    pg.stop();
    let runs: Vec<Child> = floors
        .iter()
        .enumerate()
        .map(|(k, f)| batch(f, &format!("U{k}-003\n")))
        .collect();
    for c in runs {
        let (code, text) = finish(c);
        assert_eq!(code, Some(0), "{text}");
        assert!(
            text.contains("batch ended: tally: 1 unit(s)")
                && text.contains("0 incomplete, 0 error"),
            "{text}"
        );
    }
    let (code, text) = finish(sync(&floors[1], &pg.url));
    assert_eq!(code, Some(3), "{text}");
    assert!(
        text.contains("store unreachable") && text.contains("stay queued"),
        "{text}"
    );
    pg.start();

    // Second sync of every station at once: everything arrives.
    let syncs: Vec<Child> = floors.iter().map(|f| sync(f, &pg.url)).collect();
    for c in syncs {
        let (code, text) = finish(c);
        assert_eq!(code, Some(0), "{text}");
        assert!(text.contains("0 queued"), "{text}");
    }

    // Every run exactly once, with every reading row of its record.
    let mut local_runs = 0i64;
    let mut local_rows = 0i64;
    for (k, f) in floors.iter().enumerate() {
        let records = f.rig.dir.path().join("records");
        for unit in std::fs::read_dir(&records).unwrap() {
            let unit = unit.unwrap().path();
            if !unit.is_dir() {
                continue;
            }
            for dir in std::fs::read_dir(&unit).unwrap() {
                let dir = dir.unwrap().path();
                let rows = regulus::record::read_rows(&dir.join("readings.csv")).unwrap();
                let id = regulus::store::run_id(
                    &format!("ST-{k:02}"),
                    &unit.file_name().unwrap().to_string_lossy(),
                    &dir.file_name().unwrap().to_string_lossy(),
                );
                assert_eq!(
                    pg.query_i64(&format!("SELECT count(*) FROM run WHERE run_id = '{id}'")),
                    1,
                    "{id}"
                );
                assert_eq!(
                    pg.query_i64(&format!(
                        "SELECT count(*) FROM reading WHERE run_id = '{id}'"
                    )),
                    rows.len() as i64,
                    "{id}"
                );
                local_runs += 1;
                local_rows += rows.len() as i64;
            }
        }
    }
    assert_eq!(local_runs, 3 * STATIONS as i64);
    assert_eq!(pg.query_i64("SELECT count(*) FROM run"), local_runs);
    assert_eq!(pg.query_i64("SELECT count(*) FROM reading"), local_rows);
    assert_eq!(
        pg.query_i64("SELECT count(*) FROM station"),
        STATIONS as i64
    );
}
