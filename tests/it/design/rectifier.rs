//! The full-wave input stage: transformer regulation, the bridge's peak, surge and average
//! currents and dissipation, and the reservoir's ripple current, against independent
//! arithmetic on the capacitor-input rectifier.

use regulus::design::{expect_with, Design, Verdict};
use std::f64::consts::{PI, SQRT_2};

fn lab_with_input_stage() -> Design {
    let text = std::fs::read_to_string("samples/teaching-lab-0-20v.toml")
        .unwrap()
        .replace(
            "reservoir_tolerance_pct = 20\n",
            "reservoir_tolerance_pct = 20\nregulation_pct = 8\nreservoir_ripple_rating_a = 3.0\nrectifier_rating_a = 6.0\nrectifier_surge_rating_a = 150\n",
        );
    Design::parse(&text, "lab-input.toml").unwrap()
}

#[test]
fn transformer_regulation_separates_no_load_and_full_load() {
    // The stated 8 % regulation: no load 26 x 1.08 = 28.08 V RMS. Highest input: its peak at
    // high line less two bridge diodes; lowest: the rated-load peak at low line less the
    // full-load ripple of the smallest reservoir, I / (2 f C) (textbook).
    let d = lab_with_input_stage();
    let e = expect_with(&d, 500, 1);
    let r = e.input.rectifier.as_ref().unwrap();
    assert!((r.secondary_no_load_vrms - 28.08).abs() < 1e-9);
    assert_eq!(r.secondary_full_load_vrms, 26.0);
    let max = 28.08 * SQRT_2 * 1.1 - 1.4;
    assert!((e.input.max_v - max).abs() < 1e-9, "{}", e.input.max_v);
    let min = 26.0 * SQRT_2 * 0.9 - 1.4 - 1.2 / (2.0 * 50.0 * 4700e-6 * 0.8);
    assert!((e.input.min_v - min).abs() < 1e-9, "{}", e.input.min_v);
    // Without a stated regulation the sample's numbers are what they were.
    let plain = Design::load(std::path::Path::new("samples/teaching-lab-0-20v.toml")).unwrap();
    let e0 = expect_with(&plain, 200, 1);
    assert!((e0.input.max_v - (26.0 * SQRT_2 * 1.1 - 1.4)).abs() < 1e-9);
}

#[test]
fn bridge_and_reservoir_currents() {
    // Capacitor-input full-wave rectifier (textbook): the reservoir recharges over theta_c,
    // cos theta_c = 1 - dV / V_p, with dV = I / (2 f C); the charging pulse as a triangle
    // carrying I / (2 f) per half cycle peaks at I / (f t_c) (common practice). High line,
    // largest reservoir (4700 uF + 20 %), 1.2 A.
    let d = lab_with_input_stage();
    let e = expect_with(&d, 500, 1);
    let r = e.input.rectifier.as_ref().unwrap();
    let vp = 26.0 * SQRT_2 * 1.1 - 1.4;
    let c = 4700e-6 * 1.2;
    let dv = 1.2 / (2.0 * 50.0 * c);
    let theta = (1.0 - dv / vp).acos();
    assert!((r.conduction_angle_deg - theta.to_degrees()).abs() < 1e-9);
    assert!((15.0..25.0).contains(&r.conduction_angle_deg));
    let tc = theta / (2.0 * PI * 50.0);
    let ipk = 1.2 / (50.0 * tc);
    assert!((r.peak_current_a - ipk).abs() < 1e-9);
    // Rule of thumb (common practice): capacitor-input peaks run 10-20 x the DC current.
    assert!((12.0..24.0).contains(&(ipk / 1.2)), "{}", ipk / 1.2);
    let irms = ipk * (2.0 * 50.0 * tc / 3.0).sqrt();
    let ripple = (irms * irms - 1.44).sqrt();
    assert!((r.ripple_current_a - ripple).abs() < 1e-9);
    // Two conducting diodes: 1.4 V x 1.2 A = 1.68 W.
    assert!((r.dissipation_w - 1.68).abs() < 1e-12);
    // Surge into the empty reservoir: the no-load peak over R_w = (V_nl - V_fl) / I_rms.
    let rw = (28.08 - 26.0) / irms;
    let surge = 28.08 * SQRT_2 * 1.1 / rw;
    assert!((r.surge_current_a.unwrap() - surge).abs() < 1e-6);
    let verdict = |n: &str| e.checks.iter().find(|c| c.name == n).unwrap().verdict;
    assert_eq!(
        verdict("reservoir_ripple_current"),
        if ripple <= 3.0 {
            Verdict::Ok
        } else {
            Verdict::Fail
        }
    );
    assert_eq!(verdict("rectifier_current"), Verdict::Ok);
    assert_eq!(
        verdict("rectifier_surge"),
        if surge <= 150.0 {
            Verdict::Ok
        } else {
            Verdict::Fail
        }
    );
}
