//! The bench file written by the simulated bench opens with `bench::Bench` and reads plausible
//! values over real pseudo-terminals and loopback TCP; the load drives the simulated unit.

use crate::support::lock::serial;
use crate::support::sim;
use regulus::bench::{Bench, BenchConfig};
use regulus::control::BenchControl;
use regulus::design::Design;
use regulus::measure::{LoadMode, Quantity, Role};
use regulus::sim::{Fault, SimBench, SimOptions, TransportMix};
use std::time::Duration;

fn lab() -> Design {
    let path = format!(
        "{}/samples/teaching-lab-0-20v.toml",
        env!("CARGO_MANIFEST_DIR")
    );
    Design::load(std::path::Path::new(&path)).unwrap()
}

fn open(sim: &SimBench) -> (tempfile::TempDir, BenchConfig) {
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("bench.toml");
    std::fs::write(&path, sim.bench_toml()).unwrap();
    let cfg = BenchConfig::load(&path).unwrap_or_else(|e| panic!("{e}\n{}", sim.bench_toml()));
    (dir, cfg)
}

fn runtime() -> tokio::runtime::Runtime {
    tokio::runtime::Builder::new_multi_thread()
        .worker_threads(2)
        .enable_all()
        .build()
        .unwrap()
}

#[test]
fn generated_bench_file_opens_and_reads_the_simulated_unit() {
    let _g = serial();
    for mix in [
        TransportMix::Mixed,
        TransportMix::AllPty,
        TransportMix::AllTcp,
    ] {
        let sim = sim::start(&lab(), SimOptions::default().seed(21).transport(mix)).unwrap();
        let t = sim.truth().clone();
        let (_dir, cfg) = open(&sim);
        runtime().block_on(async {
            let mut bench = Bench::open(&cfg)
                .await
                .unwrap_or_else(|e| panic!("{mix:?}: {e}"));
            for role in [
                Role::OutputVoltmeter,
                Role::OutputAmmeter,
                Role::Load,
                Role::Thermometer,
            ] {
                assert!(bench.has_role(role), "{role}");
            }
            for id in bench.identities() {
                if id.name != "ammeter" {
                    let idn = id.identity.unwrap_or_default();
                    assert!(
                        idn.starts_with("Regulus Simulated Bench,"),
                        "{}: {idn}",
                        id.name
                    );
                }
            }
            let m = bench.measure().await.unwrap();
            let v = m.get(Quantity::OutputVoltage).unwrap();
            assert!((v - t.no_load_v).abs() < 2e-3, "{v} vs {}", t.no_load_v);
            assert!(m.get(Quantity::OutputCurrent).unwrap().abs() < 2e-3);
            let c = m.get(Quantity::Temperature).unwrap();
            assert!((c - t.ambient_c).abs() < 1.0, "{c}");
            let vin = m.get(Quantity::InputVoltage).unwrap();
            assert!(vin > v + 2.0, "input {vin} must exceed output {v}");
            // A CC load of 0.6 A: the ammeter's stream and the meter follow.
            bench
                .set_load(LoadMode::ConstantCurrent, 0.6)
                .await
                .unwrap();
            bench.set_load_input(true).await.unwrap();
            // Let the streaming meter's averaging window (250 ms) fill with fresh lines.
            tokio::time::sleep(Duration::from_millis(600)).await;
            let m = bench.measure().await.unwrap();
            let i = m.get(Quantity::OutputCurrent).unwrap();
            assert!((i - 0.6).abs() < 2e-3, "{mix:?}: {i}");
            let v2 = m.get(Quantity::OutputVoltage).unwrap();
            // Regulation: V = V_set - R_out I - dV_sat exp((I - I_L) R_s / (n kT/q)) (R_out =
            // 10 milliohm in the default model; the second term is the clamp's Shockley tail,
            // n = 3 diodes in series set the knee's width, dV_sat = 3 % of the output). At
            // 0.6 A the tail is a few millivolts; the pass device's warming in the 0.6 s moves
            // it by well under the 1 mV allowed.
            let model = regulus::sim::UnitModel::default();
            let n = t.params.diodes as f64;
            let vt = regulus::sim::unit::thermal_voltage(t.ambient_c);
            let tail = model.knee_sat_fraction
                * t.regulated_v
                * ((0.6 - t.limit_line_current) * t.params.r_sense / (n * vt)).exp();
            assert!(
                (v - v2 - 0.6 * t.output_resistance - tail).abs() < 1e-3,
                "{v} -> {v2} (tail {tail})"
            );
            let errs = bench.safe_state().await;
            assert!(errs.is_empty(), "{errs:?}");
        });
        sim.shutdown();
    }
}

