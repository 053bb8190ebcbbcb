//! The expectation of a design: nominal values with worst-case and Monte Carlo bands for the
//! output range, clamp threshold, limit knee and short-circuit current; the dissipation of every
//! stressed part against its derated rating; input headroom; pass-device junction temperature
//! and the largest heatsink that keeps it in bounds; and a verdict for each check.
//! Pure: a [`Design`] in, an [`Expectation`] out.

use super::file::{Clamp, Design, Resistor};
use super::heating::{self, running_short_current, Condition, Solved};
pub use super::judge::{Check, PartStress, Verdict};
use super::model::{
    evaluate, is_adjustable, limit_current_at, sense_voltage, vi_curve, Params, PassStress,
};
use super::rectifier::RectifierExpect;
use super::soa::{self, Candidate, SoaPoint};
use super::stress::{
    aux_and_drive, feedback_stress, DriveExpect, DriveInputs, HeatCollect, SelfHeated,
};
use super::tolerance::{
    for_each_corner, for_each_corner_in, for_each_sample, for_each_sample_in, stats, Band,
    Envelope, Interval,
};
use serde::{Deserialize, Serialize};
use std::collections::BTreeMap;

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
    /// Full wave: transformer, bridge and reservoir at rated load (null for a DC input).
    pub rectifier: Option<RectifierExpect>,
}

/// Pass-device thermal result.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ThermalExpect {
    /// theta_jc + theta_cs + theta_sa, when the heatsink is given.
    pub theta_total: Option<f64>,
    /// Largest sink-to-ambient thermal resistance that keeps T_j at T_j max minus the margin.
    pub max_theta_sa: f64,
    /// Settled knee current of the nominal unit, clamp and thermal relations solved together
    /// (a diode string's limit rises as the pass junctions heat).
    pub hot_limit_current: Option<f64>,
    /// The self-heated operating points (short, knee, hardest point) and their assumptions.
    pub self_heated: SelfHeated,
}

/// Bands of the quantities a bench measures, over part tolerances only, at the design's
/// nominal ambient and input: what one unit as built may show on a bench at room temperature.
/// The bench's judgement uses these; [`Expectation`]'s own bands are the operating envelope
/// (ambient range and line tolerance too).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct AsBuiltBands {
    pub ambient_c: f64,
    pub vout: Band,
    pub sense_voltage: Band,
    /// The knee of a cold unit (every junction at the ambient).
    pub limit_current: Band,
    /// The knee from a cold unit to its settled self-heated knee (the pass junction at the
    /// temperature its knee dissipation settles at, at most T_j max): what a bench that does
    /// not read the case temperature may find. Equal to the cold band when the clamp does not
    /// follow the pass device's heating.
    pub limit_current_heated: Band,
    /// Into a short applied to a cold or a running unit (two values per unit).
    pub short_circuit_current: Band,
    /// Into a short applied to a cold unit.
    pub short_circuit_current_cold: Band,
    /// The pass junction temperature of the nominal unit's settled knee, capped at T_j max
    /// (degC): where [`Self::limit_current_heated`] reaches.
    pub knee_settled_junction_c: f64,
}

/// Change of the nominal unit's limit current at output `vout` when its pass junctions go from
/// the ambient to `pass_c` and the clamp parts to `clamp_c`: the junction law applied to the
/// clamp relation (V(T) = V(25 degC) + tc (T - 25); textbook).
pub fn limit_shift(d: &Design, vout: f64, pass_c: f64, clamp_c: f64) -> f64 {
    let cold = Params::nominal(d);
    let mut hot = cold.clone();
    hot.pass_junction_c = pass_c;
    hot.clamp_junction_c = clamp_c;
    limit_current_at(d, &hot, vout) - limit_current_at(d, &cold, vout)
}

/// The smallest and largest [`limit_shift`] with the pass junction anywhere in `pass` and the
/// clamp anywhere in `clamp` (the shift is linear in each temperature, so its extremes lie at
/// the corners).
pub fn limit_shift_range(d: &Design, vout: f64, pass: (f64, f64), clamp: (f64, f64)) -> (f64, f64) {
    let mut lo = f64::INFINITY;
    let mut hi = f64::NEG_INFINITY;
    for p in [pass.0, pass.1] {
        for c in [clamp.0, clamp.1] {
            let s = limit_shift(d, vout, p, c);
            lo = lo.min(s);
            hi = hi.max(s);
        }
    }
    (lo, hi)
}

