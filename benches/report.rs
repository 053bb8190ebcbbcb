//! Report speed on SYNTHETIC records (see tests/it/support/report.rs): analysis plus the full
//! report (summary.json, SVG plots, report.html) of a 100,000-row record, from disk and in memory
//! (target under 2 s); a unit's history over 10,000 records (target under 1 s).

#[path = "../tests/it/support/report.rs"]
mod report_support;

use criterion::{criterion_group, criterion_main, Criterion};
use regulus::analysis::{self, AnalysisOptions};
use regulus::report::{self, ReportOptions};
use regulus::rng::Rng;
use report_support as sup;
use std::hint::black_box;

fn big_rows() -> Vec<regulus::record::Row> {
    let mut rng = Rng::new(1);
    let u = sup::Unit::draw(&mut rng);
    // 45,000 sweep + 45,000 trace + 10,001 dwell + 1 recovery = 100,002 rows.
    sup::run_rows(&u, &mut rng, sup::day(0), 45_000, 45_000, 1000.0, 0.1)
}

fn bench_report(c: &mut Criterion) {
    let rows = big_rows();
    let exp = sup::expectation();
    let tmp = tempfile::tempdir().expect("tempdir");
    let dir = sup::write_record(tmp.path(), "SN-BENCH", sup::day(0), &rows);
    let info = report::load_run_info(&dir).expect("run.json");
    let mut g = c.benchmark_group("report 100k rows");
    g.sample_size(10);
    g.bench_function("analysis only (in memory)", |b| {
        b.iter(|| analysis::analyse(black_box(&rows), &AnalysisOptions::default()))
    });
    g.bench_function("analysis + summary + SVG plots + HTML (in memory)", |b| {
        b.iter(|| {
            let opts = ReportOptions::default();
            let s = report::summarize(&info, black_box(&rows), Some(&exp), &opts);
            let curve = analysis::curve_points(&rows);
            let dwell = analysis::dwell_series(&rows);
            let charts = report::charts_for(&curve, &dwell, &s.metrics, Some(&exp));
            let svgs: Vec<(&str, &str, String)> = charts
                .iter()
                .map(|c| {
                    (
                        c.name(),
                        c.caption(),
                        c.to_svg(report::plots::SIZE).expect("svg"),
                    )
                })
                .collect();
            let mut page = Vec::new();
            report::html::write_html(&mut page, &info, &s, &svgs).expect("html");
            let mut json = Vec::new();
            report::write_summary_json(&mut json, &s).expect("json");
            (page.len(), json.len())
        })
    });
    g.bench_function("write_report from disk (parse + analyse + write)", |b| {
        b.iter(|| report::write_report(black_box(&dir), Some(&exp), &ReportOptions::default()))
    });
    g.finish();
}

fn bench_history(c: &mut Criterion) {
    // 10,000 records of one unit, each with run.json and summary.json (as after `report`).
    let tmp = tempfile::tempdir().expect("tempdir");
    let mut rng = Rng::new(2);
    let u = sup::Unit::draw(&mut rng);
    let rows = sup::run_rows(&u, &mut rng, sup::day(0), 20, 20, 10.0, 0.5);
    let first = sup::write_record(tmp.path(), "SN-HIST", sup::day(0), &rows);
    let opts = ReportOptions::default();
    let info = report::load_run_info(&first).expect("run.json");
    let summary = report::summarize(&info, &rows, None, &opts);
    let mut json = Vec::new();
    report::write_summary_json(&mut json, &summary).expect("json");
    let unit_dir = tmp.path().join("SN-HIST");
    for k in 0..10_000i64 {
        let start = sup::day(0) + chrono::Duration::minutes(k * 30);
        let d = unit_dir.join(format!("{}_standard", start.format("%Y%m%dT%H%M%SZ")));
        std::fs::create_dir_all(&d).expect("mkdir");
        let mut ri = info.clone();
        ri.started_utc = start.format("%Y-%m-%dT%H:%M:%S%.3fZ").to_string();
        std::fs::write(d.join("run.json"), serde_json::to_vec(&ri).expect("ser")).expect("write");
        std::fs::write(d.join("summary.json"), &json).expect("write");
    }
    let entries = report::history(tmp.path(), "SN-HIST", &AnalysisOptions::default())
        .expect("history")
        .entries;
    assert_eq!(entries.len(), 10_000);
    let mut g = c.benchmark_group("history 10k records");
    g.sample_size(10);
    g.bench_function("read run.json + summary.json, drift flags", |b| {
        b.iter(|| {
            report::history(
                black_box(tmp.path()),
                "SN-HIST",
                &AnalysisOptions::default(),
            )
        })
    });
    g.bench_function("drift flags + CSV (in memory)", |b| {
        b.iter(|| {
            let h = report::history_from_entries("SN-HIST", black_box(entries.clone()));
            let mut out = Vec::new();
            report::write_history_csv(&mut out, &h).expect("csv");
            out.len()
        })
    });
    g.finish();
}

criterion_group!(benches, bench_report, bench_history);
criterion_main!(benches);
