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
