//! Safe operating area with case derating, feedback-potentiometer dissipation and the pass
//! stage's drive, each against an independent computation named beside it.

use regulus::design::{expect_with, Design, Verdict};

fn lab() -> Design {
    Design::load(std::path::Path::new("samples/teaching-lab-0-20v.toml")).unwrap()
}

fn check<'a>(e: &'a regulus::design::Expectation, name: &str) -> &'a regulus::design::Check {
    e.checks.iter().find(|c| c.name == name).unwrap()
}

#[test]
fn settled_short_against_the_derated_soa_line() {
    // The sample's SOA (as given): 200 W from 10 V to 40 V, so I = 200 W / V_CE there (a
    // constant-power hyperbola, straight on log-log axes). At the hottest corner's settled
    // short (from the settled point's own I and P) the case sits at T_a + P (theta_cs +
    // theta_sa) and the line derates linearly to zero at T_j max (datasheet derating curve).
    let d = lab();
    let e = expect_with(&d, 500, 1);
    let s = &e.thermal.self_heated.short_worst;
    let vce = s.pass_watts / s.current_a;
    assert!((10.0..40.0).contains(&vce), "{vce}");
    let case = 40.0 + s.pass_watts * (0.2 + 0.35);
    let allowed = 200.0 / vce * (200.0 - case) / (200.0 - 25.0);
    let pts = e.soa.as_ref().expect("the sample states an SOA");
    let p = pts
        .iter()
        .find(|p| p.condition == "settled short, hottest corner")
        .unwrap();
    assert!(
        (p.allowed_a / allowed - 1.0).abs() < 1e-9,
        "{} vs {allowed}",
        p.allowed_a
    );
    let c = check(&e, "safe_operating_area");
    assert_eq!(c.verdict, Verdict::Fail);
    assert!(c.value > c.limit);
}

#[test]
fn pass_power_rating_derates_with_case_temperature() {
    // Linear derating from 25 degC case to zero at T_j max (datasheet practice). A transistor
    // limiter at 0.5 A from 25 V (0.7 V over 1.4 ohm): P = (25 - 0.7) x 0.5 = 12.15 W; the
    // case sits at 25 + 12.15 x (0.5 + 1.0) = 43.2 degC, so a 100 W (25 degC case) part with
    // T_j max 150 degC is good for 100 x (150 - 43.225) / 125 = 85.4 W there.
    let d = pot_design(
        "{ ohms = 20000, tolerance_pct = 0 }",
        "{ ohms = 10000, tolerance_pct = 0 }",
    );
    let mut d = d;
    d.input.volts = Some(25.0);
    d.limit.sense.ohms = 1.4;
    d.limit.vbe_v = 0.7;
    d.limit.vbe_spread_v = 0.0;
    d.environment.ambient_min_c = 25.0;
    d.environment.ambient_max_c = 25.0;
    let e = expect_with(&d, 100, 1);
    let pd = e.dissipation.get("pass_device").unwrap();
    assert!((pd.watts - 12.15).abs() < 1e-9, "{}", pd.watts);
    let case = 25.0 + 12.15 * 1.5;
    let rating = 100.0 * (150.0 - case) / 125.0;
    assert!((pd.rating_watts.unwrap() - rating).abs() < 1e-9);
    assert!((pd.allowed_watts.unwrap() - rating * 0.5).abs() < 1e-9);
    assert!(pd.condition.contains("derated"));
}

fn pot_design(top: &str, bottom: &str) -> Design {
    let text = format!(
        r#"
[design]
name = "pot"
[input]
kind = "dc"
volts = 80.0
line_tolerance_pct = 0
[reference]
volts = 5.0
tolerance_pct = 0
[feedback]
top = {top}
bottom = {bottom}
[pass]
stage = "single"
power_rating_w = 100
theta_jc = 1.5
theta_sa = 1.0
[limit]
clamp = "transistor"
sense = {{ ohms = 1.0, tolerance_pct = 0 }}
[load]
max_current_a = 0.3
"#
    );
    Design::parse(&text, "pot.toml").unwrap()
}

