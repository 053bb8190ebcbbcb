//! Self-consistent operating points: where a current limit depends on temperature (a diode
//! string against the hot pass junctions, a limiter transistor against its own junction), the
//! clamp relation and the thermal relation are solved together for one unit (a corner, a draw
//! or the nominal unit), each part at its own temperature. Pure: a [`Design`] and [`Params`]
//! in, a [`Solved`] point out; nothing here reads a file or prints.
//!
//! Relations (textbook; common practice):
//! - junction drop V(T) = V(25 degC) + tc (T - 25) ([`junction_at`](super::model::junction_at))
//! - pass junction T_j = T_a + P (theta_jc + theta_cs + theta_sa), steady state; every pass
//!   junction (both of a Darlington) shares that temperature
//! - clamp junctions at ambient, or at the heatsink T_a + P theta_sa when the design says
//!   `clamp_mount = "heatsink"`
//! - dissipation P = (V_in - V_out - I R_s) I at the unit's highest input (no load, high line)
//!
//! The fixed point is found in P: h(P) = P(I(T_j(P), T_clamp(P))) - P starts non-negative at
//! P = 0; the first crossing from + to - is the stable point the unit settles at. No crossing
//! below the T_j max is thermal runaway (none at all: the heating never settles).

use super::file::{ClampMount, Design};
use super::model::{evaluate, limit_current_at, pass_dissipation, Params, PassStress};
use serde::{Deserialize, Serialize};

/// The operating condition solved.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Condition {
    /// A sustained short: output at 0 V, current on the limit line.
    Short,
    /// At the knee: output still at its setting, current at the limit.
    Knee,
    /// The pass device's hardest point (a short, the worst foldback point, or full load at the
    /// lowest output), as [`pass_dissipation`] finds it.
    Worst,
}

/// A self-consistent operating point of one unit.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct Solved {
    pub condition: Condition,
    /// Ambient and line factor of this unit (a corner's or the nominal).
    pub ambient_c: f64,
    pub line: f64,
    /// The input the dissipation was computed at (this unit's highest: no load, its line).
    pub input_v: f64,
    /// Output current and pass-device dissipation at the settled point.
    pub current_a: f64,
    pub pass_watts: f64,
    /// Sense resistor dissipation I^2 R_s.
    pub sense_watts: f64,
    pub pass_junction_c: f64,
    pub clamp_junction_c: f64,
    /// Which condition stressed the pass device (for `Worst`).
    pub stress: PassStress,
    /// A stable point exists at all (false: thermal runaway, the heating never settles; the
    /// values are then those at the search's upper end).
    pub settled: bool,
    /// The stable point lies at or below T_j max.
    pub below_tj_max: bool,
}

/// Highest junction temperature searched for a stable point, above T_j max (degC).
pub const SEARCH_ABOVE_TJ_MAX_C: f64 = 400.0;

/// The thermal resistance from pass junction to ambient used by the solve, and to the sink.
/// Without a chosen heatsink the junction heats through theta_jc + theta_cs only (an ideal
/// heatsink: a lower bound on the heating).
pub fn thetas(d: &Design) -> (f64, f64) {
    let sa = d.pass.theta_sa.unwrap_or(0.0);
    (d.pass.theta_jc + d.pass.theta_cs + sa, sa)
}

/// Element values with the pass junctions and the clamp at the temperatures that follow from a
/// pass dissipation `watts`.
pub fn heated(d: &Design, p: &Params, watts: f64) -> Params {
    let (theta, sa) = thetas(d);
    let mut h = p.clone();
    h.pass_junction_c = p.ambient_c + watts * theta;
    h.clamp_junction_c = match d.limit.clamp_mount {
        ClampMount::Ambient => p.ambient_c,
        ClampMount::Heatsink => p.ambient_c + watts * sa,
    };
    h
}