/// Junction temperatures of a settled knee, the pass junction capped at T_j max (a unit
/// hotter than that does not stay on the bench), the clamp scaled with it.
fn settled_knee_params(d: &Design, p: &Params) -> Params {
    let s = heating::solve(d, p, Condition::Knee);
    let cap = d.pass.tj_max_c;
    let mut h = p.clone();
    let rise = s.pass_junction_c - p.ambient_c;
    let scale = if rise > 0.0 && s.pass_junction_c > cap {
        (cap - p.ambient_c).max(0.0) / rise
    } else {
        1.0
    };
    h.pass_junction_c = p.ambient_c + rise * scale;
    h.clamp_junction_c = p.ambient_c + (s.clamp_junction_c - p.ambient_c) * scale;
    h
}

/// As-built bands: worst case over the part corners and Monte Carlo over part draws.
pub fn as_built_bands(d: &Design, samples: usize, seed: u64) -> AsBuiltBands {
    let nominal = Params::nominal(d);
    let nom = evaluate(d, &nominal);
    let point = |p: &Params| {
        let pt = evaluate(d, p);
        let cold_short = pt.short_circuit_current;
        (pt, cold_short, running_short_current(d, p))
    };
    let hot_nominal = settled_knee_params(d, &nominal);
    let mut wc = [
        Interval::point(nom.vout_set),
        Interval::point(nom.sense_v),
        Interval::point(nom.limit_current),
        Interval::point(nom.short_circuit_current),
        Interval::point(nom.limit_current),
        Interval::point(nom.short_circuit_current),
    ];
    for_each_corner_in(d, Envelope::AsBuilt, |p| {
        let (pt, cold_short, running) = point(p);
        let hot = limit_current_at(d, &settled_knee_params(d, p), pt.vout_set);
        for (w, v) in wc.iter_mut().zip([
            pt.vout_set,
            pt.sense_v,
            pt.limit_current,
            cold_short,
            pt.limit_current,
            cold_short,
        ]) {
            w.include(v);
        }
        wc[3].include(running);
        wc[4].include(hot);
    });
    let mut c = Collect::default();
    let mut heated = Vec::with_capacity(2 * samples);
    let mut sc_cold = Vec::with_capacity(samples);
    for_each_sample_in(d, Envelope::AsBuilt, samples, seed, |p| {
        let (pt, cold_short, running) = point(p);
        c.vout_set.push(pt.vout_set);
        c.sense.push(pt.sense_v);
        c.limit.push(pt.limit_current);
        c.sc.push(cold_short);
        c.sc.push(running);
        sc_cold.push(cold_short);
        let mut h = p.clone();
        h.pass_junction_c = hot_nominal.pass_junction_c;
        h.clamp_junction_c = hot_nominal.clamp_junction_c;
        heated.push(pt.limit_current);
        heated.push(limit_current_at(d, &h, pt.vout_set));
    });
    AsBuiltBands {
        ambient_c: d.environment.ambient_c,
        vout: band(nom.vout_set, wc[0], &mut c.vout_set),
        sense_voltage: band(nom.sense_v, wc[1], &mut c.sense),
        limit_current: band(nom.limit_current, wc[2], &mut c.limit),
        limit_current_heated: band(nom.limit_current, wc[4], &mut heated),
        short_circuit_current: band(nom.short_circuit_current, wc[3], &mut c.sc),
        short_circuit_current_cold: band(nom.short_circuit_current, wc[5], &mut sc_cold),
        knee_settled_junction_c: hot_nominal.pass_junction_c,
    }
}

