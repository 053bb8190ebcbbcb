//! Design model checked against published formulas, worked examples and facts of the trade.
//! Each external check names its source beside it.

use regulus::design::eseries::{self, Series};
use regulus::design::model::{self, evaluate, pass_dissipation, Params};
use regulus::design::{expect_with, Design, Verdict};
use regulus::rng::Rng;

/// A minimal single-transistor design with a transistor limiter; tests tweak it.
fn base_design(clamp: &str, sense_ohms: f64, vbe: f64, extra_limit: &str) -> Design {
    let text = format!(
        r#"
[design]
name = "test"
[input]
kind = "dc"
volts = 25.0
line_tolerance_pct = 0
[reference]
volts = 5.0
tolerance_pct = 0
[feedback]
top = {{ ohms = 20000, tolerance_pct = 0 }}
bottom = {{ ohms = 10000, tolerance_pct = 0 }}
[pass]
stage = "single"
vbe_v = 0.65
vbe_spread_v = 0
power_rating_w = 100
theta_jc = 1.5
theta_cs = 0.5
theta_sa = 1.0
[limit]
clamp = "{clamp}"
sense = {{ ohms = {sense_ohms}, tolerance_pct = 0 }}
vbe_v = {vbe}
vbe_spread_v = 0
diode_vf_spread_v = 0
{extra_limit}
[load]
max_current_a = 0.3
[environment]
ambient_c = 25
ambient_min_c = 25
ambient_max_c = 25
"#
    );
    Design::parse(&text, "test.toml").expect("test design parses")
}

fn close(a: f64, b: f64, rel: f64) -> bool {
    (a - b).abs() <= rel * b.abs().max(1e-12)
}

#[test]
fn transistor_limiter_worked_examples() {
    // Transistor current limiter I_lim = V_BE / R_sense (standard textbook formula for
    // series-pass regulator current limiting; the worked examples are common practice):
    // 0.7 V across 1.4 ohm limits at 0.5 A.
    let d = base_design("transistor", 1.4, 0.7, "");
    let pt = evaluate(&d, &Params::nominal(&d));
    assert!(close(pt.limit_current, 0.5, 1e-9), "{}", pt.limit_current);
    assert!(close(pt.short_circuit_current, 0.5, 1e-9));
    // 0.65 V across 0.33 ohm: about 2 A (1.97 A).
    let d = base_design("transistor", 0.33, 0.65, "");
    let pt = evaluate(&d, &Params::nominal(&d));
    assert!(close(pt.limit_current, 0.65 / 0.33, 1e-9));
    assert!((pt.limit_current - 2.0).abs() < 0.05);
}

#[test]
fn diode_string_clamp_formula() {
    // Diode string across the pass junctions and the sense resistor:
    // V_sense = n V_F - m V_BE (m = 1 single pass transistor), by Kirchhoff's voltage law.
    // Three 0.7 V diodes over one 0.65 V junction leave 1.45 V; over 2.2 ohm: 0.659 A.
    let d = base_design("diode_string", 2.2, 0.65, "diodes = 3\ndiode_vf_v = 0.7");
    let pt = evaluate(&d, &Params::nominal(&d));
    assert!(close(pt.sense_v, 3.0 * 0.7 - 0.65, 1e-12));
    assert!(close(pt.limit_current, 1.45 / 2.2, 1e-12));
}

#[test]
fn diode_string_darlington_subtracts_two_junctions() {
    // m = 2 for a Darlington pass stage (two base-emitter junctions in the drive path).
    let text = std::fs::read_to_string("samples/teaching-lab-0-20v.toml").unwrap();
    let d = Design::parse(&text, "teaching").unwrap();
    let pt = evaluate(&d, &Params::nominal(&d));
    assert!(close(pt.sense_v, 3.0 * 0.65 - 2.0 * 0.65, 1e-12));
    assert!(close(pt.limit_current, 0.65 / 0.39, 1e-12));
}

