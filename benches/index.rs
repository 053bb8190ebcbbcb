//! History and compare through the records index over 100,000 indexed runs of SYNTHETIC
//! records (see tests/it/support/report.rs; goal: under 1 s each). The index holds 100,000
//! rows (one unit with real folders, the rest rows only), so a unit's history pays for the
//! check of its folders plus an indexed query. `compare --index` is measured on the command's
//! own path (`regulus::cli::compare::evaluate` on parsed arguments) over a second index of
//! 100,000 runs copied from the two records `regulus demo` makes on the simulated bench (one in
//! twenty a failing unit, whose diagnosis the index made when the run was indexed), both as
//! `evaluate` decides and with the table or the JSON printed (into a sink).

#[path = "../tests/it/support/report.rs"]
mod report_support;

use clap::Parser;
use criterion::{criterion_group, criterion_main, Criterion};
use regulus::analysis::AnalysisOptions;
use regulus::index::Index;
use regulus::report::{self, ReportOptions};
use regulus::rng::Rng;
use report_support as sup;
use std::hint::black_box;

const RUNS: usize = 100_000;

fn bench_index(c: &mut Criterion) {
    let tmp = tempfile::tempdir().expect("tempdir");
    let root = tmp.path();
    let exp = sup::expectation();
    let mut rng = Rng::new(5);
    let unit = sup::Unit::draw(&mut rng);
    // One unit with 20 real record folders, reported (summary.json) and indexed.
    for d in 0..20 {
        let rows = sup::run_rows(&unit, &mut rng, sup::day(d), 30, 30, 5.0, 0.5);
        let dir = sup::write_record(root, "SN-HIST", sup::day(d), &rows);
        report::write_report(&dir, Some(&exp), &ReportOptions::default()).expect("report");
    }
    let mut idx = Index::open(root).expect("index");
    idx.rebuild().expect("rebuild");
    // The rest: rows only, copies of a real row under other units.
    let model = idx
        .runs(&Default::default())
        .expect("runs")
        .into_iter()
        .next()
        .expect("one run");
    let mut rows = Vec::with_capacity(RUNS - 20);
    for k in 0..RUNS - 20 {
        let mut r = model.clone();
        r.unit = format!("SN-{k:06}");
        r.folder = format!("20261102T{:06}Z_standard", k % 240000);
        rows.push(r);
    }
    idx.upsert(&rows).expect("upsert");
    assert_eq!(idx.len().expect("len"), RUNS);
    drop(idx);

    // compare --index: a second records folder indexed from the two records of `regulus
    // demo` (simulated bench, teaching-lab design: one unit passes, one has a wrong sense
    // resistor), copied into 100,000 runs of distinct units, one in twenty a failing one
    // (each failing run is diagnosed).
    let demo_tmp = tempfile::tempdir().expect("tempdir");
    let demo = demo_tmp.path().join("records");
    let out = std::process::Command::new(env!("CARGO_BIN_EXE_regulus"))
        .args(["demo", "--records"])
        .arg(&demo)
        .output()
        .expect("run regulus demo");
    assert!(
        matches!(out.status.code(), Some(0 | 1)),
        "demo: {}",
        String::from_utf8_lossy(&out.stderr)
    );
    let design = demo.join("inputs").join("teaching-lab-0-20v.toml");
    let mut didx = Index::open(&demo).expect("demo index");
    didx.rebuild().expect("rebuild demo index");
    let demo_runs = didx.runs(&Default::default()).expect("demo runs");
    let pass = demo_runs
        .iter()
        .find(|r| r.unit == "TLB-0001")
        .expect("the demo's passing unit")
        .clone();
    let fail = demo_runs
        .iter()
        .find(|r| r.unit == "TLB-0002")
        .expect("the demo's failing unit")
        .clone();
    assert!(pass.judging_json.is_some() && fail.judging_json.is_some());
    // Judged against their own design when indexed: what compare --index reads for them.
    assert!(pass.prejudged_bin.is_some() && fail.prejudged_bin.is_some());
    let copies: Vec<_> = (0..RUNS - demo_runs.len())
        .map(|k| {
            let mut r = if k % 20 == 0 {
                fail.clone()
            } else {
                pass.clone()
            };
            r.unit = format!("TLB-{k:06}");
            r
        })
        .collect();
    didx.upsert(&copies).expect("upsert demo copies");
    assert_eq!(didx.len().expect("len"), RUNS);
    drop(didx);

    let mut g = c.benchmark_group("index 100k runs");
    g.sample_size(10);
    g.bench_function("history of one unit (folder check + query)", |b| {
        b.iter(|| {
            let h = regulus::cli::index::history(root, "SN-HIST", &AnalysisOptions::default())
                .expect("history");
            assert_eq!(h.entries.len(), 20);
            h
        })
    });
    g.bench_function("read and parse every indexed run's metrics", |b| {
        b.iter(|| {
            let idx = Index::open(black_box(root)).expect("index");
            let rows = idx.metrics_of_runs(None).expect("rows");
            assert_eq!(rows.len(), RUNS);
            rows.len()
        })
    });
    let args = regulus::cli::Cli::try_parse_from([
        "regulus".as_ref(),
        "compare".as_ref(),
        "--design".as_ref(),
        design.as_os_str(),
        "--index".as_ref(),
        demo.as_os_str(),
    ])
    .expect("compare arguments");
    let regulus::cli::Command::Compare(args) = args.command else {
        panic!("not a compare command");
    };
    g.bench_function(
        "compare --index over every indexed run (the command's path)",
        |b| {
            b.iter(|| {
                let out = regulus::cli::compare::evaluate(black_box(&args)).expect("compare");
                assert_eq!(out.offered, RUNS);
                out.records.len()
            })
        },
    );
    for (json, name) in [
        (
            false,
            "compare --index printed as the table (the whole command)",
        ),
        (true, "compare --index printed as JSON (the whole command)"),
    ] {
        g.bench_function(name, |b| {
            b.iter(|| {
                let out = regulus::cli::compare::evaluate(black_box(&args)).expect("compare");
                // Buffered as the command prints, into a sink instead of the terminal.
                let mut w = std::io::BufWriter::new(std::io::sink());
                regulus::cli::compare::write_output(&mut w, &out, json).expect("print");
                out.records.len()
            })
        });
    }
    g.finish();
}

criterion_group!(benches, bench_index);
criterion_main!(benches);