/// Everything the design model expects of a unit built to this design.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Expectation {
    pub design_name: String,
    pub clamp: Clamp,
    pub vout: VoutExpect,
    pub sense_voltage: Band,
    pub limit_current: Band,
    /// Into a short applied to a cold unit or to a running one (pass junction at its
    /// rated-load steady state, as a bench finds it after the earlier steps): worst case and
    /// Monte Carlo span both states (two values per drawn unit); the nominal is the cold value.
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
    /// The pass device's operating points against its derated DC safe operating area (null
    /// without `[pass.soa]` in the design).
    pub soa: Option<Vec<SoaPoint>>,
    /// Bands over part tolerances only, at nominal ambient and input (judge bench units by
    /// these); the bands above are the operating envelope.
    pub as_built: AsBuiltBands,
    /// The auxiliary rail at the lowest input and the pass stage's drive.
    pub drive: DriveExpect,
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

    // Worst case over all corners, with the self-heated points solved per corner.
    let mut wc_vmin = Interval::point(nom.vout_min);
    let mut wc_vmax = Interval::point(nom.vout_max);
    let mut wc_vset = Interval::point(nom.vout_set);
    let mut wc_sense = Interval::point(nom.sense_v);
    let mut wc_lim = Interval::point(nom.limit_current);
    let mut wc_sc = Interval::point(nom.short_circuit_current);
    let mut vin_max = nom.vin_no_load;
    let mut vin_min = nom.vin_trough;
    let mut ripple = nom.ripple_v;
    let mut headroom = f64::INFINITY;
    let mut corner_low: Option<(f64, Params)> = None;
    let mut corner_high: Option<(f64, Params)> = None;
    let mut heat = HeatCollect::new(d);
    heat.include(d, &nominal_params);
    let max_load = d.load.max_current_a;
    for_each_corner(d, |p| {
        let pt = evaluate(d, p);
        wc_vmin.include(pt.vout_min);
        wc_vmax.include(pt.vout_max);
        wc_vset.include(pt.vout_set);
        wc_sense.include(pt.sense_v);
        wc_lim.include(pt.limit_current);
        wc_sc.include(pt.short_circuit_current);
        wc_sc.include(running_short_current(d, p));
        vin_max = vin_max.max(pt.vin_no_load);
        vin_min = vin_min.min(pt.vin_trough);
        ripple = ripple.max(pt.ripple_v);
        heat.include(d, p);
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
    let (pass_pt, sense_pt) = heat.pass_and_sense();
    let self_heated = heat.finish(d, &nominal_params);
    let pass_pt = pass_pt.unwrap_or(self_heated.worst);
    let sense_pt = sense_pt.unwrap_or(self_heated.short_nominal);

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
        c.sc.push(running_short_current(d, p));
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

    // Dissipation, at the settled (self-heated) points.
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
            sense_pt.sense_watts,
            format!(
                "{:.3} A settled ({}) at {:.0} degC ambient, clamp and heating solved together",
                sense_pt.current_a,
                condition_words(sense_pt.condition),
                sense_pt.ambient_c
            ),
        ),
    );
    // The power rating holds with the case at 25 degC; it derates linearly to zero at T_j max.
    let pass_case_c = soa::case_temperature(d, pass_pt.ambient_c, pass_pt.pass_watts);
    let pass_rating = d.pass.power_rating_w * soa::case_factor(d, pass_case_c);
    dissipation.insert(
        "pass_device".to_string(),
        PartStress {
            watts: pass_pt.pass_watts,
            rating_watts: Some(pass_rating),
            allowed_watts: Some(pass_rating * rules.semiconductor_derating),
            suggested_rating_watts: None,
            condition: format!(
                "{}; rating {:.0} W derated to {:.1} W at its {:.0} degC case",
                match pass_pt.stress {
                    PassStress::Limit => format!(
                        "on the limit line at {:.3} A settled, input {:.2} V, {:.0} degC ambient",
                        pass_pt.current_a, pass_pt.input_v, pass_pt.ambient_c
                    ),
                    PassStress::FullLoadLowOutput => format!(
                        "full load {:.3} A at the lowest output, input {:.2} V, {:.0} degC ambient",
                        pass_pt.current_a, pass_pt.input_v, pass_pt.ambient_c
                    ),
                },
                d.pass.power_rating_w,
                pass_rating,
                pass_case_c
            ),
        },
    );
    let soa_points = soa::soa_points(
        d,
        &soa_candidates(d, &self_heated, &pass_pt, vin_max, wc_vmin.min),
    );
    {
        let (st, sb) = feedback_stress(d);
        for (name, r, s) in [
            ("feedback_top", &d.feedback.top, st),
            ("feedback_bottom", &d.feedback.bottom, sb),
        ] {
            let mut ps = resistor_stress(
                r,
                s.watts,
                if r.pot {
                    format!(
                        "{:.0} ohm of the potentiometer's track in use ({:.0} % of it) at {:.2} V out",
                        s.ohms_in_use,
                        s.track_share * 100.0,
                        s.output_v
                    )
                } else {
                    format!("at {:.2} V out (highest corner)", s.output_v)
                },
            );
            if r.pot {
                // The rating spreads over the whole track: the part in use carries its share.
                ps.rating_watts = r.rating_w.map(|w| w * s.track_share);
                ps.allowed_watts = ps.rating_watts.map(|w| w * rules.resistor_derating);
                ps.suggested_rating_watts =
                    suggest_rating(s.watts / s.track_share.max(1e-12), rules.resistor_derating);
            }
            dissipation.insert(name.to_string(), ps);
        }
    }
    let drive = aux_and_drive(
        d,
        &DriveInputs {
            vin_nominal: nom.vin_no_load,
            vin_min,
            vout_max: wc_vmax.max,
            rated_current: wc_lim.max.min(max_load.max(0.0)),
            limit_current_min: wc_lim.min,
            limit_current_max: self_heated
                .short_current
                .max
                .max(self_heated.knee_current.max),
        },
    );
    if let (Some(a), Some(r_c)) = (&d.aux, drive.collector_ohms) {
        let w_r = a.current_a * a.current_a * r_c;
        let w_t = ((vin_max - a.volts - a.current_a * r_c) * a.current_a).max(0.0);
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
        if r_c > 0.0 {
            dissipation.insert(
                "aux_collector_resistor".to_string(),
                PartStress {
                    watts: w_r,
                    rating_watts: a.collector_resistor_rating_w,
                    allowed_watts: a
                        .collector_resistor_rating_w
                        .map(|w| w * rules.resistor_derating),
                    suggested_rating_watts: suggest_rating(w_r, rules.resistor_derating),
                    condition: match a.collector_ohms {
                        Some(_) => format!("{r_c:.0} ohm fitted, full aux current"),
                        None => format!(
                            "{:.0} ohm taking {:.0} % of the nominal drop",
                            r_c,
                            a.collector_share * 100.0
                        ),
                    },
                },
            );
        }
    }

    // Thermal, at the settled points.
    let p = &d.pass;
    let theta_total = p.theta_sa.map(|s| p.theta_jc + p.theta_cs + s);
    let junction_temp_c = theta_total.map(|_| self_heated.worst.pass_junction_c);
    let thermal = ThermalExpect {
        theta_total,
        max_theta_sa: self_heated.max_theta_sa,
        hot_limit_current: Some(self_heated.knee_nominal.current_a),
        self_heated,
    };

    let rectifier = super::rectifier::rectifier(d);
    let checks = super::judge::checks(
        d,
        &super::judge::Judged {
            limit_min: wc_lim.min,
            limit_nominal: nom.limit_current,
            dissipation: &dissipation,
            headroom,
            drive: &drive,
            junction_temp_c,
            self_heated: &thermal.self_heated,
            soa: soa_points.as_deref(),
            rectifier: rectifier.as_ref(),
        },
    );

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
            nominal_v: nom.vin_no_load,
            max_v: vin_max,
            min_v: vin_min,
            ripple_v: ripple,
            rectifier: rectifier.clone(),
        },
        dissipation,
        headroom_volts: headroom,
        junction_temp_c,
        thermal,
        soa: soa_points,
        as_built: as_built_bands(d, samples, seed.wrapping_add(1)),
        drive,
        checks,
        curve,
        curve_low,
        curve_high,
        monte_carlo_samples: samples,
        seed,
    }
}

