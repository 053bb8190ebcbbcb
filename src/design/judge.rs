//! The design's checks: each computed value against its limit with a margin and a verdict
//! (ok inside the margin the rules ask for, marginal inside the rating, fail outside).
//! Pure: the values the expectation computed in, [`Check`]s out.

use super::file::Design;
use super::rectifier::RectifierExpect;
use super::soa::SoaPoint;
use super::stress::{DriveExpect, SelfHeated};
use serde::{Deserialize, Serialize};
use std::collections::BTreeMap;

/// Verdict of one check.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Verdict {
    Ok,
    Marginal,
    Fail,
}

impl Verdict {
    pub fn as_str(self) -> &'static str {
        match self {
            Verdict::Ok => "ok",
            Verdict::Marginal => "marginal",
            Verdict::Fail => "fail",
        }
    }
}

/// One design check: a value against a limit, with the margin (positive = inside).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Check {
    pub name: String,
    pub verdict: Verdict,
    pub value: f64,
    pub limit: f64,
    pub margin: f64,
    pub unit: String,
    pub detail: String,
}

/// Dissipation of one part.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct PartStress {
    /// Worst-case dissipation in watts.
    pub watts: f64,
    /// The part's rating, when the design gives one.
    pub rating_watts: Option<f64>,
    /// Rating times the derating fraction: what the part may run at.
    pub allowed_watts: Option<f64>,
    /// Smallest standard resistor power rating that keeps within the derating rule.
    pub suggested_rating_watts: Option<f64>,
    /// The operating condition that gives this dissipation.
    pub condition: String,
}

/// What the checks judge.
pub struct Judged<'a> {
    /// Lowest worst-case limit (junctions at ambient) and the nominal limit.
    pub limit_min: f64,
    pub limit_nominal: f64,
    pub dissipation: &'a BTreeMap<String, PartStress>,
    pub headroom: f64,
    pub drive: &'a DriveExpect,
    pub junction_temp_c: Option<f64>,
    pub self_heated: &'a SelfHeated,
    pub soa: Option<&'a [SoaPoint]>,
    pub rectifier: Option<&'a RectifierExpect>,
}

fn check(
    name: &str,
    verdict: Verdict,
    value: f64,
    limit: f64,
    unit: &str,
    detail: String,
) -> Check {
    Check {
        name: name.into(),
        verdict,
        value,
        limit,
        margin: limit_margin(name, value, limit),
        unit: unit.into(),
        detail,
    }
}

/// Margin: positive is inside. Upper limits (dissipation, temperature) count down.
fn limit_margin(name: &str, value: f64, limit: f64) -> f64 {
    if name.starts_with("dissipation_")
        || name == "junction_temperature"
        || name == "thermal_runaway"
        || name == "safe_operating_area"
        || name == "reservoir_ripple_current"
        || name == "rectifier_current"
        || name == "rectifier_surge"
    {
        limit - value
    } else {
        value - limit
    }
}

/// Ok at or above `need + margin`, marginal at or above `need`, else fail.
fn at_least(value: f64, need: f64, margin: f64) -> Verdict {
    if value >= need + margin {
        Verdict::Ok
    } else if value >= need {
        Verdict::Marginal
    } else {
        Verdict::Fail
    }
}

