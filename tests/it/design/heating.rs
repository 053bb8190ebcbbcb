//! Self-heated operating points checked against an independent solve written here from the
//! junction law with its temperature coefficient, V(T) = V(25 degC) + tc (T - 25) (textbook
//! silicon junction, about -2 mV/degC), the diode-string clamp V_sense = n V_F - m V_BE
//! (Kirchhoff's voltage law), series-pass dissipation P = (V_in - I R_s) I and thermal Ohm's law
//! T_j = T_a + P (theta_jc + theta_cs + theta_sa), under the assumptions the model states: both
//! Darlington junctions at the pass temperature, the clamp diodes at ambient.

use regulus::design::{expect_with, Design, Verdict};

fn lab() -> Design {
    Design::load(std::path::Path::new("samples/teaching-lab-0-20v.toml")).unwrap()
}

struct Unit {
    vin: f64,
    ta: f64,
    r: f64,
    vf: f64,
    vbe: f64,
    n: f64,
    m: f64,
    tc: f64,
    theta: f64,
    /// Clamp diodes' temperature rise per watt of pass dissipation (0: at ambient).
    clamp_per_w: f64,
}

impl Unit {
    fn current(&self, tj: f64, tc_clamp: f64) -> f64 {
        let vf = self.vf + self.tc * (tc_clamp - 25.0);
        let vbe = self.vbe + self.tc * (tj - 25.0);
        (self.n * vf - self.m * vbe) / self.r
    }
    /// Bisection on T_j for T_j = T_a + P(T_j) theta, first crossing above T_a.
    fn solve(&self, top: f64) -> Option<(f64, f64, f64)> {
        let f = |tj: f64| {
            let p0 = (tj - self.ta) / self.theta; // P implied by T_j
            let i = self.current(tj, self.ta + p0 * self.clamp_per_w);
            let p = (self.vin - i * self.r) * i;
            self.ta + p * self.theta - tj
        };
        let mut lo = self.ta;
        let steps = 4000;
        for k in 1..=steps {
            let hi = self.ta + (top - self.ta) * k as f64 / steps as f64;
            if f(hi) <= 0.0 {
                let (mut a, mut b) = (lo, hi);
                for _ in 0..100 {
                    let mid = 0.5 * (a + b);
                    if f(mid) > 0.0 {
                        a = mid
                    } else {
                        b = mid
                    }
                }
                let tj = 0.5 * (a + b);
                let p = (tj - self.ta) / self.theta;
                let i = self.current(tj, self.ta + p * self.clamp_per_w);
                return Some((tj, i, p));
            }
            lo = hi;
        }
        None
    }
}

fn near(a: f64, b: f64, rel: f64) -> bool {
    (a - b).abs() <= rel * b.abs()
}

fn lab_unit(line: f64, ta: f64, r: f64, vf: f64, vbe: f64) -> Unit {
    Unit {
        // Full-wave peak: V_rms sqrt(2) at this line, less two bridge diodes (textbook).
        vin: 26.0 * 2f64.sqrt() * line - 1.4,
        ta,
        r,
        vf,
        vbe,
        n: 3.0,
        m: 2.0,
        tc: -0.002,
        theta: 0.7 + 0.2 + 0.35,
        clamp_per_w: 0.0,
    }
}

