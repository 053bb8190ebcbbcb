//! History and compare through the records index over 100,000 indexed runs of SYNTHETIC
//! records (see tests/it/support/report.rs; goal: under 1 s each). The index holds 100,000
//! rows (one unit with real folders, the rest rows only), so a unit's history pays for the
//! check of its folders plus an indexed query. `compare --index` is measured on the command's
//! own path (`regulus::cli::compare::evaluate` on parsed arguments): the 99,980 row-only runs
//! are marked as runs of the fixed-12V sample design with what a standard plan promises, so
//! they are judged from the index alone; the 20 real folders (a synthetic design) are judged
//! from their files, as the command does for runs of another design.

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
    let design = std::path::Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("samples")
        .join("fixed-12v-3a-foldback.toml");
    let design_sha256 = regulus::pipeline::InputFile::read(&design, "design file")
        .expect("sample design")
        .sha256();
    let standard = regulus::plan::outline(
        &std::fs::read_to_string(
            std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("samples/plans/standard.toml"),
        )
        .expect("standard plan"),
        "standard.toml",
    )
    .expect("standard plan outline");
    let judging =
        serde_json::to_string(&regulus::floor::judging_of(&standard, None)).expect("judging json");
    let mut rows = Vec::with_capacity(RUNS - 20);
    for k in 0..RUNS - 20 {
        let mut r = model.clone();
        r.unit = format!("SN-{k:06}");
        r.folder = format!("20261102T{:06}Z_standard", k % 240000);
        r.design_sha256 = design_sha256.clone();
        r.judging_json = Some(judging.clone());
        rows.push(r);
    }
    idx.upsert(&rows).expect("upsert");
    assert_eq!(idx.len().expect("len"), RUNS);
    drop(idx);

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
        root.as_os_str(),
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
    g.finish();
}

criterion_group!(benches, bench_index);
criterion_main!(benches);