/// Current, dissipation and stress of a condition with the junctions as in `h`.
pub fn stress_at(d: &Design, h: &Params, condition: Condition) -> (f64, f64, PassStress) {
    let pt = evaluate(d, h);
    let vin = pt.vin_no_load;
    match condition {
        Condition::Short => {
            let i = limit_current_at(d, h, 0.0).max(0.0);
            (i, ((vin - i * h.r_sense) * i).max(0.0), PassStress::Limit)
        }
        Condition::Knee => {
            let i = limit_current_at(d, h, pt.vout_set).max(0.0);
            (
                i,
                ((vin - pt.vout_set - i * h.r_sense) * i).max(0.0),
                PassStress::Limit,
            )
        }
        Condition::Worst => {
            let (w, s, i) = pass_dissipation(d, h, &pt);
            (i, w, s)
        }
    }
}

fn point(d: &Design, p: &Params, c: Condition, watts: f64, settled: bool) -> Solved {
    let h = heated(d, p, watts);
    let (i, w, stress) = stress_at(d, &h, c);
    Solved {
        condition: c,
        ambient_c: p.ambient_c,
        line: p.line,
        input_v: evaluate(d, &h).vin_no_load,
        current_a: i,
        pass_watts: if settled { watts } else { w.max(watts) },
        sense_watts: i * i * h.r_sense,
        pass_junction_c: h.pass_junction_c,
        clamp_junction_c: h.clamp_junction_c,
        stress,
        settled,
        below_tj_max: settled && h.pass_junction_c <= d.pass.tj_max_c + 1e-9,
    }
}

/// Short-circuit current of a running unit: the pass junction (and a heatsink-mounted clamp)
/// at the rated-load steady state at the evaluated output, T_j = T_a + P_0 theta, when the
/// short is applied. A bench applies its short to a unit that has been running, so a reading
/// lies between this and the cold value.
pub fn running_short_current(d: &Design, p: &Params) -> f64 {
    let pt = evaluate(d, p);
    let i0 = d.load.max_current_a.min(pt.limit_current.max(0.0));
    let p0 = ((pt.vin_no_load - pt.vout_set - i0 * p.r_sense) * i0).max(0.0);
    limit_current_at(d, &heated(d, p, p0), 0.0)
}

/// Solve clamp and thermal relations together for one unit (`p` with its junctions at
/// ambient) under one condition.
pub fn solve(d: &Design, p: &Params, condition: Condition) -> Solved {
    let (theta, _) = thetas(d);
    let h = |w: f64| stress_at(d, &heated(d, p, w), condition).1 - w;
    let t_cap = d.pass.tj_max_c + SEARCH_ABOVE_TJ_MAX_C;
    let w_cap = ((t_cap - p.ambient_c) / theta).max(0.0);
    const GRID: usize = 96;
    let mut lo = 0.0;
    let w0 = stress_at(d, p, condition).1;
    if w0 <= 0.0 {
        return point(d, p, condition, 0.0, true);
    }
    // A clamp that does not follow the heating (a limiter in free air): the cold point is
    // already the settled one.
    if h(w0).abs() <= 1e-12 * w0 {
        return point(d, p, condition, w0, true);
    }
    for k in 1..=GRID {
        let w = w_cap * k as f64 / GRID as f64;
        let hw = h(w);
        if hw <= 0.0 {
            let (mut a, mut b) = (lo, w); // h(a) > 0 >= h(b)
            for _ in 0..60 {
                let m = 0.5 * (a + b);
                if h(m) > 0.0 {
                    a = m;
                } else {
                    b = m;
                }
            }
            return point(d, p, condition, 0.5 * (a + b), true);
        }
        lo = w;
    }
    point(d, p, condition, w_cap, false)
}

