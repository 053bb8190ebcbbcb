//! Modbus costs: encoding and decoding register values, the RTU CRC, and one load setting
//! over Modbus TCP on loopback against the simulator's load with zero latency (mode and
//! current written, both read back: four exchanges), which is the tool's own overhead per
//! Modbus setting.

use criterion::{criterion_group, criterion_main, Criterion, Throughput};
use regulus::bench::{Bench, BenchConfig};
use regulus::control::BenchControl;
use regulus::design::Design;
use regulus::measure::LoadMode;
use regulus::protocol::modbus::{crc16, DataType, Encoding, WordOrder};
use regulus::sim::{SimBench, SimOptions, TransportMix};
use std::hint::black_box;
use std::path::Path;
use std::time::Duration;

fn values(c: &mut Criterion) {
    let f = Encoding::new(DataType::F32, WordOrder::LowFirst, 1.0);
    let u = Encoding::new(DataType::U32, WordOrder::HighFirst, 1e-4);
    let xs: Vec<f64> = (0..1000).map(|i| 0.5 + i as f64 * 1e-3).collect();
    let mut g = c.benchmark_group("modbus_values");
    g.throughput(Throughput::Elements(xs.len() as u64));
    g.bench_function("encode_decode_f32_and_u32", |b| {
        b.iter(|| {
            for x in &xs {
                let w = f.encode(black_box(*x)).unwrap();
                black_box(f.decode(&w).unwrap());
                let w = u.encode(black_box(*x)).unwrap();
                black_box(u.decode(&w).unwrap());
            }
        })
    });
    g.finish();
    let frame: Vec<u8> = (0..=255u8).collect();
    let mut g = c.benchmark_group("modbus_crc");
    g.throughput(Throughput::Bytes(frame.len() as u64));
    g.bench_function("crc16_256_bytes", |b| {
        b.iter(|| black_box(crc16(black_box(&frame))))
    });
    g.finish();
}

fn setting_over_tcp(c: &mut Criterion) {
    let design = Design::load(
        &Path::new(env!("CARGO_MANIFEST_DIR")).join("samples/teaching-lab-0-20v.toml"),
    )
    .unwrap();
    let sim = SimBench::start(
        &design,
        SimOptions::default()
            .transport(TransportMix::ModbusTcp)
            .latency(Duration::ZERO)
            .noise(0.0),
    )
    .unwrap();
    let cfg = BenchConfig::parse(&sim.bench_toml(), "sim.toml").unwrap();
    let rt = tokio::runtime::Builder::new_multi_thread()
        .worker_threads(2)
        .enable_all()
        .build()
        .unwrap();
    let mut bench = rt.block_on(Bench::open(&cfg)).unwrap();
    let mut i = 0u32;
    c.bench_function("modbus_tcp_load_setting_confirmed", |b| {
        b.iter(|| {
            i = i.wrapping_add(1);
            let amps = 0.1 + (i % 10) as f64 * 0.01;
            rt.block_on(bench.set_load(LoadMode::ConstantCurrent, amps))
                .unwrap();
        })
    });
    let _ = rt.block_on(bench.safe_state());
}

criterion_group!(benches, values, setting_over_tcp);
criterion_main!(benches);
