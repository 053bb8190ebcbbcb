//! Measured metrics against the design's expectation: verdicts with margins, and likely
//! causes found by fitting the design's limit model to the measurement. Pure.
use super::bands::{knee_band, observations, short_band, unmoved_basis};
use super::expectation::*;
use crate::analysis::Metrics;
use serde::{Deserialize, Serialize};

/// A check's verdict, and a record's overall outcome. A check is pass (inside the Monte
/// Carlo band), marginal (inside the worst case, outside the Monte Carlo band) or fail
/// (outside the worst case). A record is also one of those, or incomplete (did not finish,
/// stopped, or a promised metric missing) or error (the station failed); see
/// [`super::judge`]. Ordered by severity: the worst of several is their `max`.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Verdict {
    Pass,
    Marginal,
    Incomplete,
    Fail,
    Error,
}

impl Verdict {
    pub fn as_str(self) -> &'static str {
        match self {
            Verdict::Pass => "pass",
            Verdict::Marginal => "marginal",
            Verdict::Incomplete => "incomplete",
            Verdict::Fail => "fail",
            Verdict::Error => "error",
        }
    }

    /// The word for people: `PASS`, `MARGINAL`, `INCOMPLETE`, `FAIL`, `ERROR`.
    pub fn label(self) -> &'static str {
        match self {
            Verdict::Pass => "PASS",
            Verdict::Marginal => "MARGINAL",
            Verdict::Incomplete => "INCOMPLETE",
            Verdict::Fail => "FAIL",
            Verdict::Error => "ERROR",
        }
    }
}

/// One metric checked against its band.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Check {
    pub metric: String,
    pub unit: String,
    pub measured: f64,
    pub nominal: f64,
    pub worst_case: Limits,
    pub monte_carlo_band: Limits,
    pub verdict: Verdict,
    /// Distance to the nearer worst-case limit, positive inside, in the metric's unit.
    pub margin: f64,
    /// The margin as a percentage of the nominal value.
    pub margin_percent: f64,
    /// (measured - nominal) / nominal * 100.
    pub deviation_percent: f64,
    /// How the value was obtained when it is not a plain measurement (for instance a bound:
    /// "at least", when the limit was not reached).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub note: Option<String>,
    /// The conditions the band was taken at (the as-built band at the design's room and input,
    /// moved to the pass junction temperature the record gives, or spanning a cold and a hot
    /// unit when it gives none).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub band_basis: Option<String>,
    /// The operating envelope's worst case (ambient range and line too), for reference: the
    /// verdict is the as-built band's.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub envelope: Option<Limits>,
}

/// Judge one value against a band.
pub fn check(metric: &str, unit: &str, measured: f64, band: &ExpectedBand) -> Check {
    let wc = band.worst_case;
    let mc = Limits {
        min: band.monte_carlo.p_low,
        max: band.monte_carlo.p_high,
    };
    let verdict = if measured < wc.min || measured > wc.max || !measured.is_finite() {
        Verdict::Fail
    } else if measured < mc.min || measured > mc.max {
        Verdict::Marginal
    } else {
        Verdict::Pass
    };
    let margin = (measured - wc.min).min(wc.max - measured);
    let pct = |x: f64| {
        if band.nominal != 0.0 {
            x / band.nominal.abs() * 100.0
        } else {
            0.0
        }
    };
    Check {
        metric: metric.to_string(),
        unit: unit.to_string(),
        measured,
        nominal: band.nominal,
        worst_case: wc,
        monte_carlo_band: mc,
        verdict,
        margin,
        margin_percent: pct(margin),
        deviation_percent: pct(measured - band.nominal),
        note: None,
        band_basis: None,
        envelope: None,
    }
}

/// The comparison of one record with a design.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Comparison {
    pub design_name: String,
    pub checks: Vec<Check>,
    /// Worst verdict of all checks (pass when nothing could be checked).
    pub verdict: Verdict,
    pub likely_causes: Vec<String>,
    /// Metrics the design specifies but the record lacks.
    pub not_measured: Vec<String>,
    /// Every check passed, but the design model fitted to all the measurements together
    /// names a wrong part (in `likely_causes`): the record is marginal.
    #[serde(default, skip_serializing_if = "std::ops::Not::not")]
    pub joint_fit_names_a_part: bool,
}