#[test]
fn teaching_lab_short_nominal_and_worst_corner_agree_with_an_independent_solve() {
    let d = lab();
    let e = expect_with(&d, 500, 1);
    let sh = &e.thermal.self_heated;
    // Nominal unit at 25 degC: about 2.97 A, 101.6 W, 152 degC.
    let (tj, i, p) = lab_unit(1.0, 25.0, 0.39, 0.65, 0.65).solve(600.0).unwrap();
    assert!(near(sh.short_nominal.pass_junction_c, tj, 0.01), "{tj}");
    assert!(near(sh.short_nominal.current_a, i, 0.01), "{i}");
    assert!(near(sh.short_nominal.pass_watts, p, 0.01), "{p}");
    assert!(near(sh.short_nominal.sense_watts, i * i * 0.39, 0.01));
    assert!((tj - 152.0).abs() < 1.0 && (i - 2.97).abs() < 0.01 && (p - 101.6).abs() < 0.2);
    // Hottest corner: 40 degC, high line (+10 %), sense -5 %, diodes +30 mV, pass -30 mV.
    let (tj, i, p) = lab_unit(1.1, 40.0, 0.39 * 0.95, 0.68, 0.62)
        .solve(600.0)
        .unwrap();
    assert!(near(sh.short_worst.pass_junction_c, tj, 0.01), "{tj}");
    assert!(near(sh.short_worst.current_a, i, 0.01), "{i}");
    assert!(near(sh.short_worst.pass_watts, p, 0.01), "{p}");
    assert!(
        tj > d.pass.tj_max_c,
        "the hottest corner settles above T_j max: {tj}"
    );
    // Reported as failing: above T_j max and no stable point below it.
    let verdict = |n: &str| e.checks.iter().find(|c| c.name == n).unwrap().verdict;
    assert_eq!(verdict("junction_temperature"), Verdict::Fail);
    assert_eq!(verdict("thermal_runaway"), Verdict::Fail);
    let tjc = e
        .checks
        .iter()
        .find(|c| c.name == "junction_temperature")
        .unwrap();
    assert!(near(tjc.value, tj, 0.01));
    // The sense resistor's check uses the settled current too (I^2 R, Ohm's law).
    let sense = e.dissipation.get("sense_resistor").unwrap();
    assert!(sense.watts >= i * i * 0.39 * 0.95 * 0.99);
}

#[test]
fn clamp_on_the_heatsink_follows_the_sink_temperature() {
    // Same relations with the diodes at T_a + P theta_sa.
    let text = std::fs::read_to_string("samples/teaching-lab-0-20v.toml")
        .unwrap()
        .replace("diodes = 3\n", "diodes = 3\nclamp_mount = \"heatsink\"\n");
    let d = Design::parse(&text, "lab-sink").unwrap();
    let e = expect_with(&d, 200, 1);
    let mut u = lab_unit(1.0, 25.0, 0.39, 0.65, 0.65);
    u.clamp_per_w = 0.35;
    let (tj, i, _) = u.solve(600.0).unwrap();
    let s = &e.thermal.self_heated.short_nominal;
    assert!(
        near(s.pass_junction_c, tj, 0.01),
        "{} vs {tj}",
        s.pass_junction_c
    );
    assert!(near(s.current_a, i, 0.01));
    assert!(near(s.clamp_junction_c, 25.0 + s.pass_watts * 0.35, 1e-6));
    assert!(e
        .thermal
        .self_heated
        .assumptions
        .iter()
        .any(|a| a.contains("heatsink")));
}

#[test]
fn a_small_heatsink_runs_away() {
    // Loop gain theta x dP/dT = theta x V_in x (m |tc| / R_s) (linearised positive feedback):
    // with theta_sa = 3 degC/W it is 3.9 x 35.4 x 0.004 / 0.39 = 1.4 > 1, so the heating
    // never settles (textbook loop-gain argument).
    let text = std::fs::read_to_string("samples/teaching-lab-0-20v.toml")
        .unwrap()
        .replace("theta_sa = 0.35", "theta_sa = 3.0");
    let d = Design::parse(&text, "lab-small-sink").unwrap();
    let gain = (0.7 + 0.2 + 3.0) * (26.0 * 2f64.sqrt() - 1.4) * 0.004 / 0.39;
    assert!(gain > 1.0);
    let mut u = lab_unit(1.0, 25.0, 0.39, 0.65, 0.65);
    u.theta = 3.9;
    assert!(u.solve(d.pass.tj_max_c).is_none());
    let e = expect_with(&d, 200, 1);
    assert!(!e.thermal.self_heated.short_nominal.below_tj_max);
    let c = e
        .checks
        .iter()
        .find(|c| c.name == "thermal_runaway")
        .unwrap();
    assert_eq!(c.verdict, Verdict::Fail);
    assert!(c.detail.contains("thermal runaway"), "{}", c.detail);
}