#[test]
fn foldback_hand_computed_case() {
    // Foldback limiter with divider ratio k = R_b / (R_t + R_b) (textbook foldback analysis):
    // I_sc = V_BE / (k R_s), I_knee = (V_BE + (1 - k) V_out) / (k R_s).
    // By hand: R_s = 0.33, R_t = 390, R_b = 10 k, V_BE = 0.65, V_out = 15 V (5 V x 3):
    // k = 10000 / 10390 = 0.962464; k R_s = 0.317613;
    // I_sc = 0.65 / 0.317613 = 2.0465 A; I_knee = (0.65 + 0.037536 x 15) / 0.317613 = 3.8193 A.
    let d = base_design(
        "foldback",
        0.33,
        0.65,
        "divider_top = { ohms = 390, tolerance_pct = 0 }\ndivider_bottom = { ohms = 10000, tolerance_pct = 0 }",
    );
    let pt = evaluate(&d, &Params::nominal(&d));
    assert!(close(pt.vout_set, 15.0, 1e-12));
    assert!(
        close(pt.short_circuit_current, 2.0465, 1e-4),
        "{}",
        pt.short_circuit_current
    );
    assert!(
        close(pt.limit_current, 3.8193, 1e-4),
        "{}",
        pt.limit_current
    );
}

#[test]
fn output_voltage_of_non_inverting_amplifier() {
    // Non-inverting amplifier gain 1 + R_f / R_g (op-amp textbook formula): 5 V x (1 + 20k/10k).
    let d = base_design("transistor", 1.0, 0.65, "");
    let pt = evaluate(&d, &Params::nominal(&d));
    assert!(close(pt.vout_set, 15.0, 1e-12));
    // Teaching-lab sample: wiper over a 5.1 V reference, gain 4: 0 V to 20.4 V.
    let text = std::fs::read_to_string("samples/teaching-lab-0-20v.toml").unwrap();
    let d = Design::parse(&text, "teaching").unwrap();
    let pt = evaluate(&d, &Params::nominal(&d));
    assert!(pt.vout_min.abs() < 1e-12);
    assert!(close(pt.vout_max, 20.4, 1e-12));
}

#[test]
fn full_wave_ripple_textbook_example() {
    // Capacitor-input full-wave rectifier ripple dV = I / (2 f C) (textbook approximation):
    // 1 A from 4700 uF at 50 Hz ripples 1 / (2 x 50 x 0.0047) = 2.128 V peak to peak.
    let text = std::fs::read_to_string("samples/teaching-lab-0-20v.toml")
        .unwrap()
        .replace("max_current_a = 1.2", "max_current_a = 1.0");
    let d = Design::parse(&text, "t").unwrap();
    let pt = evaluate(&d, &Params::nominal(&d));
    assert!(close(pt.ripple_v, 2.1277, 1e-4), "{}", pt.ripple_v);
    // Peak of a full-wave rectified 26 V RMS secondary less two diode drops: 26 sqrt(2) - 1.4.
    assert!(close(pt.vin_no_load, 26.0 * 2f64.sqrt() - 1.4, 1e-12));
}

#[test]
fn pass_transistor_dissipation_textbook() {
    // Series-pass dissipation P = V_CE x I (textbook): into a short the pass device drops the
    // whole input less the sense drop. 25 V in, 0.5 A limit through 1.4 ohm:
    // P = (25 - 0.5 x 1.4) x 0.5 = 12.15 W (about V_in x I_sc = 12.5 W).
    let d = base_design("transistor", 1.4, 0.7, "");
    let p = Params::nominal(&d);
    let pt = evaluate(&d, &p);
    let (w, _, i) = pass_dissipation(&d, &p, &pt);
    assert!(close(i, 0.5, 1e-9));
    assert!(close(w, 12.15, 1e-9), "{w}");
}

#[test]
fn junction_temperature_from_thermal_resistances() {
    // T_j = T_a + P (theta_jc + theta_cs + theta_sa) (thermal Ohm's law, any power handbook).
    // 12.15 W through 1.5 + 0.5 + 1.0 degC/W at 25 degC ambient: 25 + 36.45 = 61.45 degC.
    let d = base_design("transistor", 1.4, 0.7, "");
    let e = expect_with(&d, 100, 1);
    let tj = e.junction_temp_c.expect("heatsink given");
    assert!(close(tj, 61.45, 1e-9), "{tj}");
    // Largest heatsink for T_j max less margin (150 degC T_j max and a 25 degC margin: common
    // practice): (125 - 25) / 12.15 - 2.0.
    assert!(close(e.thermal.max_theta_sa, 100.0 / 12.15 - 2.0, 1e-9));
}