impl Comparison {
    /// Whether the checks were judged by the design's as-built bands (an expectation without
    /// them judges by the operating envelope's worst case).
    pub fn judged_as_built(&self) -> bool {
        self.checks.iter().any(|ch| ch.band_basis.is_some())
    }
}

/// Short-circuit drift over the dwell beyond which heating is named as a likely cause (5 %,
/// common practice for a bench check; the junction drop moves about 2 mV per degC).
pub const HEATING_DRIFT_PERCENT: f64 = 5.0;

/// Compare a record's metrics with the design's expectation.
pub fn compare(metrics: &Metrics, exp: &DesignExpectation) -> Comparison {
    let mut checks = Vec::new();
    let mut not_measured = Vec::new();
    let env = exp.envelope.as_ref();
    let obs = exp.design.as_deref().map(|d| observations(metrics, d));
    match metrics.no_load {
        Some(p) => {
            let mut c = check("output_voltage", "V", p.voltage, &exp.vout);
            c.envelope = env.map(|e| e.vout.worst_case);
            c.band_basis = exp.as_built.as_ref().map(|a| unmoved_basis(a.ambient_c));
            checks.push(c);
        }
        None => not_measured.push("output_voltage".to_string()),
    }
    let (knee_band, knee_basis) = knee_band(metrics, exp);
    let with_basis = |mut c: Check, basis: &Option<String>, envelope: Option<Limits>| {
        c.band_basis = basis.clone();
        c.envelope = envelope;
        c
    };
    let knee_env = env.map(|e| e.limit_current.worst_case);
    match metrics.limit_current() {
        Some(i) => checks.push(with_basis(
            check("limit_current", "A", i, &knee_band),
            &knee_basis,
            knee_env,
        )),
        None => {
            not_measured.push("limit_current".to_string());
            // The limit was not reached, but the output still regulated above the highest
            // worst-case limit: the limit is at least that high, which already fails.
            let wc_max = knee_band.worst_case.max;
            let held = metrics
                .knee
                .and_then(|k| k.highest_regulating)
                .filter(|p| p.current > wc_max);
            if let Some(p) = held {
                let mut c = with_basis(
                    check("limit_current", "A", p.current, &knee_band),
                    &knee_basis,
                    knee_env,
                );
                c.note = Some(format!(
                    "not reached: the output still regulated at {}, above the design's highest \
                     worst-case limit {}; the limit is at least that",
                    crate::quantity::eng(p.current, "A"),
                    crate::quantity::eng(wc_max, "A")
                ));
                checks.push(c);
            }
        }
    }
    if let Some((band, basis)) = short_band(metrics, exp, obs.as_ref()) {
        match &metrics.short_circuit {
            Some(sc) => checks.push(with_basis(
                check("short_circuit_current", "A", sc.start_current, &band),
                &basis,
                env.map(|e| e.short_circuit_current.worst_case),
            )),
            None => not_measured.push("short_circuit_current".to_string()),
        }
    }
    if let Some(c) = metrics
        .short_circuit
        .and_then(|sc| recovery_check(&sc, exp))
    {
        checks.push(c);
    }
    let verdict = checks
        .iter()
        .map(|c| c.verdict)
        .max()
        .unwrap_or(Verdict::Pass);
    // A run stopped at its pre-flight check judged nothing, but an unloaded output outside
    // the design's band is still worth a diagnosis (which part would make the unit read so).
    let preflight_off = checks.is_empty()
        && metrics.preflight.is_some_and(|p| {
            let wc = exp.vout.worst_case;
            !(p.voltage >= wc.min && p.voltage <= wc.max)
        });
    let off = preflight_off || checks.iter().any(|c| c.verdict != Verdict::Pass);
    let mut verdict = verdict;
    let mut joint_fit_names_a_part = false;
    let likely_causes = match (exp.design.as_deref(), obs.as_ref()) {
        (Some(d), Some(obs)) if off || !checks.is_empty() => {
            let diag = super::diagnose(d, exp, obs);
            // Every check inside its band, each band as wide as the junction's uncertain
            // temperature allows: fitted together, the measurements may still say that one
            // part is wrong (a knee and a short that each fit a hot good unit, but not at one
            // set of parts). Then the record is marginal, with the part named.
            if !off && !super::diagnose::named(&diag).is_empty() {
                joint_fit_names_a_part = true;
                verdict = verdict.max(Verdict::Marginal);
            }
            if off || joint_fit_names_a_part {
                super::diagnosis_lines(&diag)
            } else {
                Vec::new()
            }
        }
        (Some(_), _) => Vec::new(),
        (None, _) => likely_causes(metrics, exp, &checks),
    };
    Comparison {
        design_name: exp.design_name.clone(),
        checks,
        verdict,
        likely_causes,
        not_measured,
        joint_fit_names_a_part,
    }
}