/// The operating points checked against the SOA: the settled shorts (nominal unit and hottest
/// corner), the hardest point, full load at the lowest output from the highest input, and for
/// foldback the nominal unit's limit line at high line.
fn soa_candidates(
    d: &Design,
    sh: &SelfHeated,
    hardest: &Solved,
    vin_max: f64,
    vout_min: f64,
) -> Vec<Candidate> {
    let vce = |s: &Solved| {
        if s.current_a > 0.0 {
            s.pass_watts / s.current_a
        } else {
            0.0
        }
    };
    let mut out = vec![
        (
            "settled short, nominal unit".to_string(),
            vce(&sh.short_nominal),
            sh.short_nominal.current_a,
            sh.short_nominal.ambient_c,
        ),
        (
            "settled short, hottest corner".to_string(),
            vce(&sh.short_worst),
            sh.short_worst.current_a,
            sh.short_worst.ambient_c,
        ),
        (
            "the hardest point".to_string(),
            vce(hardest),
            hardest.current_a,
            hardest.ambient_c,
        ),
    ];
    let rated = d.load.max_current_a;
    out.push((
        "full load at the lowest output, highest input".to_string(),
        vin_max - vout_min - rated * d.limit.sense.ohms,
        rated,
        d.environment.ambient_max_c,
    ));
    if d.limit.clamp == Clamp::Foldback {
        let mut p = Params::nominal(d);
        p.line = 1.0 + d.input.line_tolerance_pct / 100.0;
        let pt = evaluate(d, &p);
        for k in 0..=16 {
            let v = pt.vout_set * k as f64 / 16.0;
            let i = super::model::limit_current_at(d, &p, v).max(0.0);
            out.push((
                format!("foldback line at {v:.2} V, high line"),
                pt.vin_no_load - v - i * p.r_sense,
                i,
                d.environment.ambient_max_c,
            ));
        }
    }
    out
}

/// A condition in words.
pub fn condition_words(c: Condition) -> &'static str {
    match c {
        Condition::Short => "sustained short",
        Condition::Knee => "at the knee",
        Condition::Worst => "the pass device's hardest point",
    }
}

/// Clamp threshold of the nominal unit at a given pass-device junction temperature (used to
/// explain a limit that drifts as the pass device heats).
pub fn sense_voltage_at_pass_temp(d: &Design, pass_junction_c: f64) -> f64 {
    let mut p = Params::nominal(d);
    p.pass_junction_c = pass_junction_c;
    sense_voltage(d, &p)
}
