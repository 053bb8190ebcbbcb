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
    assert_eq!(code, Some(4), "{text}");
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

    // compare across stations (from the store) and for one station (from its index) judges
    // every run, the same way.
    let design = crate::support::e2e::sample(crate::support::floor::LAB);
    let judged = |extra: &[&str]| -> serde_json::Value {
        let out = floors[0]
            .regulus()
            .args(["compare", "--json", "--design", &design])
            .args(extra)
            .output()
            .unwrap();
        assert!(matches!(out.status.code(), Some(0 | 1)), "{}", show(&out));
        serde_json::from_slice(&out.stdout).unwrap()
    };
    let all = judged(&["--store", &pg.url]);
    assert_eq!(all["records"].as_array().unwrap().len() as i64, local_runs);
    let records0 = floors[0].rig.dir.path().join("records");
    let one = judged(&["--index", &records0.display().to_string()]);
    assert_eq!(one["records"].as_array().unwrap().len(), 3);
    for r in one["records"].as_array().unwrap() {
        let unit = r["unit"].as_str().unwrap();
        let same = all["records"]
            .as_array()
            .unwrap()
            .iter()
            .find(|x| {
                x["unit"] == unit
                    && x["record"]
                        .as_str()
                        .unwrap()
                        .ends_with(r["record"].as_str().unwrap().rsplit('/').next().unwrap())
            })
            .expect("the same run in the store");
        assert_eq!(same["comparison"]["verdict"], r["comparison"]["verdict"]);
    }

    // The dashboard across all stations, rendered in headless Chromium.
    let page = floors[0].rig.dir.path().join("dashboard.html");
    let out = floors[0]
        .regulus()
        .args(["dashboard", "--store", &pg.url, "--out"])
        .arg(&page)
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(0), "{}", show(&out));
    assert!(String::from_utf8_lossy(&out.stdout).contains(&format!("({local_runs} run(s))")));
    let html = std::fs::read_to_string(&page).unwrap();
    check_histograms(&html);
    let Some(exe) = chromium_or_skip("the dashboard test") else {
        return;
    };
    let dom = render(
        &exe,
        &page,
        &floors[0].rig.dir.path().join("dashboard.png"),
        "1100,2400",
    );
    for must in [
        "<table id=\"counts\"",
        "<table id=\"yield\"",
        "<table id=\"capability\"",
        "<table id=\"outliers\"",
        "id=\"imr-limit_current\"",
        "id=\"mr-limit_current\"",
        "id=\"hist-limit_current\"",
        "id=\"hist-output_voltage\"",
        "95 % bounds",
    ] {
        assert!(dom.contains(must), "dashboard DOM lacks {must:?}");
    }
    // Cpk of the limit current over 24 judged units is shown with its bounds.
    let cap = &dom[dom.find("<table id=\"capability\"").unwrap()..];
    let row = &cap[cap.find("limit_current").unwrap()..];
    let row = &row[..row.find("</tr>").unwrap()];
    assert!(row.contains(" .. "), "{row}");
}

/// No histogram bar straddles a limit line, and every legend sits below the plotting area.
fn check_histograms(html: &str) {
    let attr = |tag: &str, name: &str| -> Option<f64> {
        let at = tag.find(&format!(" {name}=\""))? + name.len() + 3;
        tag[at..].split('"').next()?.parse().ok()
    };
    let mut rest = html;
    let mut seen = 0;
    while let Some(k) = rest.find("<svg id=\"hist-") {
        let end = rest[k..].find("</svg>").unwrap() + k;
        let svg = &rest[k..end];
        let limits: Vec<f64> = svg
            .split("<line class=\"limit\"")
            .skip(1)
            .filter_map(|t| attr(t, "x1"))
            .collect();
        let bottom = svg
            .split("<line class=\"limit\"")
            .skip(1)
            .filter_map(|t| attr(t, "y2"))
            .fold(0.0f64, f64::max);
        // The first rect is the plotting area.
        for rect in svg.split("<rect").skip(2) {
            let (Some(x), Some(w)) = (attr(rect, "x"), attr(rect, "width")) else {
                continue;
            };
            if rect.contains("height=\"3\"") {
                // A legend swatch: below the plotting area.
                assert!(
                    attr(rect, "y").unwrap() > bottom,
                    "legend over the plot: {rect}"
                );
                continue;
            }
            for l in &limits {
                // Coordinates are written to 0.1 px.
                assert!(
                    !(x + 0.2 < *l && *l < x + w - 0.2),
                    "a bar straddles the limit at {l}: {rect}"
                );
            }
        }
        seen += 1;
        rest = &rest[end..];
    }
    assert!(seen >= 2, "expected histograms, found {seen}");
}
