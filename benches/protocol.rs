//! Speed targets of the instrument link:
//! - reply parsing throughput: at least 1,000,000 lines per second per core;
//! - the tool's own overhead per step with zero-latency in-memory instruments: under 1 ms,
//!   measured with the full lockstep of the SCPI presets (confirm, error queue, readback) and
//!   with the confirmation alone (what a setting cost before readback and the error queue).

use criterion::{criterion_group, criterion_main, Criterion, Throughput};
use regulus::bench::{Bench, BenchConfig};
use regulus::control::BenchControl;
use regulus::measure::LoadMode;
use regulus::protocol::{ReplyParser, ReplySpec};
use regulus::transport::{BoxTransport, MemoryTransport};
use std::hint::black_box;

fn nr3_lines() -> Vec<String> {
    (0..1000)
        .map(|i| format!("{:+.5E}", 12.0 + i as f64 * 1e-4).replace('E', "E+0"))
        .collect()
}

fn parsing(c: &mut Criterion) {
    let lines = nr3_lines();
    let tagged: Vec<String> = (0..1000)
        .map(|i| format!("DCV +{:.4} V OK", 12.0 + i as f64 * 1e-4))
        .collect();
    let bare = ReplyParser::new(ReplySpec::default()).unwrap();
    let stream = ReplyParser::new(ReplySpec {
        pattern: Some(regulus::bench::config::TAGGED_STREAM_PATTERN.to_string()),
        overrange_status: vec!["OL".into()],
        ok_status: vec!["OK".into()],
        ..ReplySpec::default()
    })
    .unwrap();
    let mut g = c.benchmark_group("reply_parsing");
    g.throughput(Throughput::Elements(lines.len() as u64));
    g.bench_function("nr3_bare_number", |b| {
        b.iter(|| {
            for l in &lines {
                black_box(bare.parse(black_box(l)).ok());
            }
        })
    });
    g.bench_function("tagged_stream_pattern", |b| {
        b.iter(|| {
            for l in &tagged {
                black_box(stream.parse(black_box(l)).ok());
            }
        })
    });
    g.finish();
}

const BENCH: &str = r#"
[[instrument]]
name = "dmm"
roles = ["output_voltmeter"]
preset = "scpi_meter"
tcp = { host = "mem" }
[[instrument]]
name = "eload"
roles = ["load", "output_ammeter"]
preset = "scpi_load"
tcp = { host = "mem" }
[[instrument]]
name = "psu"
roles = ["input_source", "input_voltmeter", "input_ammeter"]
preset = "scpi_source"
tcp = { host = "mem" }
[[instrument]]
name = "thermo"
roles = ["thermometer"]
preset = "scpi_thermometer"
tcp = { host = "mem" }
"#;

/// The same bench with the confirmation alone: no error queue, no readbacks.
fn confirm_only() -> String {
    BENCH.replace(
        "preset = \"scpi_load\"\ntcp = { host = \"mem\" }",
        "preset = \"scpi_load\"\ntcp = { host = \"mem\" }\nerror_query = \"\"\n[instrument.readback]\nload_mode_cc = \"\"\nload_set_current = \"\"\nload_input_on = \"\"\nload_input_off = \"\"",
    )
}

/// An in-memory SCPI peer: identity, `*OPC?` -> 1, an empty error queue, readbacks of what it
/// was sent, a reading for any other query.
fn memory_instrument() -> BoxTransport {
    let mut held: std::collections::HashMap<String, String> = Default::default();
    Box::new(MemoryTransport::new(move |cmd| match cmd {
        "*IDN?" => Some("Regulus Simulated Bench,MEM-1,SN0000,1.0".to_string()),
        "*OPC?" => Some("1".to_string()),
        "SYST:ERR?" => Some("+0,\"No error\"".to_string()),
        c if c.ends_with('?') => Some(
            held.get(c.trim_end_matches('?'))
                .cloned()
                .unwrap_or_else(|| "+1.20034E+01".to_string()),
        ),
        c => {
            if let Some((h, a)) = c.split_once(' ') {
                held.insert(h.to_string(), a.to_string());
            }
            None
        }
    }))
}

fn step_overhead(c: &mut Criterion) {
    let rt = tokio::runtime::Builder::new_multi_thread()
        .worker_threads(2)
        .enable_all()
        .build()
        .unwrap();
    let mut g = c.benchmark_group("step_overhead");
    for (name, text) in [
        ("lockstep_confirm_errors_readback", BENCH.to_string()),
        ("confirm_only", confirm_only()),
    ] {
        let cfg = BenchConfig::parse(&text, "bench").unwrap();
        let links = (0..cfg.instruments.len())
            .map(|_| memory_instrument())
            .collect();
        let mut bench = rt.block_on(Bench::with_transports(&cfg, links)).unwrap();
        // One step: set the load, read all five measuring roles on four instruments.
        g.bench_function(format!("set_load_and_measure_4_instruments/{name}"), |b| {
            b.iter(|| {
                rt.block_on(async {
                    bench
                        .set_load(LoadMode::ConstantCurrent, black_box(0.25))
                        .await
                        .unwrap();
                    black_box(bench.measure().await.unwrap())
                })
            })
        });
    }
    g.finish();
}

criterion_group!(benches, parsing, step_overhead);
criterion_main!(benches);