/// Largest sink-to-ambient thermal resistance that keeps this unit's settled pass junction at
/// `tj_target` under `condition` (negative: none can). At T_j = T* the dissipation follows from
/// the clamp relation with the clamp at ambient, or (on the heatsink) at T* - P (theta_jc +
/// theta_cs), solved by fixed-point iteration; then theta_sa = (T* - T_a) / P - theta_jc -
/// theta_cs. Infinite when the condition dissipates nothing.
pub fn max_theta_sa(d: &Design, p: &Params, condition: Condition, tj_target: f64) -> f64 {
    let fixed = d.pass.theta_jc + d.pass.theta_cs;
    let mut h = p.clone();
    h.pass_junction_c = tj_target;
    h.clamp_junction_c = p.ambient_c;
    let mut w = stress_at(d, &h, condition).1;
    if d.limit.clamp_mount == ClampMount::Heatsink {
        for _ in 0..40 {
            h.clamp_junction_c = (tj_target - w * fixed).max(p.ambient_c);
            let next = stress_at(d, &h, condition).1;
            let done = (next - w).abs() <= 1e-12 * next.abs().max(1e-12);
            w = next;
            if done {
                break;
            }
        }
    }
    if w <= 0.0 {
        return f64::INFINITY;
    }
    (tj_target - p.ambient_c) / w - fixed
}

/// The assumptions of the solve, in words (printed with the results).
pub fn assumptions(d: &Design) -> Vec<String> {
    let m = d.pass.stage.junctions();
    let mut out = vec![format!(
        "steady state: the pass junction{} ({}) at T_a + P (theta_jc + theta_cs + theta_sa){}",
        if m > 1 { "s" } else { "" },
        if m > 1 {
            "both Darlington junctions share one temperature"
        } else {
            "one junction"
        },
        if d.pass.theta_sa.is_none() {
            " with no heatsink chosen: theta_sa taken as 0 (an ideal heatsink, a lower bound)"
        } else {
            ""
        }
    )];
    out.push(match d.limit.clamp_mount {
        ClampMount::Ambient => {
            "clamp junctions (diodes or limiter transistor) in free air at the unit's ambient"
                .to_string()
        }
        ClampMount::Heatsink => {
            "clamp junctions on the pass device's heatsink, at T_a + P theta_sa".to_string()
        }
    });
    out.push(format!(
        "junction drops move {} mV/degC from their 25 degC values, linearly",
        d.environment.junction_tempco_mv_per_c
    ));
    out.push(
        "dissipation at the unit's highest input (no load, its line), each corner at its own ambient"
            .to_string(),
    );
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    fn lab() -> Design {
        Design::parse(include_str!("../../samples/teaching-lab-0-20v.toml"), "lab").unwrap()
    }

    #[test]
    fn settled_point_satisfies_both_relations() {
        // T_j = T_a + P theta and P = (V_in - I R) I with I from the hot junctions: the solved
        // point must satisfy both (thermal Ohm's law; series-pass dissipation, textbook).
        let d = lab();
        let p = Params::nominal(&d);
        let s = solve(&d, &p, Condition::Short);
        assert!(s.settled);
        let (theta, _) = thetas(&d);
        assert!((s.pass_junction_c - (p.ambient_c + s.pass_watts * theta)).abs() < 1e-6);
        let h = heated(&d, &p, s.pass_watts);
        let (i, w, _) = stress_at(&d, &h, Condition::Short);
        assert!((w - s.pass_watts).abs() < 1e-6 * w, "{w} {}", s.pass_watts);
        assert!((i - s.current_a).abs() < 1e-9);
    }

    #[test]
    fn runaway_when_loop_gain_reaches_one() {
        // A diode-string limit rising 4 mV/degC over 0.39 ohm from ~35 V: the loop gain
        // theta x V_in x 0.004 / 0.39 reaches 1 at theta ~ 2.8 degC/W; at 5 degC/W the heating
        // never settles below T_j max (positive feedback, textbook loop-gain argument).
        let mut d = lab();
        d.pass.theta_sa = Some(4.1);
        let s = solve(&d, &Params::nominal(&d), Condition::Short);
        assert!(!s.below_tj_max);
    }
}