/// Limits a plan sets on metrics the design gives no band for.
#[derive(Debug, Clone, Copy, PartialEq, Default, Serialize, Deserialize)]
pub struct MetricLimits {
    /// Largest |line regulation| that passes, percent.
    pub line_regulation_percent: Option<f64>,
    /// Largest |soak drift| that passes, percent.
    pub soak_drift_percent: Option<f64>,
    /// Largest temperature rise over the soak that passes, degC.
    pub soak_rise_c: Option<f64>,
}

/// A value checked against a symmetric limit `|x| <= max` (no marginal band).
fn limit_check(metric: &str, unit: &str, measured: f64, max: f64, note: String) -> Check {
    let band = ExpectedBand {
        nominal: 0.0,
        worst_case: Limits { min: -max, max },
        monte_carlo: MonteCarlo {
            samples: 0,
            mean: 0.0,
            sigma: 0.0,
            p_low: -max,
            p_high: max,
        },
    };
    let mut c = check(metric, unit, measured, &band);
    c.note = Some(note);
    c
}

/// Checks of the metrics a plan limits (line regulation, soak drift, temperature rise), for
/// those that were measured; a limited metric that is missing is the promised-metric rule's.
pub fn plan_limit_checks(m: &Metrics, l: &MetricLimits) -> Vec<Check> {
    let mut v = Vec::new();
    if let (Some(max), Some(lr)) = (l.line_regulation_percent, m.line_regulation) {
        v.push(limit_check(
            "line_regulation",
            "%",
            lr.percent,
            max,
            format!(
                "output change over the line sweep {:.1} V .. {:.1} V; the plan allows {max} %",
                lr.input_low, lr.input_high
            ),
        ));
    }
    if let (Some(max), Some(s)) = (l.soak_drift_percent, m.soak) {
        v.push(limit_check(
            "soak_drift",
            "%",
            s.drift_percent,
            max,
            format!(
                "output drift over the {:.0} s soak; the plan allows {max} %",
                s.duration_s
            ),
        ));
    }
    if let (Some(max), Some(rise)) = (l.soak_rise_c, m.soak.and_then(|s| s.temperature_rise)) {
        v.push(limit_check(
            "soak_temperature_rise",
            "degC",
            rise,
            max,
            format!("temperature rise over the soak; the plan allows {max} degC"),
        ));
    }
    v
}

/// The output after the short was removed against the voltage it had to reach (the knee
/// threshold): pass when it got there, fail when it did not (no marginal band).
fn recovery_check(sc: &crate::analysis::ShortCircuit, exp: &DesignExpectation) -> Option<Check> {
    let (v, thr) = (sc.recovery_voltage?, sc.recovery_threshold?);
    let band = ExpectedBand {
        nominal: exp.vout.nominal,
        worst_case: Limits {
            min: thr,
            max: exp.vout.worst_case.max.max(thr),
        },
        monte_carlo: MonteCarlo {
            samples: 0,
            mean: exp.vout.nominal,
            sigma: 0.0,
            p_low: thr,
            p_high: exp.vout.worst_case.max.max(thr),
        },
    };
    let mut c = check("recovery_voltage", "V", v, &band);
    // Above the worst-case output is not this check's business (output_voltage judges it).
    if v > band.worst_case.max {
        c.verdict = Verdict::Pass;
    }
    c.note = Some(format!(
        "after the short was removed; it must reach {}",
        crate::quantity::eng(thr, "V")
    ));
    Some(c)
}