#[test]
fn a_limiter_in_free_air_does_not_follow_the_pass_device() {
    // The fixed foldback sample: the limiter transistor sits at ambient, so the settled
    // short equals V_BE / (k R_s) at ambient (textbook foldback) and T_j = T_a + P theta.
    let d = Design::load(std::path::Path::new("samples/fixed-12v-3a-foldback.toml")).unwrap();
    let e = expect_with(&d, 200, 1);
    let s = &e.thermal.self_heated.short_nominal;
    let k = 10000.0 / 10390.0;
    let isc = 0.65 / (k * 0.33);
    assert!(near(s.current_a, isc, 1e-6), "{}", s.current_a);
    let vin = 18.0 * 2f64.sqrt() - 1.4;
    let p = (vin - isc * 0.33) * isc;
    assert!(near(s.pass_junction_c, 25.0 + p * (0.83 + 0.2 + 0.4), 1e-6));
    let c = e
        .checks
        .iter()
        .find(|c| c.name == "thermal_runaway")
        .unwrap();
    assert_eq!(c.verdict, Verdict::Ok);
}

#[test]
fn teaching_lab_aux_rail_drops_out_at_the_lowest_input() {
    // Ohm's law over the collector resistor: R_c = share x (V_in,nom - V_aux) / I_aux; at the
    // lowest input V_CE = V_in,min - I_aux R_c - V_aux; a saturated transistor leaves the rail
    // at V_in,min - I_aux R_c - V_CE(sat) (0.2 V, from memory).
    let d = lab();
    let e = expect_with(&d, 500, 1);
    let vin_nom = 26.0 * 2f64.sqrt() - 1.4;
    let rc = 0.5 * (vin_nom - 26.0) / 0.02;
    let vin_min = e.input.min_v;
    // Lowest input: low line peak less the full-load ripple of the smallest reservoir,
    // I / (2 f C) (textbook): 26 sqrt(2) 0.9 - 1.4 - 1.2 / (2 x 50 x 3760 uF).
    let vin_min_indep = 26.0 * 2f64.sqrt() * 0.9 - 1.4 - 1.2 / (2.0 * 50.0 * 4700e-6 * 0.8);
    assert!(near(vin_min, vin_min_indep, 1e-9));
    let vce = vin_min - 0.02 * rc - 26.0;
    assert!((vce - -2.18).abs() < 0.01, "{vce}");
    let c = e
        .checks
        .iter()
        .find(|c| c.name == "aux_rail_dropout")
        .unwrap();
    assert_eq!(c.verdict, Verdict::Fail);
    assert!(near(c.value, vce, 1e-9));
    let rail = vin_min - 0.02 * rc - 0.2;
    assert!(near(
        e.drive.aux_rail_at_lowest_input_v.unwrap(),
        rail,
        1e-9
    ));
    let h = e
        .checks
        .iter()
        .find(|c| c.name == "drive_headroom")
        .unwrap();
    assert_eq!(h.verdict, Verdict::Fail);
    assert!((h.value - -0.83).abs() < 0.01, "{}", h.value);
}

#[test]
fn short_circuit_band_spans_a_cold_and_a_running_unit() {
    // A bench shorts a unit that has been running: its pass junctions sit at the rated-load
    // steady state, T_j = T_a + P_0 theta with P_0 = (V_in - V_out - I R_s) I (thermal Ohm's
    // law; series-pass dissipation), and the string's threshold has risen by m |tc| (T_j - 25)
    // (junction law). Nominal unit: 1.2 A at 20.4 V from 35.37 V.
    let d = lab();
    let e = expect_with(&d, 2000, 1);
    let vin = 26.0 * 2f64.sqrt() - 1.4;
    let p0 = (vin - 20.4 - 1.2 * 0.39) * 1.2;
    let tj = 25.0 + p0 * 1.25;
    let running = (0.65 + 2.0 * 0.002 * (tj - 25.0)) / 0.39;
    let b = e.short_circuit_current;
    assert!(
        near(b.nominal, 0.65 / 0.39, 1e-12),
        "the nominal stays the cold value"
    );
    assert!(b.worst_case.contains(running) && b.worst_case.max > running);
    assert!(
        b.monte_carlo.p_high > running,
        "{} vs {running}",
        b.monte_carlo.p_high
    );
    // The knee band is unchanged: junctions at ambient.
    assert!(e.limit_current.worst_case.max < b.worst_case.max);
}