#[test]
fn junction_drop_falls_about_two_millivolts_per_degree() {
    // Silicon junction drop 0.6-0.7 V, falling about 2 mV/degC (common practice; textbook value).
    // The template states every drop and the tempco: remove them to see the defaults.
    let text: String = std::fs::read_to_string("config/design-template.toml")
        .unwrap()
        .lines()
        .filter(|l| !l.starts_with("vbe_v") && !l.starts_with("junction_tempco_mv_per_c"))
        .map(|l| format!("{l}\n"))
        .collect();
    let d = Design::parse(&text, "template-without-drops").unwrap();
    assert!((0.6..=0.7).contains(&d.pass.vbe_v));
    assert!((0.6..=0.7).contains(&d.limit.vbe_v));
    assert_eq!(d.environment.junction_tempco_mv_per_c, -2.0);
    let v = model::junction_at(0.65, -2.0, 75.0);
    assert!(close(v, 0.55, 1e-12));
}

#[test]
fn defaults_follow_common_practice() {
    // 2 V minimum across the pass device and resistors run at no more than half their rating
    // (both common practice).
    let d = base_design("transistor", 1.0, 0.65, "");
    assert_eq!(d.pass.vce_min_v, 2.0);
    assert_eq!(d.rules.resistor_derating, 0.5);
    assert_eq!(d.rules.monte_carlo_samples, 10_000);
}

#[test]
fn headroom_check_uses_lowest_input() {
    // Headroom = lowest input - highest output - sense drop; needs >= V_CE min (2 V, common
    // practice). 25 V in, 15 V out, 0.3 A through 1 ohm: 25 - 15 - 0.3 = 9.7 V.
    let d = base_design("transistor", 1.0, 0.65, "");
    let e = expect_with(&d, 100, 1);
    assert!(close(e.headroom_volts, 9.7, 1e-9), "{}", e.headroom_volts);
    let h = e.checks.iter().find(|c| c.name == "headroom").unwrap();
    assert_eq!(h.verdict, Verdict::Ok);
    // At 17.8 V in, 2.5 V remain (ok: V_CE min plus the 0.5 V margin); at 17.4 V, 2.1 V
    // (marginal: above V_CE min, inside the margin); at 17.0 V, 1.7 V (fail).
    for (vin, want) in [
        (17.8, Verdict::Ok),
        (17.4, Verdict::Marginal),
        (17.0, Verdict::Fail),
    ] {
        let mut d2 = d.clone();
        d2.input.volts = Some(vin);
        let e = expect_with(&d2, 10, 1);
        let h = e.checks.iter().find(|c| c.name == "headroom").unwrap();
        assert_eq!(h.verdict, want, "vin {vin}: headroom {}", h.value);
    }
}

#[test]
fn worst_case_contains_nominal_and_monte_carlo() {
    for path in [
        "samples/teaching-lab-0-20v.toml",
        "samples/fixed-12v-3a-foldback.toml",
    ] {
        let d = Design::load(std::path::Path::new(path)).unwrap();
        let e = expect_with(&d, 20_000, 3);
        for b in [
            &e.limit_current,
            &e.short_circuit_current,
            &e.vout.max_band,
            &e.sense_voltage,
        ] {
            assert!(b.worst_case.contains(b.nominal), "{path}");
            assert!(
                b.worst_case.min <= b.monte_carlo.p_low && b.monte_carlo.p_high <= b.worst_case.max
            );
            assert!(
                b.monte_carlo.p_low <= b.monte_carlo.mean
                    && b.monte_carlo.mean <= b.monte_carlo.p_high
            );
        }
    }
}

#[test]
fn monte_carlo_is_reproducible_from_seed() {
    let d = Design::load(std::path::Path::new("samples/fixed-12v-3a-foldback.toml")).unwrap();
    let a = expect_with(&d, 5000, 42);
    let b = expect_with(&d, 5000, 42);
    let c = expect_with(&d, 5000, 43);
    assert_eq!(a.limit_current, b.limit_current);
    assert_ne!(
        a.limit_current.monte_carlo.mean,
        c.limit_current.monte_carlo.mean
    );
}

