//! How long a short may last: the junction's temperature over the dwell against the step
//! response of a first-order thermal stage, and a plan whose short outlasts the design refused
//! before any port opens, located in the plan file.

use regulus::design::{expect_with, Design};
use std::process::Command;

fn one_stage() -> Design {
    // A transistor limiter (0.7 V over 1.4 ohm: 0.5 A, no drift with the pass junction) from
    // 80 V; the case and sink carry almost no heat, so the network is one stage:
    // tau = (theta_jc + theta_cs + theta_sa) C_j = 5 x 2 = 10 s.
    let text = r#"
[design]
name = "one stage"
[input]
kind = "dc"
volts = 80.0
line_tolerance_pct = 0
[reference]
volts = 5.0
tolerance_pct = 0
[feedback]
top = { ohms = 20000, tolerance_pct = 0 }
bottom = { ohms = 10000, tolerance_pct = 0 }
[pass]
stage = "single"
vbe_v = 0.65
vbe_spread_v = 0
power_rating_w = 100
theta_jc = 1.5
theta_cs = 0.5
theta_sa = 3.0
[pass.thermal_mass]
junction_j_per_c = 2.0
case_j_per_c = 1e-6
sink_j_per_c = 1e-6
[limit]
clamp = "transistor"
sense = { ohms = 1.4, tolerance_pct = 0 }
vbe_v = 0.7
vbe_spread_v = 0
[load]
max_current_a = 0.3
[environment]
ambient_c = 25
ambient_min_c = 25
ambient_max_c = 25
"#;
    Design::parse(text, "one-stage.toml").unwrap()
}

#[test]
fn single_stage_dwell_follows_the_first_order_step_response() {
    // First-order thermal stage (textbook): T(t) = T_ss + (T_0 - T_ss) e^(-t / tau).
    // T_0: rated-load steady state, P_0 = (80 - 15 - 0.3 x 1.4) x 0.3 = 19.374 W, T_0 = 25 + 5 P_0;
    // short: P = (80 - 0.5 x 1.4) x 0.5 = 39.65 W, T_ss = 25 + 5 P = 223.25 degC;
    // T_j max 150 degC is reached at t = -tau ln((T_ss - 150) / (T_ss - T_0)).
    let d = one_stage();
    let e = expect_with(&d, 100, 1);
    let dw = e
        .thermal
        .self_heated
        .short_dwell_nominal
        .as_ref()
        .expect("the design gives thermal masses");
    let t0 = 25.0 + 5.0 * (80.0 - 15.0 - 0.3 * 1.4) * 0.3;
    let tss = 25.0 + 5.0 * (80.0 - 0.5 * 1.4) * 0.5;
    let tau = 10.0;
    assert!((dw.start_junction_c - t0).abs() < 1e-9);
    let want = -tau * ((tss - 150.0) / (tss - t0)).ln();
    let got = dw.longest_s.expect("the short outlasts the junction");
    assert!((got / want - 1.0).abs() < 0.01, "{got} vs {want}");
    for &(t, tj, _) in &dw.curve {
        let f = tss + (t0 - tss) * (-t / tau).exp();
        assert!((tj - f).abs() < 0.01 * (f - 25.0), "t {t}: {tj} vs {f}");
    }
}

#[test]
fn the_case_lags_the_junction_and_the_heatsink_takes_minutes() {
    // Teaching-lab sample: junction tau 0.5 s, case 10 J/degC, sink 900 J/degC through
    // 0.35 degC/W (315 s, minutes). The junction's rise leads the case's; the worst corner's
    // short settles at the same temperature as the steady-state solve (the network's DC
    // solution is T_j = T_a + P theta).
    let d = Design::load(std::path::Path::new("samples/teaching-lab-0-20v.toml")).unwrap();
    let e = expect_with(&d, 200, 1);
    let sh = &e.thermal.self_heated;
    let w = sh.short_dwell_worst.as_ref().unwrap();
    let (t1, j1, c1) = w.curve.iter().copied().find(|p| p.0 >= 1.0).unwrap();
    assert!(
        j1 - w.start_junction_c > 3.0 * (c1 - w.start_case_c),
        "at {t1} s"
    );
    let longest = w.longest_s.expect("the hottest corner passes T_j max");
    assert!(longest > 60.0, "{longest}");
    let last = w.curve.last().unwrap();
    assert!((last.1 - sh.short_worst.pass_junction_c).abs() < 0.5);
    // The nominal unit's short settles below T_j max: no limit on its dwell.
    assert!(sh.short_dwell_nominal.as_ref().unwrap().longest_s.is_none());
}

#[test]
fn a_plan_whose_short_outlasts_the_design_is_refused_before_any_port_opens() {
    let dir = tempfile::tempdir().unwrap();
    let plan = std::fs::read_to_string("samples/plans/standard.toml")
        .unwrap()
        .replace("max_short_dwell = \"5 s\"", "max_short_dwell = \"900 s\"")
        .replace("dwell = \"3 s\"", "dwell = \"600 s\"");
    let line = plan.lines().position(|l| l.starts_with("dwell =")).unwrap() + 1;
    let plan_path = dir.path().join("long-short.toml");
    std::fs::write(&plan_path, &plan).unwrap();
    // The bench file names loopback TCP ports nobody listens on: a run that got past its
    // checks would fail to connect (exit 4 or 3), not exit 2.
    let out = Command::new(env!("CARGO_BIN_EXE_regulus"))
        .args(["run", "--unit", "U1", "--yes", "--bench"])
        .arg("config/bench-loopback-example.toml")
        .arg("--design")
        .arg("samples/teaching-lab-0-20v.toml")
        .arg("--plan")
        .arg(&plan_path)
        .arg("--records")
        .arg(dir.path().join("records"))
        .output()
        .unwrap();
    let err = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(2), "{err}");
    assert!(
        err.contains(&format!("long-short.toml:{line}:")),
        "no plan file:line:column in: {err}"
    );
    assert!(err.contains("longer than this design survives"), "{err}");
    assert!(!dir.path().join("records").exists());
    // The sample plan's 3 s short is well inside the design's limit: the same check passes.
    let d = Design::load(std::path::Path::new("samples/teaching-lab-0-20v.toml")).unwrap();
    let e = expect_with(&d, 200, 1);
    let t = regulus::plan::DesignTargets::from_design(&d, &e);
    let text = std::fs::read_to_string("samples/plans/standard.toml").unwrap();
    let p = regulus::plan::Plan::parse(&text, "standard.toml", &t).unwrap();
    assert!(regulus::plan::check_short_dwell(&p, &text, "standard.toml", &e).is_ok());
}
