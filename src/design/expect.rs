//! The expectation of a design: nominal values with worst-case and Monte Carlo bands for the
//! output range, clamp threshold, limit knee and short-circuit current; the dissipation of every
//! stressed part against its derated rating; input headroom; pass-device junction temperature
//! and the largest heatsink that keeps it in bounds; and a verdict for each check.
//! Pure: a [`Design`] in, an [`Expectation`] out.

use super::file::{Clamp, Design, Resistor};
use super::model::{
    evaluate, is_adjustable, limit_current_at, pass_dissipation, sense_voltage, vi_curve, Params,
    PassStress,
};
use super::tolerance::{for_each_corner, for_each_sample, stats, Band, Interval};
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

/// Output voltage range and the evaluated setting.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct VoutExpect {
    /// Nominal lowest and highest output.
    pub min: f64,
    pub max: f64,
    /// Nominal output at the evaluated setting.
    pub setting: f64,
    pub adjustable: bool,
    pub min_band: Band,
    pub max_band: Band,
    pub setting_band: Band,
}

/// Input voltage extremes.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct InputExpect {
    /// Nominal no-load input.
    pub nominal_v: f64,
    /// Highest input: high line, no load.
    pub max_v: f64,
    /// Lowest input: low line, full load, bottom of the ripple.
    pub min_v: f64,
    /// Largest peak-to-peak ripple at full load (I / (2 f C)).
    pub ripple_v: f64,
}

/// Pass-device thermal result.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ThermalExpect {
    /// theta_jc + theta_cs + theta_sa, when the heatsink is given.
    pub theta_total: Option<f64>,
    /// Largest sink-to-ambient thermal resistance that keeps T_j at T_j max minus the margin.
    pub max_theta_sa: f64,
    /// Limit current with the pass device at its worst-case junction temperature (the clamp's
    /// drift with self-heating; a diode string's limit rises as the pass junctions heat).
    pub hot_limit_current: Option<f64>,
}

/// Everything the design model expects of a unit built to this design.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Expectation {
    pub design_name: String,
    pub clamp: Clamp,
    pub vout: VoutExpect,
    pub sense_voltage: Band,
    pub limit_current: Band,
    pub short_circuit_current: Band,
    /// I_sc / I_knee, nominal (1.0 for a sharp clamp).
    pub foldback_ratio: f64,
    pub input: InputExpect,
    pub dissipation: BTreeMap<String, PartStress>,
    /// Lowest input minus highest output minus sense drop at full load.
    pub headroom_volts: f64,
    /// Worst-case pass-device junction temperature (null without a heatsink value).
    pub junction_temp_c: Option<f64>,
    pub thermal: ThermalExpect,
    pub checks: Vec<Check>,
    /// Nominal expected V-I curve, (amperes, volts) pairs.
    pub curve: Vec<(f64, f64)>,
    /// Curves through the worst-case lowest and highest limits (the band's edges).
    pub curve_low: Vec<(f64, f64)>,
    pub curve_high: Vec<(f64, f64)>,
    pub monte_carlo_samples: usize,
    pub seed: u64,
}

impl Expectation {
    /// The worst verdict over all checks.
    pub fn verdict(&self) -> Verdict {
        self.checks
            .iter()
            .map(|c| c.verdict)
            .max()
            .unwrap_or(Verdict::Ok)
    }
}

/// Standard resistor power ratings in watts (common catalogue steps; common practice).
pub const STANDARD_POWER_RATINGS: [f64; 14] = [
    0.125, 0.25, 0.5, 0.6, 1.0, 2.0, 3.0, 5.0, 7.0, 10.0, 15.0, 25.0, 50.0, 100.0,
];

/// Smallest standard rating that holds `watts` within `derating` (None above 100 W).
pub fn suggest_rating(watts: f64, derating: f64) -> Option<f64> {
    STANDARD_POWER_RATINGS
        .iter()
        .copied()
        .find(|r| watts <= r * derating + 1e-12)
}

#[derive(Default)]
struct Collect {
    vout_min: Vec<f64>,
    vout_max: Vec<f64>,
    vout_set: Vec<f64>,
    sense: Vec<f64>,
    limit: Vec<f64>,
    sc: Vec<f64>,
}