/// The preferred value nearest to `value` (by ratio), from E12 when one lies within
/// `tolerance`, otherwise from E24 (IEC 60063 tables in `design::eseries`).
pub fn nearest_preferred(value: f64, tolerance: f64) -> Option<f64> {
    preferred_in_range(value, value, tolerance)
}

/// A preferred value inside `[lo (1 - tol), hi (1 + tol)]`: from E12 when any lies there,
/// otherwise from E24; among several, the one nearest (by ratio) to the range's geometric
/// middle.
pub fn preferred_in_range(lo: f64, hi: f64, tolerance: f64) -> Option<f64> {
    use crate::design::eseries::{next_up, Series};
    let (lo, hi) = (lo.min(hi), lo.max(hi));
    if !(lo > 0.0 && hi.is_finite()) {
        return None;
    }
    let (a, b) = (lo * (1.0 - tolerance), hi * (1.0 + tolerance));
    let mid = (lo * hi).sqrt();
    for series in [Series::E12, Series::E24] {
        let mut found = Vec::new();
        let mut c = next_up(a, series);
        while let Some(v) = c.filter(|v| *v <= b) {
            found.push(v);
            c = next_up(v * (1.0 + 1e-6), series);
        }
        if let Some(best) = found
            .into_iter()
            .min_by(|x, y| (x / mid).ln().abs().total_cmp(&(y / mid).ln().abs()))
        {
            return Some(best);
        }
    }
    None
}

/// Relative tolerance within which a fitted element value is said to match a preferred value
/// or a junction count (4 %: under half the gap between E24 neighbours; project choice).
pub const MATCH_TOLERANCE: f64 = 0.04;

fn fmt_ohms(r: f64) -> String {
    let s = format!("{:.3}", r);
    let s = s.trim_end_matches('0').trim_end_matches('.').to_string();
    format!("{s} ohm")
}

