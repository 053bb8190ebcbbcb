//! History and compare through the records index over 100,000 indexed runs of SYNTHETIC
//! records (see tests/it/support/report.rs; goal: under 1 s each). The index holds 100,000
//! rows (one unit with real folders, the rest rows only), so a unit's history pays for the
//! check of its folders plus an indexed query, and compare re-judges every run's stored
//! metrics against the design.

#[path = "../tests/it/support/report.rs"]
mod report_support;

use criterion::{criterion_group, criterion_main, Criterion};
use regulus::analysis::AnalysisOptions;
use regulus::compare::{self, KeyValues};
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
    g.bench_function("compare every indexed run against the design", |b| {
        b.iter(|| {
            let runs = regulus::cli::index::indexed_metrics(
                black_box(root),
                None,
                &AnalysisOptions::default(),
            )
            .expect("runs");
            assert_eq!(runs.len(), RUNS);
            let mut units = Vec::with_capacity(runs.len());
            let mut fails = 0;
            for (_, unit, m, outcome, state) in &runs {
                let c = compare::compare(m, &exp);
                if compare::record_verdict(*outcome, Some(*state), Some(c.verdict))
                    == Some(compare::Verdict::Fail)
                {
                    fails += 1;
                }
                units.push((unit.clone(), KeyValues::from_metrics(m)));
            }
            let specs = vec![(
                compare::KeyMetric::LimitCurrent,
                exp.limit_current.worst_case,
            )];
            (
                fails,
                compare::population(&units, &specs, compare::DEFAULT_OUTLIER_Z),
            )
        })
    });
    g.finish();
}

criterion_group!(benches, bench_index);
criterion_main!(benches);
