//! Design model speed: one corner evaluation (target well under a microsecond) and the full
//! expectation serialised to JSON, as `regulus design --json` computes it: 100,000 Monte Carlo
//! samples over the operating envelope and 100,000 as built, the clamp and thermal relations
//! solved together at every corner, the short-dwell network, SOA and input stage (target under
//! 0.5 s).

use criterion::{criterion_group, criterion_main, Criterion};
use regulus::design::{evaluate, expect_with, Design, Params};
use std::hint::black_box;
use std::path::Path;

fn load(name: &str) -> Design {
    let path = Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("samples")
        .join(name);
    Design::load(&path).expect("sample design loads")
}

fn bench(c: &mut Criterion) {
    for name in ["teaching-lab-0-20v.toml", "fixed-12v-3a-foldback.toml"] {
        let d = load(name);
        let p = Params::nominal(&d);
        c.bench_function(&format!("evaluate one corner ({name})"), |b| {
            b.iter(|| evaluate(black_box(&d), black_box(&p)))
        });
    }
    let mut g = c.benchmark_group("expectation");
    g.sample_size(10);
    for name in ["teaching-lab-0-20v.toml", "fixed-12v-3a-foldback.toml"] {
        let d = load(name);
        g.bench_function(format!("100k Monte Carlo + JSON ({name})"), |b| {
            b.iter(|| {
                let e = expect_with(black_box(&d), 100_000, 1);
                serde_json::to_vec(&e).expect("serialises")
            })
        });
    }
    g.finish();
}

criterion_group!(benches, bench);
criterion_main!(benches);
