//! Monte Carlo with an independent draw per diode, and as-built bands (part tolerances only,
//! at nominal ambient and input) beside the operating envelope.

use regulus::design::{expect_with, Design};

fn string_only(n: u32, spread: f64) -> Design {
    // Only the clamp diodes vary; every other tolerance is zero.
    let text = format!(
        r#"
[design]
name = "string"
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
theta_sa = 1.0
[limit]
clamp = "diode_string"
sense = {{ ohms = 1.0, tolerance_pct = 0 }}
diodes = {n}
diode_vf_v = 0.65
diode_vf_spread_v = {spread}
[load]
max_current_a = 0.3
[environment]
ambient_c = 25
ambient_min_c = 0
ambient_max_c = 50
"#
    );
    Design::parse(&text, "string.toml").unwrap()
}

#[test]
fn diodes_of_a_string_are_drawn_independently() {
    // The sum of n independent drops has sigma sqrt(n) sigma_F (variance of a sum of
    // independent variables, any statistics text); one shared draw would give n sigma_F.
    // The spread is read as +-3 sigma, truncated at the band: a normal truncated at +-3 sigma
    // has 0.9865 of the untruncated sigma (truncated-normal variance formula).
    for n in [2u32, 3, 4] {
        let d = string_only(n, 0.03);
        let e = expect_with(&d, 200_000, 11);
        let sigma_f = 0.03 / 3.0 * 0.9865;
        let want = (n as f64).sqrt() * sigma_f;
        let got = e.as_built.sense_voltage.monte_carlo.sigma;
        assert!(
            (got / want - 1.0).abs() < 0.02,
            "n {n}: sigma {got}, want {want}"
        );
        // The worst case still puts every diode at the same extreme: n x 0.03 V either way.
        let wc = e.as_built.sense_voltage.worst_case;
        assert!((wc.max - wc.min - 2.0 * n as f64 * 0.03).abs() < 1e-9);
    }
}

#[test]
fn as_built_bands_leave_out_ambient_and_line() {
    // With the diode spread at zero, only the ambient range moves the limit: by
    // n |tc| dT / R_s in the operating envelope (junction law, -2 mV/degC over 0-50 degC;
    // the single pass junction at ambient moves the other way by m |tc| dT), and not at all
    // as built (at the nominal 25 degC).
    let d = string_only(3, 0.0);
    let e = expect_with(&d, 2000, 3);
    let env = e.limit_current.worst_case;
    let want = (3.0 - 1.0) * 0.002 * 50.0 / 1.0;
    assert!((env.max - env.min - want).abs() < 1e-9, "{:?}", env);
    let ab = e.as_built.limit_current;
    assert!(ab.worst_case.max - ab.worst_case.min < 1e-12);
    assert!(ab.monte_carlo.sigma < 1e-12);
    assert_eq!(e.as_built.ambient_c, 25.0);
    // On the teaching-lab sample the as-built band lies inside the envelope.
    let d = Design::load(std::path::Path::new("samples/teaching-lab-0-20v.toml")).unwrap();
    let e = expect_with(&d, 5000, 3);
    let (a, o) = (e.as_built.limit_current, e.limit_current);
    assert!(o.worst_case.min <= a.worst_case.min && a.worst_case.max <= o.worst_case.max);
    assert!(a.monte_carlo.sigma < o.monte_carlo.sigma);
}

/// The settled knee of `string_only(3, 0)` solved independently: I(T) = (3 V_F - V_BE(T)) / R
/// with V_BE(T) = 0.65 V - 2 mV/degC (T - 25) (junction law), P = (V_in - V_out - I R) I and
/// T = T_a + P theta (thermal Ohm's law; common practice), by plain fixed-point iteration.
fn settled_knee_by_hand(d: &Design) -> (f64, f64) {
    let theta = d.pass.theta_jc + d.pass.theta_cs + d.pass.theta_sa.unwrap();
    let (vin, vout, r) = (25.0, 5.0 * (1.0 + 20.0 / 10.0), 1.0);
    let mut t = 25.0;
    let mut i = 0.0;
    for _ in 0..200 {
        i = (3.0 * 0.65 - (0.65 - 0.002 * (t - 25.0))) / r;
        t = 25.0 + (vin - vout - i * r) * i * theta;
    }
    (t, i)
}