/// Every check of a design, in the order they are reported.
pub fn checks(d: &Design, j: &Judged) -> Vec<Check> {
    let rules = &d.rules;
    let max_load = d.load.max_current_a;
    let mut out = Vec::new();
    out.push(check(
        "limit_above_rated_load",
        if j.limit_min >= max_load {
            Verdict::Ok
        } else {
            Verdict::Fail
        },
        j.limit_min,
        max_load,
        "A",
        format!(
            "the lowest worst-case limit must stay above the rated load current (nominal limit {:.3} A); a unit at that corner cannot deliver its rating",
            j.limit_nominal
        ),
    ));
    for (name, s) in j.dissipation {
        let (Some(rating), Some(allowed)) = (s.rating_watts, s.allowed_watts) else {
            continue;
        };
        let verdict = if s.watts <= allowed {
            Verdict::Ok
        } else if s.watts <= rating {
            Verdict::Marginal
        } else {
            Verdict::Fail
        };
        out.push(check(
            &format!("dissipation_{name}"),
            verdict,
            s.watts,
            allowed,
            "W",
            format!("{name} within its derated rating ({rating} W rated)"),
        ));
    }
    let need = d.pass.vce_min_v;
    out.push(check(
        "headroom",
        at_least(j.headroom, need, rules.headroom_margin_v),
        j.headroom,
        need,
        "V",
        "lowest input minus highest output minus sense drop must leave the pass device's minimum V_CE".into(),
    ));
    if let (Some(a), Some(vce)) = (&d.aux, j.drive.aux_vce_at_lowest_input_v) {
        out.push(check(
            "aux_rail_dropout",
            at_least(vce, a.vce_sat_v, rules.headroom_margin_v),
            vce,
            a.vce_sat_v,
            "V",
            format!(
                "aux transistor V_CE at the lowest input: input less {:.0} ohm x {:.3} A less the {} V rail must stay above its saturation; below it the rail sags to {:.2} V",
                j.drive.collector_ohms.unwrap_or(0.0),
                a.current_a,
                a.volts,
                j.drive.aux_rail_at_lowest_input_v.unwrap_or(a.volts)
            ),
        ));
    }
    if let Some(h) = j.drive.drive_headroom_v {
        out.push(check(
            "drive_headroom",
            at_least(h, 0.0, rules.headroom_margin_v),
            h,
            0.0,
            "V",
            "aux rail at the lowest input, less the amplifier's swing loss, must reach the highest output plus sense drop plus pass junctions".into(),
        ));
    }
    if let (Some(amp), Some(rated), Some(at_limit)) = (
        j.drive.amplifier_output_a,
        j.drive.base_drive_at_rated_a,
        j.drive.base_drive_at_limit_a,
    ) {
        let verdict = if amp >= at_limit {
            Verdict::Ok
        } else if amp >= rated {
            Verdict::Marginal
        } else {
            Verdict::Fail
        };
        out.push(check(
            "drive_current",
            verdict,
            amp,
            rated,
            "A",
            format!(
                "the amplifier's output current must drive the rated load through the stage's current gain (needs {:.4} A; {:.4} A to reach the highest settled limit, else the amplifier limits before the clamp); at the limit the clamp sinks {:.4} A",
                rated,
                at_limit,
                j.drive.clamp_sink_a.unwrap_or(0.0)
            ),
        ));
    }
    if let Some(r) = j.rectifier {
        let inp = &d.input;
        if let Some(rating) = inp.reservoir_ripple_rating_a {
            out.push(check(
                "reservoir_ripple_current",
                if r.ripple_current_a <= rating {
                    Verdict::Ok
                } else {
                    Verdict::Fail
                },
                r.ripple_current_a,
                rating,
                "A",
                format!(
                    "the reservoir's RMS ripple current at rated load (high line, largest capacitance; {:.0} degree conduction, {:.2} A peaks) within its rating",
                    r.conduction_angle_deg, r.peak_current_a
                ),
            ));
        }
        if let Some(rating) = inp.rectifier_rating_a {
            let v = r.average_current_a;
            out.push(check(
                "rectifier_current",
                if v <= rating * rules.semiconductor_derating {
                    Verdict::Ok
                } else if v <= rating {
                    Verdict::Marginal
                } else {
                    Verdict::Fail
                },
                v,
                rating * rules.semiconductor_derating,
                "A",
                format!(
                    "the bridge's average current within its derated rating ({rating} A rated; it dissipates {:.2} W)",
                    r.dissipation_w
                ),
            ));
        }
        if let (Some(rating), Some(surge)) = (inp.rectifier_surge_rating_a, r.surge_current_a) {
            out.push(check(
                "rectifier_surge",
                if surge <= rating {
                    Verdict::Ok
                } else {
                    Verdict::Fail
                },
                surge,
                rating,
                "A",
                "switch-on surge into the empty reservoir (no-load peak over the winding resistance from the stated regulation) within the bridge's I_FSM".into(),
            ));
        }
    }
    if let Some(points) = j.soa {
        // The point using the largest share of what the derated SOA line allows.
        let worst = points.iter().max_by(|a, b| {
            let r = |p: &SoaPoint| p.current_a / p.allowed_a.max(1e-12);
            r(a).total_cmp(&r(b))
        });
        if let Some(w) = worst {
            let verdict = if w.current_a <= w.allowed_a * rules.semiconductor_derating {
                Verdict::Ok
            } else if w.current_a <= w.allowed_a {
                Verdict::Marginal
            } else {
                Verdict::Fail
            };
            out.push(check(
                "safe_operating_area",
                verdict,
                w.current_a,
                w.allowed_a,
                "A",
                format!(
                    "{}: {:.3} A at V_CE {:.1} V against the DC SOA line derated to its {:.0} degC case",
                    w.condition, w.current_a, w.vce, w.case_c
                ),
            ));
        }
    }
    let p = &d.pass;
    let tj_target = p.tj_max_c - rules.tj_margin_c;
    let sh = j.self_heated;
    if let Some(tj) = j.junction_temp_c {
        let verdict = if tj <= tj_target {
            Verdict::Ok
        } else if tj <= p.tj_max_c {
            Verdict::Marginal
        } else {
            Verdict::Fail
        };
        out.push(check(
            "junction_temperature",
            verdict,
            tj,
            tj_target,
            "degC",
            format!(
                "pass device T_j, settled (clamp and heating solved together), at the hottest corner ({:.0} degC ambient, input {:.2} V) within T_j max {} degC less a {} degC margin",
                sh.worst.ambient_c, sh.worst.input_v, p.tj_max_c, rules.tj_margin_c
            ),
        ));
    }
    let w = &sh.worst;
    out.push(check(
        "thermal_runaway",
        if sh.runaway {
            Verdict::Fail
        } else {
            Verdict::Ok
        },
        w.pass_junction_c,
        p.tj_max_c,
        "degC",
        if !sh.runaway {
            "a stable operating point below T_j max at every corner (clamp and heating solved together)".into()
        } else if w.settled && !w.below_tj_max {
            format!(
                "thermal runaway: no stable point below T_j max {} degC at the hottest corner ({:.0} degC ambient); the heating settles only at {:.0} degC",
                p.tj_max_c, w.ambient_c, w.pass_junction_c
            )
        } else {
            format!(
                "thermal runaway: the heating never settles at the hottest corner ({:.0} degC ambient): the limit rises faster with T_j than the heatsink can shed it",
                w.ambient_c
            )
        },
    ));
    out
}
