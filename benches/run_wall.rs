//! Wall time of a whole plan on the simulated bench (target: within 15 % of the sum of its
//! settle times and instrument latencies). A ten-point load sweep runs through the runner on an
//! in-process simulated bench whose instruments all answer after 5 ms, over real
//! pseudo-terminals and loopback TCP. Before criterion's own timing, the bench prints the
//! budget computed from the plan and the bench, the measured mean wall time, and the overhead.
//!
//! Budget per point: settle + samples x (slowest meter's reply latency) + load-set latency.
//! The meters are read concurrently (the query voltmeter and the thermometer answer one query
//! each per sample; the streaming ammeter's lines are already buffered), so a sample costs one
//! reply latency. Setting the load is two commands (mode, level) with no reply of their own,
//! followed by the lockstep queries whose replies the bench waits for: the confirmation
//! (`*OPC?`), the error queue (`SYST:ERR?`) and the readbacks of mode and level (`FUNC?`,
//! `CURR?`), four reply latencies per point (the load input is switched on once, at the
//! first point: its confirmation, error queue and readback are three more). A streaming meter's latency is its line period: after a change only lines sent
//! after it count, so a point waits for the next line (up to one period, 50 ms here) when the
//! settle time is shorter. Budget per point: confirm latency + the longer of (settle + samples x
//! reply latency) and the stream period. It is also printed with every command counted at a
//! full latency, as a bound.
//!
//! A second measurement reads one step on a bench of three meters (query voltmeter, streaming
//! ammeter, query thermometer) that each answer after 50 ms (target: at most 60 ms, since the
//! meters are read concurrently).

use criterion::{criterion_group, criterion_main, Criterion};
use regulus::bench::{Bench, BenchConfig};
use regulus::design::{self, Design};
use regulus::plan::{Action, DesignTargets, Plan};
use regulus::record::{DesignRef, Snapshots};
use regulus::runner::{self, CancelToken, RunSetup, Silent};
use regulus::sim::instruments::InstrumentKind;
use regulus::sim::serve::STREAM_PERIOD;
use regulus::sim::{SimBench, SimOptions};
use std::path::Path;
use std::time::{Duration, Instant};

const LATENCY: Duration = Duration::from_millis(5);

/// Replies the bench waits for when it sets the load (confirm, error queue, two readbacks).
const LOCKSTEP_QUERIES: f64 = 4.0;
/// Replies the bench waits for when it switches the load input on or off (confirm, error
/// queue, readback).
const INPUT_ON_QUERIES: f64 = 3.0;
/// Times the load input is switched off: before the plan, after the step, in the safe state.
const INPUT_OFFS: f64 = 3.0;

const PLAN: &str = r#"
name = "wall"
settle = "20 ms"
samples = 2

[[step]]
kind = "load_sweep"
from = "0 A"
to = "max_load"
points = 10
"#;

/// Sum of settle times and reply latencies the plan must spend (seconds): (without the load's
/// setting commands, with them counted at one reply latency each).
fn budget(plan: &Plan) -> (f64, f64) {
    let l = LATENCY.as_secs_f64();
    let (mut lean, mut bound) = (0.0, 0.0);
    for step in &plan.steps {
        if let Action::Sweep { setpoints, .. } = &step.action {
            // The load setting's confirmation, then settle and samples or, when longer, the
            // wait for the streaming meter's next line.
            let reads = step.settle.as_secs_f64() + step.samples as f64 * l;
            let per_point = LOCKSTEP_QUERIES * l + reads.max(STREAM_PERIOD.as_secs_f64());
            lean += setpoints.len() as f64 * per_point + INPUT_ON_QUERIES * l;
            bound += setpoints.len() as f64 * (per_point + 2.0 * l) + (INPUT_ON_QUERIES + 1.0) * l;
        }
    }
    // Switching the input off before the plan, after the step and in the safe state (its
    // confirmation, error queue and readback each time), and the safe-state line itself.
    lean += INPUT_OFFS * INPUT_ON_QUERIES * l;
    bound += INPUT_OFFS * (INPUT_ON_QUERIES + 1.0) * l + l;
    (lean, bound)
}