#[test]
fn the_as_built_knee_spans_a_cold_unit_to_its_settled_self_heated_knee() {
    let d = string_only(3, 0.0);
    let e = expect_with(&d, 2000, 3);
    let a = &e.as_built;
    let (t, i) = settled_knee_by_hand(&d);
    assert!(
        (a.knee_settled_junction_c - t).abs() < 0.01 * (t - 25.0),
        "settled T_j {} against {t}",
        a.knee_settled_junction_c
    );
    // Every tolerance is zero: the cold band is the point 1.30 A; the heated band reaches the
    // settled knee; the Monte Carlo band spans both.
    let cold = a.limit_current.worst_case;
    assert!((cold.min - 1.3).abs() < 1e-9 && (cold.max - 1.3).abs() < 1e-9);
    let hot = a.limit_current_heated;
    assert!((hot.worst_case.min - 1.3).abs() < 1e-9);
    assert!(
        (hot.worst_case.max - i).abs() < 0.01 * (i - 1.3),
        "{hot:?} against {i}"
    );
    assert!(hot.monte_carlo.p_high > 1.3 + 0.9 * (i - 1.3));
    // The shift at a given junction temperature is m |tc| dT / R (one pass junction here).
    let s = regulus::design::limit_shift(&d, 15.0, 75.0, 25.0);
    assert!((s - 0.002 * 50.0).abs() < 1e-12, "{s}");
    // Clamp diodes warmed with it pull the limit down by n |tc| dT / R.
    let (lo, hi) = regulus::design::limit_shift_range(&d, 15.0, (25.0, 75.0), (25.0, 35.0));
    assert!((lo - (-3.0 * 0.002 * 10.0)).abs() < 1e-12, "{lo}");
    assert!((hi - 0.1).abs() < 1e-12, "{hi}");
}

#[test]
fn a_limiter_that_does_not_follow_the_pass_device_has_one_knee_band() {
    // A transistor limiter in free air reads the same cold or hot (its own junction at the
    // ambient): the heated band is the cold band.
    let d = Design::load(std::path::Path::new("samples/fixed-12v-3a-foldback.toml")).unwrap();
    let a = expect_with(&d, 2000, 5).as_built;
    assert_eq!(
        a.limit_current.worst_case,
        a.limit_current_heated.worst_case
    );
    assert_eq!(regulus::design::limit_shift(&d, 12.0, 120.0, 25.0), 0.0);
}

/// Metrics of a bench run that read `vout` unloaded and its knee at `knee_a`, with the case
/// at `case_c` and the pass device dissipating `watts` there when given.
fn knee_metrics(vout: f64, knee_a: f64, case: Option<(f64, f64)>) -> regulus::analysis::Metrics {
    use regulus::analysis::{CurvePoint, KneeConditions, KneeMetrics};
    let mut m = regulus::analysis::analyse(&[], &Default::default());
    m.no_load = Some(CurvePoint {
        current: 0.0,
        voltage: vout,
    });
    m.knee = Some(KneeMetrics {
        drop_fraction: 0.02,
        threshold_voltage: 0.98 * vout,
        fixed_drop: Some(CurvePoint {
            current: knee_a,
            voltage: 0.98 * vout,
        }),
        two_segment: None,
        highest_regulating: None,
    });
    m.knee_conditions = case.map(|(c, w)| KneeConditions {
        case_temperature: Some(c),
        pass_watts: Some(w),
    });
    m
}

#[test]
fn a_knee_read_at_a_known_case_temperature_is_judged_by_the_band_moved_there() {
    use regulus::compare::{compare, DesignExpectation, Verdict};
    let d = string_only(3, 0.0);
    let e = expect_with(&d, 2000, 3);
    let x = DesignExpectation::from_design(&d, &e);
    // Case 45 degC, 8 W at the knee: the pass junction lies between 45 degC and
    // 45 + 8 x 1.5 = 57 degC (T_j = T_case + P theta_jc); one pass junction moves the limit by
    // |tc| dT / R = 2 mA/degC (junction law), so the zero-tolerance band is 1.34 .. 1.364 A.
    let (lo, hi) = (1.3 + 0.002 * 20.0, 1.3 + 0.002 * 32.0);
    let judged = |i: f64, case| {
        let c = compare(&knee_metrics(15.0, i, case), &x);
        c.checks
            .into_iter()
            .find(|k| k.metric == "limit_current")
            .expect("limit judged")
    };
    let k = judged(1.352, Some((45.0, 8.0)));
    assert!((k.worst_case.min - lo).abs() < 1e-9, "{:?}", k.worst_case);
    assert!((k.worst_case.max - hi).abs() < 1e-9, "{:?}", k.worst_case);
    assert_eq!(k.verdict, Verdict::Pass);
    assert!(k.band_basis.as_deref().unwrap().contains("45 .. 57 degC"));
    // The operating envelope is reported beside it, not judged.
    assert_eq!(k.envelope, Some(e.limit_current.worst_case));
    // A hot unit that reads the cold knee has a clamp that is off.
    assert_eq!(judged(1.30, Some((45.0, 8.0))).verdict, Verdict::Fail);
    // Without a case reading the cold knee is a good unit's, and so is the settled one.
    let (_, settled) = settled_knee_by_hand(&d);
    for i in [1.30 + 1e-9, settled - 1e-6] {
        let k = judged(i, None);
        assert_eq!(k.verdict, Verdict::Pass, "{i}: {k:?}");
        assert!(k.band_basis.as_deref().unwrap().contains("no case reading"));
    }
    assert_eq!(judged(settled + 0.01, None).verdict, Verdict::Fail);
}
