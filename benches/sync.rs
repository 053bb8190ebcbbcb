//! Sync throughput into PostgreSQL: one SYNTHETIC 100,002-row record (see
//! tests/it/support/report.rs) uploaded in one transaction (run, instruments, readings by
//! COPY, metrics, verdicts, artifacts), against a private server started from the system's
//! PostgreSQL programs (see tests/it/support/pg.rs). Reading rows per second = 100,002 / time.
//! Skips with a notice when PostgreSQL is not installed.

#[path = "../tests/it/support/pg.rs"]
mod pg;
#[path = "../tests/it/support/report.rs"]
mod report_support;

use criterion::{criterion_group, criterion_main, Criterion};
use regulus::report::{self, ReportOptions};
use regulus::rng::Rng;
use regulus::station::{write_station_stamp, StationStamp};
use report_support as sup;
use std::time::{Duration, Instant};

fn bench_sync(c: &mut Criterion) {
    let Some(server) = pg::Pg::start_or_skip("the sync benchmark") else {
        return;
    };
    let tmp = tempfile::tempdir().expect("tempdir");
    let mut rng = Rng::new(3);
    let u = sup::Unit::draw(&mut rng);
    let rows = sup::run_rows(&u, &mut rng, sup::day(0), 45_000, 45_000, 1000.0, 0.1);
    let n = rows.len();
    let dir = sup::write_record(tmp.path(), "SN-SYNC", sup::day(0), &rows);
    report::write_report(&dir, Some(&sup::expectation()), &ReportOptions::default())
        .expect("report");
    write_station_stamp(
        &dir,
        &StationStamp {
            station: "ST-BENCH".into(),
            station_file: "station.toml".into(),
            operator: None,
        },
    )
    .expect("stamp");
    let rt = tokio::runtime::Builder::new_current_thread()
        .enable_all()
        .build()
        .expect("runtime");
    let mut client = rt
        .block_on(regulus::store::connect(&server.url))
        .expect("connect");
    let mut g = c.benchmark_group("sync into PostgreSQL");
    g.sample_size(10);
    g.throughput(criterion::Throughput::Elements(n as u64));
    g.bench_function(format!("upload one {n}-row record"), |b| {
        b.iter_custom(|iters| {
            let mut total = Duration::ZERO;
            for _ in 0..iters {
                rt.block_on(client.execute("DELETE FROM run", &[]))
                    .expect("clear");
                let t0 = Instant::now();
                let up = rt
                    .block_on(regulus::store::upload_record(&mut client, &dir, None))
                    .expect("upload");
                total += t0.elapsed();
                assert_eq!(up.readings as usize, n);
            }
            total
        })
    });
    g.finish();
}

criterion_group!(benches, bench_sync);
criterion_main!(benches);