#[test]
fn monte_carlo_sigma_matches_analytic_for_one_tolerance() {
    // With only the sense resistor varying (+-5 % read as +-3 sigma), I = V / R has relative
    // sigma close to 5 % / 3 = 1.667 % (first-order error propagation, any metrology text).
    let mut d = base_design("transistor", 1.0, 0.65, "");
    d.limit.sense.tolerance_pct = 5.0;
    let e = expect_with(&d, 200_000, 9);
    let rel = e.limit_current.monte_carlo.sigma / e.limit_current.nominal;
    assert!((rel - 0.05 / 3.0).abs() < 0.0005, "relative sigma {rel}");
}

#[test]
fn e_series_e6_e12_e24_complete() {
    // IEC 60063 published tables (from memory of the standard's table of E6, E12, E24).
    let e6 = [1.0, 1.5, 2.2, 3.3, 4.7, 6.8];
    let e12 = [1.0, 1.2, 1.5, 1.8, 2.2, 2.7, 3.3, 3.9, 4.7, 5.6, 6.8, 8.2];
    let e24 = [
        1.0, 1.1, 1.2, 1.3, 1.5, 1.6, 1.8, 2.0, 2.2, 2.4, 2.7, 3.0, 3.3, 3.6, 3.9, 4.3, 4.7, 5.1,
        5.6, 6.2, 6.8, 7.5, 8.2, 9.1,
    ];
    assert_eq!(Series::E6.values(), &e6);
    assert_eq!(Series::E12.values(), &e12);
    assert_eq!(Series::E24.values(), &e24);
    // E12 is every second E24 value and E6 every second E12 value (IEC 60063 structure),
    // checked on the library's own tables.
    let e24_2: Vec<f64> = Series::E24.values().iter().step_by(2).copied().collect();
    assert_eq!(e24_2, Series::E12.values());
    let e12_2: Vec<f64> = Series::E12.values().iter().step_by(2).copied().collect();
    assert_eq!(e12_2, Series::E6.values());
}

#[test]
fn e24_published_exceptions_differ_from_formula() {
    // IEC 60063: the E24 values 2.7, 3.0, 3.3, 3.6, 3.9, 4.3, 4.7 and 8.2 are not the rounded
    // geometric formula 10^(i/24); the table is the truth.
    let formula: Vec<f64> = (0..24)
        .map(|i| (10f64.powf(i as f64 / 24.0) * 10.0).round() / 10.0)
        .collect();
    let table = Series::E24.values();
    let differ: Vec<f64> = table
        .iter()
        .zip(&formula)
        .filter(|(t, f)| (*t - *f).abs() > 1e-9)
        .map(|(t, _)| *t)
        .collect();
    assert_eq!(differ, vec![2.7, 3.0, 3.3, 3.6, 3.9, 4.3, 4.7, 8.2]);
}

#[test]
fn e48_e96_e192_spot_checks() {
    // IEC 60063 three-digit series (values from memory of the published E96 / E192 tables).
    for v in [1.00, 1.02, 1.05, 1.47, 2.49, 3.01, 4.99, 6.04, 8.06, 9.76] {
        assert!(Series::E96.values().contains(&v), "E96 lacks {v}");
    }
    for v in [1.00, 1.05, 1.21, 2.15, 4.87, 7.50, 9.53] {
        assert!(Series::E48.values().contains(&v), "E48 lacks {v}");
    }
    // E192: 9.20 is the published exception (the formula gives 9.19).
    assert!(Series::E192.values().contains(&9.20));
    assert!(!Series::E192.values().contains(&9.19));
    assert_eq!(Series::E48.values().len(), 48);
    assert_eq!(Series::E96.values().len(), 96);
    assert_eq!(Series::E192.values().len(), 192);
    // E96 is every second E192 value apart from the 9.20 exception's neighbourhood.
    let e192 = Series::E192.values();
    for (i, v) in Series::E96.values().iter().enumerate() {
        assert_eq!(*v, e192[2 * i]);
    }
}

#[test]
fn rounding_to_preferred_values() {
    assert_eq!(eseries::nearest(0.5, Series::E24), Some(0.51));
    assert_eq!(eseries::nearest(0.37, Series::E12), Some(0.39));
    assert_eq!(eseries::next_up(1230.0, Series::E12), Some(1500.0));
    assert_eq!(eseries::next_down(1230.0, Series::E12), Some(1200.0));
    assert_eq!(eseries::next_up(0.47, Series::E12), Some(0.47));
    assert_eq!(eseries::nearest(9.6e3, Series::E24), Some(10e3));
    assert_eq!(eseries::neighbours(0.47, Series::E24), Some((0.43, 0.51)));
    assert_eq!(eseries::nearest(0.0, Series::E24), None);
    assert_eq!(eseries::nearest(-1.0, Series::E24), None);
    assert_eq!(eseries::nearest(f64::NAN, Series::E24), None);
    assert_eq!("e96".parse::<Series>(), Ok(Series::E96));
    assert!("E7".parse::<Series>().is_err());
}