#[test]
fn bottom_potentiometer_dissipates_in_the_part_of_its_track_in_use() {
    // The amplifier holds the bottom element at V_ref, so the divider carries V_ref / R_b,set
    // (Ohm's law). A 10 kohm bottom pot stopped at 1 kohm: 5 V / 1 kohm = 5 mA, 25 mW in the
    // 1 kohm of track in use (10 % of it), at 5 x (1 + 10k / 1k) = 55 V out.
    let d = pot_design(
        "{ ohms = 10000, tolerance_pct = 0 }",
        "{ ohms = 10000, tolerance_pct = 0, pot = true, min_ohms = 1000, rating_w = 0.5 }",
    );
    let e = expect_with(&d, 100, 1);
    let b = e.dissipation.get("feedback_bottom").unwrap();
    assert!((b.watts - 0.025).abs() < 1e-12, "{}", b.watts);
    // Its rating spreads over the whole track: 10 % of 0.5 W for the part in use.
    assert!((b.rating_watts.unwrap() - 0.05).abs() < 1e-12);
    assert!(b.condition.contains("1000 ohm") && b.condition.contains("55.00 V"));
    let t = e.dissipation.get("feedback_top").unwrap();
    assert!((t.watts - 0.005f64.powi(2) * 10_000.0).abs() < 1e-12);
}

#[test]
fn top_potentiometer_carries_the_reference_current() {
    // Top pot 30 kohm over 10 kohm: I = 5 V / 10 kohm = 0.5 mA at every setting, so the pot
    // dissipates I^2 R_set, at most 7.5 mW with all of its track in use (20 V out).
    let d = pot_design(
        "{ ohms = 30000, tolerance_pct = 0, pot = true, rating_w = 0.25 }",
        "{ ohms = 10000, tolerance_pct = 0 }",
    );
    let e = expect_with(&d, 100, 1);
    let t = e.dissipation.get("feedback_top").unwrap();
    assert!((t.watts - 0.0075).abs() < 1e-12, "{}", t.watts);
    assert!((t.rating_watts.unwrap() - 0.25).abs() < 1e-12);
}

#[test]
fn amplifier_must_drive_the_stage_at_the_limit() {
    // Base drive I / h_FE (transistor current gain, textbook). The sample states h_FE 1000
    // and 10 mA from the amplifier: 1.2 A needs 1.2 mA; the highest settled limit needs
    // I_max / 1000; at the limit the clamp sinks 10 mA - I_lim,min / 1000.
    let d = lab();
    let e = expect_with(&d, 500, 1);
    let dr = &e.drive;
    assert!((dr.base_drive_at_rated_a.unwrap() - 0.0012).abs() < 1e-12);
    let imax = e
        .thermal
        .self_heated
        .short_current
        .max
        .max(e.thermal.self_heated.knee_current.max);
    assert!((dr.base_drive_at_limit_a.unwrap() - imax / 1000.0).abs() < 1e-12);
    let sink = 0.01 - e.limit_current.worst_case.min / 1000.0;
    assert!((dr.clamp_sink_a.unwrap() - sink).abs() < 1e-12);
    assert_eq!(check(&e, "drive_current").verdict, Verdict::Ok);
    // With 1 mA the amplifier cannot even drive the rated load: fail.
    let mut d2 = d.clone();
    d2.amplifier.as_mut().unwrap().output_current_a = 0.001;
    let e2 = expect_with(&d2, 100, 1);
    assert_eq!(check(&e2, "drive_current").verdict, Verdict::Fail);
    // With 3 mA it drives the rated load but limits before the clamp on hot units: marginal.
    d2.amplifier.as_mut().unwrap().output_current_a = 0.003;
    let e3 = expect_with(&d2, 100, 1);
    assert_eq!(check(&e3, "drive_current").verdict, Verdict::Marginal);
}

#[test]
fn a_limit_below_the_rated_load_fails() {
    // Diode string (n V_F - m V_BE) / R_s at its lowest corner (textbook clamp law): diodes
    // 30 mV low, pass junctions 30 mV high, sense +5 %, all junctions at 40 degC, each 2 mV/degC
    // lower (junction law): (3 x 0.59 - 2 x 0.65) / (0.39 x 1.05) = 1.148 A, below the rated
    // 1.2 A: a unit at that corner cannot deliver its rating.
    let d = lab();
    let e = expect_with(&d, 200, 1);
    let low = (3.0 * (0.62 - 0.03) - 2.0 * (0.68 - 0.03)) / (0.39 * 1.05);
    let c = check(&e, "limit_above_rated_load");
    assert!((c.value - low).abs() < 1e-9, "{} vs {low}", c.value);
    assert_eq!(c.verdict, Verdict::Fail);
}
