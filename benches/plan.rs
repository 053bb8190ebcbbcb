//! Plan benchmarks: knee-search point count and accuracy against a linear sweep of equal
//! resolution on the test kit's soft-knee supply curve (printed once), the time one knee
//! search takes, and the time to parse and expand the plan template.

use criterion::{criterion_group, criterion_main, Criterion};
use regulus::measure::LoadMode;
use regulus::plan::{DesignTargets, KneeConfig, KneeRequest, KneeSearch, Plan};
use regulus::testkit::SoftKnee;
use std::hint::black_box;

fn cfg() -> KneeConfig {
    KneeConfig {
        mode: LoadMode::ConstantCurrent,
        expected_a: 1.0,
        reference_a: 0.1,
        upper_a: 1.3,
        ceiling_a: 1.6,
        drop: 0.01,
        resolution: 0.0025,
        max_points: 20,
        vout_hint_v: 12.0,
    }
}

fn search(c: &SoftKnee) -> (u32, f64) {
    let mut ks = KneeSearch::new(cfg());
    while let KneeRequest::Measure { setpoint, .. } = ks.next_setpoint() {
        ks.observe(c.v(setpoint), setpoint);
    }
    let r = ks.result().expect("finished");
    (r.points, r.limit_current_a.unwrap_or(f64::NAN))
}

/// Linear sweep from reference to upper in steps of 0.5 % of the expected current; the knee
/// is the first point below the threshold, interpolated with the one before.
fn linear(c: &SoftKnee) -> (usize, f64) {
    let k = cfg();
    let step = 0.005 * k.expected_a;
    let v_ref = c.v(k.reference_a);
    let th = (1.0 - k.drop) * v_ref;
    let n = ((k.upper_a - k.reference_a) / step).round() as usize + 1;
    let mut prev = (k.reference_a, v_ref);
    let mut found = f64::NAN;
    for j in 0..n {
        let i = k.reference_a + step * j as f64;
        let v = c.v(i);
        if found.is_nan() && v < th {
            found = prev.0 + (prev.1 - th) * (i - prev.0) / (prev.1 - v);
        }
        prev = (i, v);
    }
    (n, found)
}

fn report_accuracy() {
    println!("knee search vs linear sweep (0.5 % steps), synthetic curve, CC mode:");
    println!("  true I_L   truth(1% drop)   search pts  search err   sweep pts  sweep err");
    for i_l in [0.8, 0.95, 1.0, 1.1, 1.25] {
        let c = SoftKnee::with_knee_at(i_l);
        let truth = c.current_at(0.99 * c.v(0.1));
        let (sp, se) = search(&c);
        let (lp, le) = linear(&c);
        println!(
            "  {i_l:7.3} A  {truth:9.5} A      {sp:4}       {:+8.4} %   {lp:6}     {:+8.4} %",
            100.0 * (se - truth) / truth,
            100.0 * (le - truth) / truth
        );
    }
}

fn benches(c: &mut Criterion) {
    report_accuracy();
    let curve = SoftKnee::with_knee_at(1.0);
    c.bench_function("knee_search_state_machine", |b| {
        b.iter(|| search(black_box(&curve)))
    });
    let text = std::fs::read_to_string("config/plan-template.toml").expect("template exists");
    let t = DesignTargets {
        vout_v: 12.0,
        limit_current_a: 3.46,
        short_circuit_current_a: 2.05,
        max_load_current_a: 3.0,
        input_voltage_v: Some(24.1),
    };
    c.bench_function("plan_parse_and_expand_template", |b| {
        b.iter(|| Plan::parse(black_box(&text), "plan-template.toml", &t).expect("valid"))
    });
}

criterion_group!(plan_benches, benches);
criterion_main!(plan_benches);