#[test]
fn draws_stay_within_tolerance() {
    let d = Design::load(std::path::Path::new("samples/teaching-lab-0-20v.toml")).unwrap();
    let mut rng = Rng::new(5);
    for _ in 0..2000 {
        let p = Params::draw(&d, &mut rng);
        assert!((0.39 * 0.95..=0.39 * 1.05).contains(&p.r_sense));
        assert!((0.62..=0.68).contains(&p.diode_vf));
        assert!((15.0..=40.0).contains(&p.ambient_c));
    }
}

mod properties {
    use super::*;
    use proptest::prelude::*;

    proptest! {
        #![proptest_config(ProptestConfig::with_cases(64))]

        #[test]
        fn limit_falls_as_sense_resistance_rises(r1 in 0.05f64..10.0, factor in 1.001f64..5.0, clamp in 0usize..3) {
            let (name, extra) = [
                ("transistor", ""),
                ("diode_string", "diodes = 3\ndiode_vf_v = 0.7"),
                ("foldback", "divider_top = { ohms = 1000, tolerance_pct = 0 }\ndivider_bottom = { ohms = 10000, tolerance_pct = 0 }"),
            ][clamp];
            let d1 = base_design(name, r1, 0.65, extra);
            let d2 = base_design(name, r1 * factor, 0.65, extra);
            let i1 = evaluate(&d1, &Params::nominal(&d1));
            let i2 = evaluate(&d2, &Params::nominal(&d2));
            prop_assert!(i2.limit_current < i1.limit_current);
            prop_assert!(i2.short_circuit_current < i1.short_circuit_current);
        }

        #[test]
        fn worst_case_holds_nominal_and_nearly_all_samples(
            sense_tol in 0.0f64..20.0, vbe_spread in 0.0f64..0.1, ref_tol in 0.0f64..5.0, seed in 0u64..1000
        ) {
            let mut d = base_design("transistor", 0.5, 0.65, "");
            d.limit.sense.tolerance_pct = sense_tol;
            d.limit.vbe_spread_v = vbe_spread;
            d.reference.tolerance_pct = ref_tol;
            d.environment.ambient_min_c = 0.0;
            d.environment.ambient_max_c = 50.0;
            let mut samples = Vec::new();
            regulus::design::tolerance::for_each_sample(&d, 2000, seed, |p| samples.push(evaluate(&d, p)));
            let e = expect_with(&d, 10, seed);
            let wc = e.limit_current.worst_case;
            prop_assert!(wc.contains(e.limit_current.nominal));
            let inside = samples.iter().filter(|pt| wc.min - 1e-12 <= pt.limit_current && pt.limit_current <= wc.max + 1e-12).count();
            prop_assert!(inside as f64 >= 0.999 * samples.len() as f64);
            let vb = e.vout.setting_band.worst_case;
            let inside_v = samples.iter().filter(|pt| vb.min - 1e-12 <= pt.vout_set && pt.vout_set <= vb.max + 1e-12).count();
            prop_assert!(inside_v as f64 >= 0.999 * samples.len() as f64);
        }

        #[test]
        fn e_series_rounding_is_idempotent(x in 1e-3f64..1e7, s in 0usize..7) {
            let series = Series::ALL[s];
            let n = eseries::nearest(x, series).unwrap();
            prop_assert_eq!(eseries::nearest(n, series), Some(n));
            prop_assert!(eseries::is_preferred(n, series));
            let up = eseries::next_up(x, series).unwrap();
            let down = eseries::next_down(x, series).unwrap();
            prop_assert!(up >= x * (1.0 - 1e-9));
            prop_assert!(down <= x * (1.0 + 1e-9));
            prop_assert_eq!(eseries::next_up(up, series), Some(up));
            prop_assert_eq!(eseries::next_down(down, series), Some(down));
        }
    }
}
