//! Simulated bench speed: solving one operating point per load mode (target under 200 us, so a
//! reply costs far less than the instruments' few-millisecond latency), advancing the thermal
//! state by one streaming period (target under 1 ms), and answering one protocol line (target
//! under 10 us).

use criterion::{criterion_group, criterion_main, Criterion};
use regulus::design::Design;
use regulus::measure::LoadMode;
use regulus::sim::instruments::{respond, InstrumentKind, InstrumentState, Noise, Snapshot};
use regulus::sim::{Controls, SimUnit, UnitModel};
use std::hint::black_box;
use std::path::Path;

fn load(name: &str) -> Design {
    let path = Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("samples")
        .join(name);
    Design::load(&path).expect("sample design loads")
}

fn controls(mode: LoadMode, value: f64) -> Controls {
    let mut c = Controls::default();
    c.load.input_on = true;
    c.load.mode = mode;
    match mode {
        LoadMode::ConstantCurrent => c.load.current = value,
        LoadMode::ConstantVoltage => c.load.voltage = value,
        LoadMode::ConstantResistance => c.load.resistance = value,
    }
    c
}

fn bench(c: &mut Criterion) {
    for name in ["teaching-lab-0-20v.toml", "fixed-12v-3a-foldback.toml"] {
        let d = load(name);
        let u = SimUnit::build(&d, 1, &[], UnitModel::default()).expect("unit");
        let t = u.truth();
        for (label, ctl) in [
            (
                "cc half limit",
                controls(LoadMode::ConstantCurrent, 0.5 * t.knee_current),
            ),
            (
                "cv half output",
                controls(LoadMode::ConstantVoltage, 0.5 * t.no_load_v),
            ),
            (
                "cr near knee",
                controls(LoadMode::ConstantResistance, t.no_load_v / t.knee_current),
            ),
        ] {
            c.bench_function(&format!("operating point, {label} ({name})"), |b| {
                b.iter(|| u.operating_point(black_box(&ctl)))
            });
        }
        let ctl = controls(LoadMode::ConstantResistance, 1e-3);
        c.bench_function(&format!("advance 50 ms into a short ({name})"), |b| {
            let mut u = u.clone();
            b.iter(|| u.advance(black_box(&ctl), 0.05))
        });
    }
    let snap = Snapshot {
        vout: 12.0,
        iout: 1.0,
        vin: 20.0,
        iin: 1.01,
        case_c: 40.0,
    };
    let mut st = InstrumentState::new(InstrumentKind::QueryMeter, "SIM1-1");
    let mut noise = Noise::new(1, 1.0);
    let mut ctl = Controls::default();
    c.bench_function("answer MEAS:VOLT:DC?", |b| {
        b.iter(|| {
            respond(
                &mut st,
                black_box("MEAS:VOLT:DC?"),
                &mut ctl,
                &snap,
                &mut noise,
            )
        })
    });
}

criterion_group!(benches, bench);
criterion_main!(benches);