/// Likely causes of a limit that is off: the measured limit read through the design's limit
/// model as an effective sense resistance or clamp voltage, named as a neighbouring preferred
/// resistor or a junction more or fewer when one matches; and heating during the dwell.
pub fn likely_causes(metrics: &Metrics, exp: &DesignExpectation, checks: &[Check]) -> Vec<String> {
    let mut out = Vec::new();
    let limit_check = checks.iter().find(|c| c.metric == "limit_current");
    let sc_check = checks.iter().find(|c| c.metric == "short_circuit_current");
    if let Some(model) = exp.limit {
        // For foldback the short-circuit current reads the clamp most directly.
        let (check, nominal_current) = match model.clamp {
            Clamp::Foldback { .. } => (sc_check.or(limit_check), None),
            _ => (limit_check, Some(exp.limit_current.nominal)),
        };
        if let Some(c) = check.filter(|c| c.verdict != Verdict::Pass && c.measured > 0.0) {
            let i_nom = nominal_current.unwrap_or(c.nominal);
            // A diode string's threshold depends on the pass junction temperature, which is
            // bracketed by the case reading (no rise above the case) and the case reading plus
            // dissipation times theta_jc (junction settled against the case).
            let (tj_lo, tj_hi) = match (model.clamp, &metrics.knee_conditions) {
                (Clamp::DiodeString { .. }, Some(k)) => (
                    k.case_temperature,
                    k.case_temperature.and_then(|_| model.pass_junction_c(k)),
                ),
                _ => (None, None),
            };
            let v_nom = i_nom * model.sense_ohms;
            let (v_lo, v_hi) = match (tj_lo, tj_hi) {
                (Some(_), Some(_)) => {
                    let (x, y) = (model.sense_voltage_at(tj_lo), model.sense_voltage_at(tj_hi));
                    (x.min(y), x.max(y))
                }
                _ => (v_nom, v_nom),
            };
            if let (Some(a), Some(b)) = (tj_lo, tj_hi) {
                out.push(format!(
                    "clamp read hot: pass junction estimated at {a:.0} to {b:.0} degC (case \
                     reading, plus dissipation times theta_jc), threshold {v_lo:.3} to {v_hi:.3} V"
                ));
            }
            let (r_lo, r_hi) = (v_lo / c.measured, v_hi / c.measured);
            let v_eff = c.measured * model.sense_ohms;
            let dev = (c.measured / i_nom - 1.0) * 100.0;
            let dir = if dev < 0.0 { "low" } else { "high" };
            let what = match model.clamp {
                Clamp::Foldback { .. } => "short-circuit sense voltage (V_BE / k)",
                _ => "clamp voltage",
            };
            let fmt_range = |a: f64, b: f64, f: &dyn Fn(f64) -> String| {
                if (b / a - 1.0).abs() < 0.005 {
                    f(a)
                } else {
                    format!("{} to {}", f(a), f(b))
                }
            };
            out.push(format!(
                "{} {:.0} % {dir}: implies an effective sense resistance of {} (design {}) or a \
                 {what} of {:.3} V (design {})",
                c.metric.replace('_', " "),
                dev.abs(),
                fmt_range(r_lo, r_hi, &fmt_ohms),
                fmt_ohms(model.sense_ohms),
                v_eff,
                fmt_range(v_lo, v_hi, &|v| format!("{v:.3} V")),
            ));
            if let Some(pref) = preferred_in_range(r_lo, r_hi, MATCH_TOLERANCE) {
                if (pref / model.sense_ohms - 1.0).abs() > 0.01 {
                    out.push(format!(
                        "{} {:.0} % {dir}: matches a {} sense resistor fitted instead of {}",
                        c.metric.replace('_', " "),
                        dev.abs(),
                        fmt_ohms(pref),
                        fmt_ohms(model.sense_ohms)
                    ));
                }
            }
            if let Clamp::DiodeString {
                diodes,
                v_f,
                pass_junctions,
                v_be,
            } = model.clamp
            {
                for (delta, word) in [(1i64, "more"), (-1i64, "fewer")] {
                    let n = diodes as i64 + delta;
                    if n < 1 {
                        continue;
                    }
                    let alt = LimitModel {
                        clamp: Clamp::DiodeString {
                            diodes: n as u32,
                            v_f,
                            pass_junctions,
                            v_be,
                        },
                        ..model
                    };
                    let (a, b) = match (tj_lo, tj_hi) {
                        (Some(_), Some(_)) => {
                            (alt.sense_voltage_at(tj_lo), alt.sense_voltage_at(tj_hi))
                        }
                        _ => (alt.clamp.sense_voltage(), alt.clamp.sense_voltage()),
                    };
                    let (a, b) = (a.min(b), a.max(b));
                    if a > 0.0
                        && v_eff >= a * (1.0 - MATCH_TOLERANCE)
                        && v_eff <= b * (1.0 + MATCH_TOLERANCE)
                    {
                        out.push(format!(
                            "clamp voltage {:.3} V matches one junction {word} in the diode \
                             string ({n} diodes instead of {diodes}: {})",
                            v_eff,
                            fmt_range(a, b, &|v| format!("{v:.3} V"))
                        ));
                    }
                }
            }
        }
    }
    // Heating is named only when something is off; a few percent of drift during a short is
    // normal for a junction-referenced clamp.
    // A run stopped at its pre-flight check judged nothing, but an unloaded output outside
    // the design's band is still worth a diagnosis (which part would make the unit read so).
    let preflight_off = checks.is_empty()
        && metrics.preflight.is_some_and(|p| {
            let wc = exp.vout.worst_case;
            !(p.voltage >= wc.min && p.voltage <= wc.max)
        });
    let off = preflight_off || checks.iter().any(|c| c.verdict != Verdict::Pass);
    if let Some(sc) = metrics.short_circuit.as_ref().filter(|_| off) {
        if sc.drift_percent.abs() > HEATING_DRIFT_PERCENT {
            let tau = sc
                .time_constant
                .map(|f| format!(" with a time constant of {:.1} s", f.tau_s))
                .unwrap_or_default();
            out.push(format!(
                "short-circuit current moved {:+.1} % over the {:.0} s dwell{tau}: junction \
                 heating (junction drops fall about 2 mV per degC)",
                sc.drift_percent, sc.dwell_s
            ));
        }
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    fn band(nominal: f64, wc: f64, mc: f64) -> ExpectedBand {
        ExpectedBand {
            nominal,
            worst_case: Limits {
                min: nominal * (1.0 - wc),
                max: nominal * (1.0 + wc),
            },
            monte_carlo: MonteCarlo {
                samples: 1000,
                mean: nominal,
                sigma: nominal * mc / 3.0,
                p_low: nominal * (1.0 - mc),
                p_high: nominal * (1.0 + mc),
            },
        }
    }

    #[test]
    fn verdicts_follow_the_bands() {
        let b = band(10.0, 0.10, 0.05);
        assert_eq!(check("x", "V", 10.2, &b).verdict, Verdict::Pass);
        assert_eq!(check("x", "V", 10.7, &b).verdict, Verdict::Marginal);
        assert_eq!(check("x", "V", 11.2, &b).verdict, Verdict::Fail);
        let c = check("x", "V", 10.7, &b);
        assert!((c.margin - 0.3).abs() < 1e-9);
        assert!((c.margin_percent - 3.0).abs() < 1e-9);
        assert!((c.deviation_percent - 7.0).abs() < 1e-9);
        assert!(check("x", "V", 11.2, &b).margin < 0.0);
    }

    #[test]
    fn preferred_values_come_from_the_tables() {
        assert_eq!(nearest_preferred(0.675, 0.04), Some(0.68));
        assert_eq!(nearest_preferred(0.47, 0.04), Some(0.47));
        // 0.51 lies in E24 only.
        assert_eq!(nearest_preferred(0.512, 0.01), Some(0.51));
        // 9.1 (E24) and 10 across the decade boundary.
        assert_eq!(nearest_preferred(9.9, 0.04), Some(10.0));
        assert_eq!(nearest_preferred(0.0, 0.04), None);
        // 0.58 is 3.5 % from 0.56 and 6.5 % from 0.62; with 2 % nothing matches.
        assert_eq!(nearest_preferred(0.58, 0.02), None);
    }

    #[test]
    fn wrong_sense_resistor_is_named() {
        // Design: 0.6 V / 0.47 ohm = 1.277 A; a 0.68 ohm part gives 0.882 A (31 % low).
        let exp = DesignExpectation {
            design_name: "t".into(),
            vout: band(12.0, 0.05, 0.03),
            limit_current: band(0.6 / 0.47, 0.15, 0.08),
            short_circuit_current: None,
            limit: Some(LimitModel {
                sense_ohms: 0.47,
                clamp: Clamp::Transistor { v_be: 0.6 },
                tempco_v_per_c: -0.002,
                pass_theta_jc: None,
            }),
            curve: vec![],
            curve_low: vec![],
            curve_high: vec![],
            rated_load_a: None,
            design: None,
            as_built: None,
            envelope: None,
        };
        let checks = vec![check("limit_current", "A", 0.6 / 0.68, &exp.limit_current)];
        assert_eq!(checks[0].verdict, Verdict::Fail);
        let m = crate::analysis::analyse(&[], &Default::default());
        let causes = likely_causes(&m, &exp, &checks);
        assert!(
            causes.iter().any(|c| c.contains("31 % low")
                && c.contains("0.68 ohm sense resistor fitted instead of 0.47 ohm")),
            "{causes:?}"
        );
    }

    #[test]
    fn extra_junction_in_diode_string_is_named() {
        // 3 diodes x 0.65 V - 1 x 0.65 V = 1.30 V sense; with 4 diodes 1.95 V.
        let clamp = Clamp::DiodeString {
            diodes: 3,
            v_f: 0.65,
            pass_junctions: 1,
            v_be: 0.65,
        };
        let r = 1.0;
        let nominal = clamp.sense_voltage() / r;
        let exp = DesignExpectation {
            design_name: "t".into(),
            vout: band(12.0, 0.05, 0.03),
            limit_current: band(nominal, 0.15, 0.08),
            short_circuit_current: None,
            limit: Some(LimitModel {
                sense_ohms: r,
                clamp,
                tempco_v_per_c: -0.002,
                pass_theta_jc: None,
            }),
            curve: vec![],
            curve_low: vec![],
            curve_high: vec![],
            rated_load_a: None,
            design: None,
            as_built: None,
            envelope: None,
        };
        let checks = vec![check("limit_current", "A", 1.95, &exp.limit_current)];
        let m = crate::analysis::analyse(&[], &Default::default());
        let causes = likely_causes(&m, &exp, &checks);
        assert!(
            causes.iter().any(|c| c.contains("one junction more")),
            "{causes:?}"
        );
    }

    #[test]
    fn limit_model_from_design_files_agrees_with_the_design_model() {
        // The comparison's limit model re-derives the limit from nominal element values
        // (I = V_sense / R for a plain clamp, I_sc = V_BE / (k R) for foldback); the design
        // model computes the same at its junction temperatures, so they agree within a few %.
        for (text, name) in [
            (
                include_str!("../../samples/teaching-lab-0-20v.toml"),
                "teaching-lab",
            ),
            (
                include_str!("../../samples/fixed-12v-3a-foldback.toml"),
                "fixed-12v",
            ),
        ] {
            let d = crate::design::Design::parse(text, name).unwrap();
            let e = crate::design::expect_with(&d, 200, 1);
            let x = DesignExpectation::from_design(&d, &e);
            let lm = x.limit.unwrap();
            let i_model = lm.clamp.sense_voltage() / lm.sense_ohms;
            let i_design = match lm.clamp {
                Clamp::Foldback { .. } => e.short_circuit_current.nominal,
                _ => e.limit_current.nominal,
            };
            assert!(
                (i_model / i_design - 1.0).abs() < 0.05,
                "{name}: {i_model} vs {i_design}"
            );
            // The bench judges by the as-built band; the operating envelope rides along.
            assert_eq!(x.vout, e.as_built.vout);
            assert_eq!(x.envelope.unwrap().vout, e.vout.setting_band);
        }
    }

    #[test]
    fn diode_string_limit_is_read_at_the_measured_temperature() {
        // Diode string: V_sense = n V_F - m V_BE(T), V_BE falling 2 mV/degC (textbook value).
        // Design: 3 x 0.65 V over a Darlington (2 x 0.65 V) and 0.39 ohm: 0.65 V, 1.667 A cold.
        // Built with 0.68 ohm and tested with the pass junction at 40 degC: V_sense =
        // 1.95 - 2 (0.65 - 0.002 * 15) = 0.71 V, so the limit reads 0.71 / 0.68 = 1.044 A;
        // read cold that would imply 0.65 / 1.044 = 0.62 ohm, the wrong neighbour.
        let clamp = Clamp::DiodeString {
            diodes: 3,
            v_f: 0.65,
            pass_junctions: 2,
            v_be: 0.65,
        };
        let exp = DesignExpectation {
            design_name: "t".into(),
            vout: band(20.0, 0.05, 0.03),
            limit_current: band(0.65 / 0.39, 0.15, 0.08),
            short_circuit_current: None,
            limit: Some(LimitModel {
                sense_ohms: 0.39,
                clamp,
                tempco_v_per_c: -0.002,
                pass_theta_jc: Some(1.0),
            }),
            curve: vec![],
            curve_low: vec![],
            curve_high: vec![],
            rated_load_a: None,
            design: None,
            as_built: None,
            envelope: None,
        };
        let measured = 0.71 / 0.68;
        let checks = vec![check("limit_current", "A", measured, &exp.limit_current)];
        let mut m = crate::analysis::analyse(&[], &Default::default());
        // Case at 28 degC, 15 W in the pass device, theta_jc 1 degC/W: 28 to 43 degC.
        m.knee_conditions = Some(crate::analysis::KneeConditions {
            case_temperature: Some(28.0),
            pass_watts: Some(15.0),
        });
        let causes = likely_causes(&m, &exp, &checks);
        assert!(
            causes
                .iter()
                .any(|c| c.contains("0.68 ohm sense resistor fitted instead of 0.39 ohm")),
            "{causes:?}"
        );
        // Without the temperature the cold reading names the neighbour below.
        m.knee_conditions = None;
        let cold = likely_causes(&m, &exp, &checks);
        assert!(
            cold.iter().any(|c| c.contains("0.62 ohm sense resistor")),
            "{cold:?}"
        );
    }
}