fn band(nominal: f64, wc: Interval, values: &mut [f64]) -> Band {
    let monte_carlo = stats(values);
    Band {
        nominal,
        worst_case: wc,
        monte_carlo,
    }
}

/// Compute the expectation with the design's own Monte Carlo settings.
pub fn expect(d: &Design) -> Expectation {
    expect_with(d, d.rules.monte_carlo_samples, d.rules.seed)
}

/// Compute the expectation with `samples` Monte Carlo draws from `seed`.
pub fn expect_with(d: &Design, samples: usize, seed: u64) -> Expectation {
    let nominal_params = Params::nominal(d);
    let nom = evaluate(d, &nominal_params);

    // Worst case over all corners.
    let mut wc_vmin = Interval::point(nom.vout_min);
    let mut wc_vmax = Interval::point(nom.vout_max);
    let mut wc_vset = Interval::point(nom.vout_set);
    let mut wc_sense = Interval::point(nom.sense_v);
    let mut wc_lim = Interval::point(nom.limit_current);
    let mut wc_sc = Interval::point(nom.short_circuit_current);
    let mut vin_max = nom.vin_no_load;
    let mut vin_min = nom.vin_trough;
    let mut ripple = nom.ripple_v;
    let mut pass_w = pass_dissipation(d, &nominal_params, &nom);
    let mut sense_w =
        nom.limit_current.max(nom.short_circuit_current).powi(2) * nominal_params.r_sense;
    let mut headroom = f64::INFINITY;
    let mut corner_low: Option<(f64, Params)> = None;
    let mut corner_high: Option<(f64, Params)> = None;
    let max_load = d.load.max_current_a;
    for_each_corner(d, |p| {
        let pt = evaluate(d, p);
        wc_vmin.include(pt.vout_min);
        wc_vmax.include(pt.vout_max);
        wc_vset.include(pt.vout_set);
        wc_sense.include(pt.sense_v);
        wc_lim.include(pt.limit_current);
        wc_sc.include(pt.short_circuit_current);
        vin_max = vin_max.max(pt.vin_no_load);
        vin_min = vin_min.min(pt.vin_trough);
        ripple = ripple.max(pt.ripple_v);
        let pw = pass_dissipation(d, p, &pt);
        if pw.0 > pass_w.0 {
            pass_w = pw;
        }
        sense_w = sense_w.max(pt.limit_current.max(pt.short_circuit_current).powi(2) * p.r_sense);
        headroom =
            headroom.min(pt.vin_trough - pt.vout_max - max_load.min(pt.limit_current) * p.r_sense);
        if corner_low
            .as_ref()
            .is_none_or(|(v, _)| pt.limit_current < *v)
        {
            corner_low = Some((pt.limit_current, p.clone()));
        }
        if corner_high
            .as_ref()
            .is_none_or(|(v, _)| pt.limit_current > *v)
        {
            corner_high = Some((pt.limit_current, p.clone()));
        }
    });

    // Monte Carlo.
    let mut c = Collect::default();
    for_each_sample(d, samples, seed, |p| {
        let pt = evaluate(d, p);
        c.vout_min.push(pt.vout_min);
        c.vout_max.push(pt.vout_max);
        c.vout_set.push(pt.vout_set);
        c.sense.push(pt.sense_v);
        c.limit.push(pt.limit_current);
        c.sc.push(pt.short_circuit_current);
    });

    let vout = VoutExpect {
        min: nom.vout_min,
        max: nom.vout_max,
        setting: nom.vout_set,
        adjustable: is_adjustable(d),
        min_band: band(nom.vout_min, wc_vmin, &mut c.vout_min),
        max_band: band(nom.vout_max, wc_vmax, &mut c.vout_max),
        setting_band: band(nom.vout_set, wc_vset, &mut c.vout_set),
    };
    let limit_current = band(nom.limit_current, wc_lim, &mut c.limit);
    let short_circuit_current = band(nom.short_circuit_current, wc_sc, &mut c.sc);
    let sense_voltage_band = band(nom.sense_v, wc_sense, &mut c.sense);

    // Dissipation.
    let rules = &d.rules;
    let mut dissipation = BTreeMap::new();
    let resistor_stress = |r: &Resistor, watts: f64, condition: String| PartStress {
        watts,
        rating_watts: r.rating_w,
        allowed_watts: r.rating_w.map(|w| w * rules.resistor_derating),
        suggested_rating_watts: suggest_rating(watts, rules.resistor_derating),
        condition,
    };
    dissipation.insert(
        "sense_resistor".to_string(),
        resistor_stress(
            &d.limit.sense,
            sense_w,
            "at the highest worst-case limit or short-circuit current".to_string(),
        ),
    );
    dissipation.insert(
        "pass_device".to_string(),
        PartStress {
            watts: pass_w.0,
            rating_watts: Some(d.pass.power_rating_w),
            allowed_watts: Some(d.pass.power_rating_w * rules.semiconductor_derating),
            suggested_rating_watts: None,
            condition: match pass_w.1 {
                PassStress::Limit => format!(
                    "on the limit line at {:.3} A with the input at its highest ({:.2} V)",
                    pass_w.2, vin_max
                ),
                PassStress::FullLoadLowOutput => format!(
                    "full load {:.3} A at the lowest output with the input at its highest ({:.2} V)",
                    pass_w.2, vin_max
                ),
            },
        },
    );
    {
        let t = &d.feedback.top;
        let b = &d.feedback.bottom;
        let i_fb = wc_vmax.max
            / (t.ohms * (1.0 - t.tolerance_pct / 100.0) + b.ohms * (1.0 - b.tolerance_pct / 100.0));
        dissipation.insert(
            "feedback_top".to_string(),
            resistor_stress(
                t,
                i_fb * i_fb * t.ohms * (1.0 + t.tolerance_pct / 100.0),
                "at the highest output".to_string(),
            ),
        );
        dissipation.insert(
            "feedback_bottom".to_string(),
            resistor_stress(
                b,
                i_fb * i_fb * b.ohms * (1.0 + b.tolerance_pct / 100.0),
                "at the highest output".to_string(),
            ),
        );
    }
    let mut drive_headroom = None;
    if let Some(a) = &d.aux {
        let drop_nom = (nom.vin_no_load - a.volts).max(0.0);
        let drop_max = (vin_max - a.volts).max(0.0);
        let r_c = a.collector_share * drop_nom / a.current_a;
        let w_r = a.current_a * a.current_a * r_c;
        let w_t = ((drop_max - a.current_a * r_c) * a.current_a).max(0.0);
        dissipation.insert(
            "aux_transistor".to_string(),
            PartStress {
                watts: w_t,
                rating_watts: Some(a.transistor_rating_w),
                allowed_watts: Some(a.transistor_rating_w * rules.semiconductor_derating),
                suggested_rating_watts: None,
                condition: format!(
                    "aux rail {:.3} A with the input at its highest ({:.2} V)",
                    a.current_a, vin_max
                ),
            },
        );
        if a.collector_share > 0.0 {
            dissipation.insert(
                "aux_collector_resistor".to_string(),
                PartStress {
                    watts: w_r,
                    rating_watts: a.collector_resistor_rating_w,
                    allowed_watts: a
                        .collector_resistor_rating_w
                        .map(|w| w * rules.resistor_derating),
                    suggested_rating_watts: suggest_rating(w_r, rules.resistor_derating),
                    condition: format!(
                        "{:.0} ohm taking {:.0} % of the nominal drop",
                        r_c,
                        a.collector_share * 100.0
                    ),
                },
            );
        }
        // The amplifier must drive the pass stage's base above the highest output plus the
        // sense drop plus the pass junctions.
        let need = wc_vmax.max
            + wc_lim.max.min(max_load.max(0.0)) * d.limit.sense.ohms
            + d.pass.stage.junctions() as f64 * (d.pass.vbe_v + d.pass.vbe_spread_v);
        drive_headroom = Some(a.volts - a.amplifier_swing_loss_v - need);
    }

    // Thermal.
    let p = &d.pass;
    let ta = d.environment.ambient_max_c;
    let theta_fixed = p.theta_jc + p.theta_cs;
    let tj_target = p.tj_max_c - rules.tj_margin_c;
    let max_theta_sa = if pass_w.0 > 0.0 {
        (tj_target - ta) / pass_w.0 - theta_fixed
    } else {
        f64::INFINITY
    };
    let theta_total = p.theta_sa.map(|s| theta_fixed + s);
    let junction_temp_c = theta_total.map(|th| ta + pass_w.0 * th);
    let hot_limit_current = junction_temp_c.map(|tj| {
        let mut hp = nominal_params.clone();
        hp.pass_junction_c = tj;
        limit_current_at(d, &hp, nom.vout_set)
    });

    // Checks.
    let mut checks = Vec::new();
    {
        let margin = wc_lim.min - max_load;
        let verdict = if wc_lim.min >= max_load {
            Verdict::Ok
        } else if nom.limit_current >= max_load {
            Verdict::Marginal
        } else {
            Verdict::Fail
        };
        checks.push(Check {
            name: "limit_above_rated_load".into(),
            verdict,
            value: wc_lim.min,
            limit: max_load,
            margin,
            unit: "A".into(),
            detail: "the lowest worst-case limit must stay above the rated load current".into(),
        });
    }
    for (name, s) in &dissipation {
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
        checks.push(Check {
            name: format!("dissipation_{name}"),
            verdict,
            value: s.watts,
            limit: allowed,
            margin: allowed - s.watts,
            unit: "W".into(),
            detail: format!("{name} within its derated rating ({} W rated)", rating),
        });
    }
    {
        let need = p.vce_min_v;
        let verdict = if headroom >= need + rules.headroom_margin_v {
            Verdict::Ok
        } else if headroom >= need {
            Verdict::Marginal
        } else {
            Verdict::Fail
        };
        checks.push(Check {
            name: "headroom".into(),
            verdict,
            value: headroom,
            limit: need,
            margin: headroom - need,
            unit: "V".into(),
            detail: "lowest input minus highest output minus sense drop must leave the pass device's minimum V_CE".into(),
        });
    }
    if let Some(h) = drive_headroom {
        let verdict = if h >= rules.headroom_margin_v {
            Verdict::Ok
        } else if h >= 0.0 {
            Verdict::Marginal
        } else {
            Verdict::Fail
        };
        checks.push(Check {
            name: "drive_headroom".into(),
            verdict,
            value: h,
            limit: 0.0,
            margin: h,
            unit: "V".into(),
            detail: "aux rail minus amplifier swing loss must reach the highest output plus sense drop plus pass junctions".into(),
        });
    }
    if let Some(tj) = junction_temp_c {
        let verdict = if tj <= tj_target {
            Verdict::Ok
        } else if tj <= p.tj_max_c {
            Verdict::Marginal
        } else {
            Verdict::Fail
        };
        checks.push(Check {
            name: "junction_temperature".into(),
            verdict,
            value: tj,
            limit: tj_target,
            margin: tj_target - tj,
            unit: "degC".into(),
            detail: format!(
                "pass device T_j at the highest ambient ({ta} degC) within T_j max {} degC less a {} degC margin",
                p.tj_max_c, rules.tj_margin_c
            ),
        });
    }

    let curve = vi_curve(d, &nominal_params);
    let curve_low = corner_low
        .map(|(_, p)| vi_curve(d, &p))
        .unwrap_or_else(|| curve.clone());
    let curve_high = corner_high
        .map(|(_, p)| vi_curve(d, &p))
        .unwrap_or_else(|| curve.clone());
    let foldback_ratio = if nom.limit_current > 0.0 {
        nom.short_circuit_current / nom.limit_current
    } else {
        f64::NAN
    };

    Expectation {
        design_name: d.design.name.clone(),
        clamp: d.limit.clamp,
        vout,
        sense_voltage: sense_voltage_band,
        limit_current,
        short_circuit_current,
        foldback_ratio,
        input: InputExpect {
            nominal_v: evaluate(d, &nominal_params).vin_no_load,
            max_v: vin_max,
            min_v: vin_min,
            ripple_v: ripple,
        },
        dissipation,
        headroom_volts: headroom,
        junction_temp_c,
        thermal: ThermalExpect {
            theta_total,
            max_theta_sa,
            hot_limit_current,
        },
        checks,
        curve,
        curve_low,
        curve_high,
        monte_carlo_samples: samples,
        seed,
    }
}

/// Clamp threshold of the nominal unit at a given pass-device junction temperature (used to
/// explain a limit that drifts as the pass device heats).
pub fn sense_voltage_at_pass_temp(d: &Design, pass_junction_c: f64) -> f64 {
    let mut p = Params::nominal(d);
    p.pass_junction_c = pass_junction_c;
    sense_voltage(d, &p)
}