#[test]
fn generated_bench_file_reaches_the_limit_line_in_cv_mode() {
    let _g = serial();
    let sim = sim::start(&lab(), SimOptions::default().seed(22).noise(0.0)).unwrap();
    let t = sim.truth().clone();
    let (_dir, cfg) = open(&sim);
    runtime().block_on(async {
        let mut bench = Bench::open(&cfg).await.unwrap();
        bench
            .set_load(LoadMode::ConstantVoltage, t.no_load_v * 0.5)
            .await
            .unwrap();
        bench.set_load_input(true).await.unwrap();
        tokio::time::sleep(Duration::from_millis(400)).await;
        let before = chrono::Utc::now();
        let m = bench.measure().await.unwrap();
        let after = chrono::Utc::now();
        // On the limit line: I = (n V_F - m V_BE(T_j)) / R_s (common practice), with the pass
        // junctions' V_BE falling by the design's -2 mV/degC per degree (the junction law) and
        // the diodes at ambient (the design's clamp_mount). The pass junction's stage of the
        // thermal network has a 0.5 s time constant, so within the 0.4 s before the reading
        // it has covered more than half of its P theta_jc rise (1 - e^(-0.8), first-order
        // step response): the limit is well above the cold one. The current read (the
        // streaming ammeter averages its last 250 ms) must lie between the limit at the
        // coolest and at the hottest junction of that window.
        let p = &t.params;
        let d = lab();
        let tc = d.environment.junction_tempco_mv_per_c * 1e-3;
        let m_junctions = d.pass.stage.junctions() as f64;
        let limit = |tj: f64| {
            (p.diodes as f64 * p.diode_vf - m_junctions * (p.pass_vbe + tc * (tj - 25.0)))
                / p.r_sense
        };
        let window = sim
            .thermal_history()
            .into_iter()
            .filter(|(at, _)| *at >= before - chrono::TimeDelta::milliseconds(300) && *at <= after)
            .map(|(_, th)| th.pass_junction_c)
            .collect::<Vec<f64>>();
        assert!(!window.is_empty());
        let cool = window.iter().copied().fold(f64::INFINITY, f64::min);
        let hot = window.iter().copied().fold(f64::NEG_INFINITY, f64::max);
        assert!(
            hot > t.ambient_c + 3.0,
            "the junction has warmed: {hot} degC"
        );
        let i = m.get(Quantity::OutputCurrent).unwrap();
        let (lo, hi) = (limit(cool), limit(hot));
        assert!(
            i > lo * 0.995 && i < hi * 1.005,
            "{i} A, limit {lo}..{hi} A for junctions {cool}..{hot} degC (cold {})",
            t.short_circuit_current
        );
        let _ = bench.safe_state().await;
    });
}

#[test]
fn slow_instrument_reaches_the_bench_as_a_timeout_naming_it() {
    let _g = serial();
    let sim = sim::start(
        &lab(),
        SimOptions::default()
            .seed(23)
            .fault(Fault::parse("thermo:slow=3000").unwrap()),
    )
    .unwrap();
    let (_dir, mut cfg) = open(&sim);
    // The thermometer answers 3 s late: with a 500 ms deadline it must be reported.
    for i in &mut cfg.instruments {
        if i.name == "thermo" {
            i.reply_timeout = Duration::from_millis(500);
        }
    }
    runtime().block_on(async {
        let err = match Bench::open(&cfg).await {
            Ok(_) => panic!("a 3 s thermometer should not answer within 500 ms"),
            Err(e) => e.to_string(),
        };
        assert!(err.contains("thermo"), "{err}");
    });
    sim.shutdown();
}

#[test]
fn closing_port_reaches_the_bench_as_an_error_naming_it() {
    let _g = serial();
    let sim = sim::start(
        &lab(),
        SimOptions::default()
            .seed(24)
            .fault(Fault::parse("dmm:close-after=4").unwrap()),
    )
    .unwrap();
    let (_dir, cfg) = open(&sim);
    runtime().block_on(async {
        let mut bench = Bench::open(&cfg).await.unwrap();
        let mut first_err = None;
        for _ in 0..6 {
            match bench.measure().await {
                Ok(m) => assert!(m.get(Quantity::OutputVoltage).unwrap() > 1.0),
                Err(e) => {
                    first_err = Some(e.to_string());
                    break;
                }
            }
        }
        let err = first_err.expect("the meter's port closed: measuring must fail");
        assert!(err.contains("dmm"), "{err}");
        let _ = bench.safe_state().await;
    });
    assert!(sim.is_closed(regulus::sim::instruments::InstrumentKind::QueryMeter));
}