fn bench(c: &mut Criterion) {
    let path = Path::new(env!("CARGO_MANIFEST_DIR")).join("samples/teaching-lab-0-20v.toml");
    let d = Design::load(&path).expect("sample design loads");
    let targets = DesignTargets::from_design(&d, &design::expect(&d));
    let plan = Plan::parse(PLAN, "wall.toml", &targets).expect("plan parses");
    let opts = SimOptions::default()
        .seed(7)
        .latency(LATENCY)
        .without(InstrumentKind::Source);
    let sim = SimBench::start(&d, opts).expect("simulated bench starts");
    let dir = tempfile::tempdir().expect("temp dir");
    let bench_path = dir.path().join("bench.toml");
    std::fs::write(&bench_path, sim.bench_toml()).expect("bench file written");
    let cfg = BenchConfig::load(&bench_path).expect("bench file loads");
    let records = dir.path().join("records");
    let rt = tokio::runtime::Builder::new_multi_thread()
        .worker_threads(2)
        .enable_all()
        .build()
        .expect("runtime");
    let mut bench = rt.block_on(Bench::open(&cfg)).expect("bench opens");
    let design_ref = DesignRef {
        path: path.display().to_string(),
        sha256: String::new(),
        name: d.design.name.clone(),
    };
    let mut run_once = || {
        let setup = RunSetup {
            records: &records,
            unit: "WALL-0001".to_string(),
            operator: None,
            note: None,
            design: design_ref.clone(),
            snapshots: Snapshots {
                design: b"",
                bench: b"",
                plan: PLAN.as_bytes(),
            },
        };
        let report = rt
            .block_on(runner::run(
                &mut bench,
                &plan,
                setup,
                &mut Silent,
                &CancelToken::new(),
            ))
            .expect("run starts");
        assert_eq!(report.rows, 10, "{:?}", report.reason);
    };

    let (lean, bound) = budget(&plan);
    let runs = 5;
    let t0 = Instant::now();
    for _ in 0..runs {
        run_once();
    }
    let wall = t0.elapsed().as_secs_f64() / runs as f64;
    println!(
        "plan wall time {:.1} ms; settle + latency budget {:.1} ms (overhead {:+.1} %), \
         {:.1} ms with every command at one latency (overhead {:+.1} %)",
        wall * 1e3,
        lean * 1e3,
        100.0 * (wall / lean - 1.0),
        bound * 1e3,
        100.0 * (wall / bound - 1.0)
    );

    let mut g = c.benchmark_group("run_wall");
    g.sample_size(10);
    g.bench_function(
        "10-point load sweep, 20 ms settle, 2 samples, 5 ms latency",
        |b| b.iter(&mut run_once),
    );
    g.finish();
}

/// One step's reads on three meters that each answer after 50 ms.
fn step_reads(c: &mut Criterion) {
    use regulus::control::BenchControl;
    let path = Path::new(env!("CARGO_MANIFEST_DIR")).join("samples/teaching-lab-0-20v.toml");
    let d = Design::load(&path).expect("sample design loads");
    let opts = SimOptions::default()
        .seed(8)
        .latency(Duration::from_millis(50))
        .without(InstrumentKind::Source);
    let sim = SimBench::start(&d, opts).expect("simulated bench starts");
    let dir = tempfile::tempdir().expect("temp dir");
    let bench_path = dir.path().join("bench.toml");
    std::fs::write(&bench_path, sim.bench_toml()).expect("bench file written");
    let cfg = BenchConfig::load(&bench_path).expect("bench file loads");
    let rt = tokio::runtime::Builder::new_multi_thread()
        .worker_threads(2)
        .enable_all()
        .build()
        .expect("runtime");
    let mut bench = rt.block_on(Bench::open(&cfg)).expect("bench opens");
    let meters = bench
        .identities()
        .iter()
        .filter(|i| i.roles.iter().any(|r| r.quantity().is_some()))
        .count();
    let mut g = c.benchmark_group("step_reads");
    g.sample_size(10);
    g.bench_function(format!("{meters} meters at 50 ms latency"), |b| {
        b.iter(|| rt.block_on(bench.measure()).expect("reads"))
    });
    g.finish();
}

criterion_group!(benches, bench, step_reads);
criterion_main!(benches);
