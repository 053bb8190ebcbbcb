//! The design file's rules, one named function per part of the file, each returning the key
//! path at fault and what to write there. They check what the file format cannot (every number
//! finite and inside a physically meaningful range, tolerances and spreads non-negative, ranges
//! ordered, combinations) and compute nothing about the circuit: the one rule that needs the
//! model (the output range) lives beside the model's caller in `check`. Pure.

use super::file::{Clamp, Design, InputKind, Resistor};

/// A rule's finding: the key path at fault and a message saying what to fix.
pub type Problem = (Vec<&'static str>, String);
/// What a rule returns.
pub type Checked = Result<(), Problem>;

pub(super) fn err<T>(path: &[&'static str], msg: impl Into<String>) -> Result<T, Problem> {
    Err((path.to_vec(), msg.into()))
}

/// The accepted range of one number, with its unit and an example of what to write.
#[derive(Debug, Clone, Copy)]
pub struct Range {
    pub lo: f64,
    pub hi: f64,
    /// Whether the lower end itself is accepted (false: it must be above it).
    pub lo_inclusive: bool,
    pub unit: &'static str,
    pub example: &'static str,
}

const fn incl(lo: f64, hi: f64, unit: &'static str, example: &'static str) -> Range {
    Range {
        lo,
        hi,
        lo_inclusive: true,
        unit,
        example,
    }
}
const fn above(lo: f64, hi: f64, unit: &'static str, example: &'static str) -> Range {
    Range {
        lo,
        hi,
        lo_inclusive: false,
        unit,
        example,
    }
}

/// Accepted ranges (physically meaningful bounds for a linear bench supply; common practice).
pub mod ranges {
    use super::{above, incl, Range};
    pub const OHMS: Range = incl(1e-4, 1e9, "ohm", "0.39");
    pub const TOLERANCE_PCT: Range = incl(0.0, 50.0, "%", "5");
    pub const RATING_W: Range = incl(1e-3, 1e4, "W", "2");
    pub const INPUT_V: Range = incl(1.0, 1000.0, "V", "25");
    pub const OUTPUT_SETTING_V: Range = incl(0.0, 1000.0, "V", "12");
    pub const LINE_PCT: Range = incl(0.0, 50.0, "%", "10");
    pub const SECONDARY_VRMS: Range = incl(1.0, 700.0, "V", "18");
    pub const RECTIFIER_DROP_V: Range = incl(0.0, 10.0, "V", "1.4");
    pub const MAINS_HZ: Range = incl(10.0, 1000.0, "Hz", "50");
    pub const RESERVOIR_UF: Range = incl(1.0, 1e7, "uF", "4700");
    pub const CAP_TOLERANCE_PCT: Range = incl(0.0, 99.0, "%", "20");
    pub const REFERENCE_V: Range = incl(0.1, 1000.0, "V", "5.0");
    pub const WIPER_PCT: Range = incl(0.0, 100.0, "%", "0");
    pub const JUNCTION_V: Range = incl(0.1, 1.5, "V", "0.65");
    pub const VCE_MIN_V: Range = incl(0.0, 50.0, "V", "2.0");
    pub const TJ_MAX_C: Range = incl(25.0, 300.0, "degC", "150");
    pub const THETA_JC: Range = incl(1e-3, 1000.0, "degC/W", "1.5");
    pub const THETA: Range = incl(0.0, 1000.0, "degC/W", "0.5");
    pub const LOAD_A: Range = incl(1e-6, 1000.0, "A", "1.0");
    pub const AUX_V: Range = incl(1.0, 1000.0, "V", "26");
    pub const AUX_A: Range = incl(1e-6, 10.0, "A", "0.02");
    pub const SHARE: Range = incl(0.0, 0.9, "", "0.5");
    pub const SWING_V: Range = incl(0.0, 20.0, "V", "1.5");
    pub const VCE_SAT_V: Range = incl(0.0, 5.0, "V", "0.2");
    pub const AMBIENT_C: Range = incl(-60.0, 150.0, "degC", "25");
    pub const TEMPCO_MV: Range = incl(-10.0, 10.0, "mV/degC", "-2.0");
    pub const DERATING: Range = above(0.0, 1.0, "", "0.5");
    pub const TJ_MARGIN_C: Range = incl(0.0, 200.0, "degC", "25");
    pub const HEADROOM_MARGIN_V: Range = incl(0.0, 50.0, "V", "0.5");
    pub const CURRENT_GAIN: Range = incl(1.0, 1e6, "", "1000");
    pub const AMP_OUTPUT_A: Range = incl(1e-6, 10.0, "A", "0.02");
    pub const REGULATION_PCT: Range = incl(0.0, 50.0, "%", "8");
    pub const SURGE_A: Range = incl(1e-3, 1e5, "A", "200");
    pub const RIPPLE_RATING_A: Range = incl(1e-3, 1000.0, "A", "3.5");
    pub const SOA_V: Range = above(0.0, 10_000.0, "V", "40");
    pub const SOA_A: Range = above(0.0, 10_000.0, "A", "2.5");
    pub const DERATE_C: Range = incl(-60.0, 300.0, "degC", "25");
    pub const TAU_S: Range = incl(1e-4, 1e5, "s", "0.5");
    pub const HEAT_J_PER_C: Range = incl(1e-6, 1e7, "J/degC", "20");
    pub const DWELL_S: Range = above(0.0, 1e6, "s", "5");
}

/// Check one number against its range: finite, inside it, with what to write when it is not.
pub fn in_range(v: f64, r: Range, path: &[&'static str], what: &str) -> Checked {
    let low_ok = if r.lo_inclusive { v >= r.lo } else { v > r.lo };
    if v.is_finite() && low_ok && v <= r.hi {
        return Ok(());
    }
    let unit = if r.unit.is_empty() {
        String::new()
    } else {
        format!(" {}", r.unit)
    };
    let lo_word = if r.lo_inclusive { "from" } else { "above" };
    let key = path.last().copied().unwrap_or("value");
    err(
        path,
        format!(
            "{what} must be a number {lo_word} {}{unit} to {}{unit} (got {v}); write, for example, `{key} = {}`",
            r.lo, r.hi, r.example
        ),
    )
}

/// A thermal stage's keys and values: (capacity key, tau key, capacity, tau, its theta).
type Stage = (
    &'static str,
    &'static str,
    Option<f64>,
    Option<f64>,
    Option<f64>,
);

fn at(base: &[&'static str], key: &'static str) -> Vec<&'static str> {
    let mut p = base.to_vec();
    p.push(key);
    p
}

fn resistor(r: &Resistor, base: &[&'static str]) -> Checked {
    let p = at(base, "ohms");
    if !r.ohms.is_finite() || r.ohms <= 0.0 {
        return err(
            &p,
            format!(
                "resistance must be greater than zero ohms (got {}); write the value in ohms, e.g. `ohms = 1000`",
                r.ohms
            ),
        );
    }
    in_range(r.ohms, ranges::OHMS, &p, "resistance")?;
    let p = at(base, "tolerance_pct");
    if !r.tolerance_pct.is_finite() || r.tolerance_pct < 0.0 || r.tolerance_pct >= 100.0 {
        return err(
            &p,
            format!(
                "tolerance must be at least 0 % and below 100 % (got {} %); write, e.g. `tolerance_pct = 5`",
                r.tolerance_pct
            ),
        );
    }
    if r.pot {
        // Potentiometer tracks are commonly +-20 % or wider (common practice).
        in_range(
            r.tolerance_pct,
            Range {
                hi: 99.0,
                ..ranges::TOLERANCE_PCT
            },
            &p,
            "tolerance",
        )?;
    } else {
        in_range(r.tolerance_pct, ranges::TOLERANCE_PCT, &p, "tolerance")?;
    }
    if let Some(w) = r.rating_w {
        in_range(w, ranges::RATING_W, &at(base, "rating_w"), "power rating")?;
    }
    let p = at(base, "min_ohms");
    if !r.min_ohms.is_finite() || r.min_ohms < 0.0 || r.min_ohms >= r.ohms {
        return err(
            &p,
            format!(
                "min_ohms must be at least 0 and below ohms ({}) (got {})",
                r.ohms, r.min_ohms
            ),
        );
    }
    if r.min_ohms > 0.0 && !r.pot {
        return err(&p, "min_ohms only applies to a potentiometer (pot = true)");
    }
    Ok(())
}
fn junction(v: f64, spread: f64, path: &[&'static str], spath: &[&'static str]) -> Checked {
    if !v.is_finite() || !(0.1..=1.5).contains(&v) {
        return err(path, format!("a silicon junction drop is about 0.6-0.7 V; {v} V is not plausible (0.1-1.5 V accepted): write, e.g. `{} = 0.65`", path.last().unwrap_or(&"vbe_v")));
    }
    if !spread.is_finite() || spread < 0.0 || spread >= v {
        return err(
            spath,
            format!("the spread must be at least 0 and below the drop itself (got {spread} V); write, e.g. `{} = 0.05`", spath.last().unwrap_or(&"spread")),
        );
    }
    Ok(())
}

/// The unregulated input: line tolerance, and the values its kind needs.
pub fn input(d: &Design) -> Checked {
    let inp = &d.input;
    in_range(
        inp.line_tolerance_pct,
        ranges::LINE_PCT,
        &["input", "line_tolerance_pct"],
        "line tolerance",
    )?;
    match inp.kind {
        InputKind::Dc => match inp.volts {
            None => {
                return err(
                    &["input", "kind"],
                    "a DC input needs `volts` (the nominal input voltage)",
                )
            }
            Some(v) => in_range(v, ranges::INPUT_V, &["input", "volts"], "input voltage")?,
        },
        InputKind::FullWave => {
            match inp.secondary_vrms {
                None => return err(
                    &["input", "kind"],
                    "a full-wave input needs `secondary_vrms` (transformer secondary RMS volts)",
                ),
                Some(v) => in_range(
                    v,
                    ranges::SECONDARY_VRMS,
                    &["input", "secondary_vrms"],
                    "secondary voltage",
                )?,
            }
            match inp.reservoir_uf {
                None => return err(
                    &["input", "kind"],
                    "a full-wave input needs `reservoir_uf` (reservoir capacitance in microfarads)",
                ),
                Some(v) => in_range(
                    v,
                    ranges::RESERVOIR_UF,
                    &["input", "reservoir_uf"],
                    "reservoir capacitance",
                )?,
            }
            in_range(
                inp.mains_hz,
                ranges::MAINS_HZ,
                &["input", "mains_hz"],
                "mains frequency",
            )?;
            in_range(
                inp.rectifier_drop_v,
                ranges::RECTIFIER_DROP_V,
                &["input", "rectifier_drop_v"],
                "rectifier drop",
            )?;
            in_range(
                inp.reservoir_tolerance_pct,
                ranges::CAP_TOLERANCE_PCT,
                &["input", "reservoir_tolerance_pct"],
                "reservoir tolerance",
            )?;
            if let Some(r) = inp.regulation_pct {
                in_range(
                    r,
                    ranges::REGULATION_PCT,
                    &["input", "regulation_pct"],
                    "transformer regulation",
                )?;
            }
            for (v, key, r, what) in [
                (
                    inp.reservoir_ripple_rating_a,
                    "reservoir_ripple_rating_a",
                    ranges::RIPPLE_RATING_A,
                    "the reservoir's ripple current rating",
                ),
                (
                    inp.rectifier_rating_a,
                    "rectifier_rating_a",
                    ranges::RIPPLE_RATING_A,
                    "the rectifier's current rating",
                ),
                (
                    inp.rectifier_surge_rating_a,
                    "rectifier_surge_rating_a",
                    ranges::SURGE_A,
                    "the rectifier's surge rating",
                ),
            ] {
                if let Some(v) = v {
                    in_range(v, r, &["input", key], what)?;
                }
            }
        }
    }
    Ok(())
}

/// The reference: voltage, tolerance and wiper travel.
pub fn reference(d: &Design) -> Checked {
    let r = &d.reference;
    in_range(
        r.volts,
        ranges::REFERENCE_V,
        &["reference", "volts"],
        "reference voltage",
    )?;
    in_range(
        r.tolerance_pct,
        ranges::TOLERANCE_PCT,
        &["reference", "tolerance_pct"],
        "reference tolerance",
    )?;
    in_range(
        r.wiper_min_pct,
        ranges::WIPER_PCT,
        &["reference", "wiper_min_pct"],
        "wiper travel",
    )?;
    in_range(
        r.wiper_max_pct,
        ranges::WIPER_PCT,
        &["reference", "wiper_max_pct"],
        "wiper travel",
    )?;
    if r.wiper_min_pct >= r.wiper_max_pct {
        return err(
            &["reference", "wiper_min_pct"],
            format!(
                "wiper travel must satisfy 0 <= wiper_min_pct < wiper_max_pct <= 100 (got {} and {})",
                r.wiper_min_pct, r.wiper_max_pct
            ),
        );
    }
    Ok(())
}

/// The feedback divider's resistors; a bottom potentiometer needs a series resistor.
pub fn feedback(d: &Design) -> Checked {
    resistor(&d.feedback.top, &["feedback", "top"])?;
    resistor(&d.feedback.bottom, &["feedback", "bottom"])?;
    if d.feedback.bottom.pot && d.feedback.bottom.min_ohms <= 0.0 {
        return err(
            &["feedback", "bottom", "min_ohms"],
            "a potentiometer as the bottom element can reach 0 ohm and drive the output to the rail: set min_ohms (a series resistor) above zero",
        );
    }
    Ok(())
}

/// The pass stage: junction drop, minimum V_CE, ratings, thermal resistances, T_j max.
pub fn pass(d: &Design) -> Checked {
    let p = &d.pass;
    junction(
        p.vbe_v,
        p.vbe_spread_v,
        &["pass", "vbe_v"],
        &["pass", "vbe_spread_v"],
    )?;
    in_range(
        p.vce_min_v,
        ranges::VCE_MIN_V,
        &["pass", "vce_min_v"],
        "minimum V_CE",
    )?;
    in_range(
        p.power_rating_w,
        ranges::RATING_W,
        &["pass", "power_rating_w"],
        "power rating",
    )?;
    in_range(
        p.theta_jc,
        ranges::THETA_JC,
        &["pass", "theta_jc"],
        "theta_jc",
    )?;
    in_range(p.theta_cs, ranges::THETA, &["pass", "theta_cs"], "theta_cs")?;
    if let Some(t) = p.theta_sa {
        in_range(t, ranges::THETA, &["pass", "theta_sa"], "theta_sa")?;
    }
    in_range(
        p.tj_max_c,
        ranges::TJ_MAX_C,
        &["pass", "tj_max_c"],
        "T_j max",
    )?;
    if let Some(soa) = &p.soa {
        let path = ["pass", "soa", "points"];
        if soa.points.len() < 2 {
            return err(
                &path,
                "the SOA needs at least two points [V_CE, I_C] along its DC line, e.g. `points = [[10, 11.5], [40, 2.9], [100, 0.3]]`",
            );
        }
        for pt in &soa.points {
            in_range(pt[0], ranges::SOA_V, &path, "an SOA point's V_CE")?;
            in_range(pt[1], ranges::SOA_A, &path, "an SOA point's current")?;
        }
        for w in soa.points.windows(2) {
            if w[1][0] <= w[0][0] || w[1][1] > w[0][1] {
                return err(
                    &path,
                    format!(
                        "SOA points must go up in V_CE and not up in current ([{}, {}] then [{}, {}]): list them left to right along the DC line",
                        w[0][0], w[0][1], w[1][0], w[1][1]
                    ),
                );
            }
        }
    }
    if let Some(m) = &p.thermal_mass {
        let stages: [Stage; 3] = [
            (
                "junction_j_per_c",
                "junction_tau_s",
                m.junction_j_per_c,
                m.junction_tau_s,
                Some(p.theta_jc),
            ),
            (
                "case_j_per_c",
                "case_tau_s",
                m.case_j_per_c,
                m.case_tau_s,
                Some(p.theta_cs),
            ),
            (
                "sink_j_per_c",
                "sink_tau_s",
                m.sink_j_per_c,
                m.sink_tau_s,
                p.theta_sa,
            ),
        ];
        for (ck, tk, c, tau, theta) in stages {
            match (c, tau) {
                (Some(c), None) => in_range(
                    c,
                    ranges::HEAT_J_PER_C,
                    &["pass", "thermal_mass", ck],
                    "a heat capacity",
                )?,
                (None, Some(t)) => {
                    in_range(
                        t,
                        ranges::TAU_S,
                        &["pass", "thermal_mass", tk],
                        "a time constant",
                    )?;
                    if theta.is_none_or(|th| th <= 0.0) {
                        return err(
                            &["pass", "thermal_mass", tk],
                            format!("a time constant needs this stage's thermal resistance above zero: give `{ck}` (J/degC) instead, or set the theta"),
                        );
                    }
                }
                (Some(_), Some(_)) => {
                    return err(
                        &["pass", "thermal_mass", tk],
                        format!("give either `{ck}` or `{tk}` for this stage, not both"),
                    )
                }
                (None, None) => {
                    return err(
                        &["pass", "thermal_mass"],
                        format!(
                        "each stage needs `{ck}` (J/degC) or `{tk}` (seconds), e.g. `{ck} = 20`"
                    ),
                    )
                }
            }
        }
        if p.theta_sa.is_none() {
            return err(
                &["pass", "thermal_mass"],
                "the thermal masses need the heatsink chosen: set theta_sa",
            );
        }
    }
    if let Some(g) = p.current_gain {
        in_range(
            g,
            ranges::CURRENT_GAIN,
            &["pass", "current_gain"],
            "the pass stage's current gain",
        )?;
    }
    Ok(())
}

/// The current limit: sense resistor, the clamp's junctions (a diode string must be able to conduct), and the foldback divider.
pub fn limit(d: &Design) -> Checked {
    let l = &d.limit;
    let p = &d.pass;
    resistor(&l.sense, &["limit", "sense"])?;
    if l.sense.pot {
        return err(
            &["limit", "sense", "pot"],
            "the sense resistor cannot be a potentiometer in this model",
        );
    }
    match l.clamp {
        Clamp::DiodeString => {
            junction(
                l.diode_vf_v,
                l.diode_vf_spread_v,
                &["limit", "diode_vf_v"],
                &["limit", "diode_vf_spread_v"],
            )?;
            let n = match l.diodes {
                None => {
                    return err(
                        &["limit", "clamp"],
                        "a diode-string clamp needs `diodes` (how many diodes in the string)",
                    )
                }
                Some(0) => {
                    return err(
                        &["limit", "diodes"],
                        "the diode string needs at least one diode",
                    )
                }
                Some(n) if n > 10 => {
                    return err(
                        &["limit", "diodes"],
                        format!("{n} diodes is not plausible (1-10 accepted)"),
                    )
                }
                Some(n) => n,
            };
            let vs = n as f64 * l.diode_vf_v - p.stage.junctions() as f64 * p.vbe_v;
            if vs <= 0.0 {
                return err(
                    &["limit", "diodes"],
                    format!(
                        "this clamp cannot conduct: {n} x {} V - {} x {} V = {vs:.3} V across the sense resistor; add a diode or use a transistor limiter",
                        l.diode_vf_v,
                        p.stage.junctions(),
                        p.vbe_v
                    ),
                );
            }
        }
        Clamp::Transistor | Clamp::Foldback => {
            junction(
                l.vbe_v,
                l.vbe_spread_v,
                &["limit", "vbe_v"],
                &["limit", "vbe_spread_v"],
            )?;
            if l.diodes.is_some() {
                return err(
                    &["limit", "diodes"],
                    "`diodes` applies only to clamp = \"diode_string\"",
                );
            }
        }
    }
    if l.clamp == Clamp::Foldback {
        match (&l.divider_top, &l.divider_bottom) {
            (Some(t), Some(b)) => {
                resistor(t, &["limit", "divider_top"])?;
                resistor(b, &["limit", "divider_bottom"])?;
            }
            _ => {
                return err(
                    &["limit", "clamp"],
                    "a foldback clamp needs `divider_top` and `divider_bottom`",
                )
            }
        }
    } else if l.divider_top.is_some() || l.divider_bottom.is_some() {
        return err(
            &["limit", "divider_top"],
            "the divider applies only to clamp = \"foldback\"",
        );
    }
    Ok(())
}

/// The load: a positive maximum current.
pub fn load(d: &Design) -> Checked {
    in_range(
        d.load.max_current_a,
        ranges::LOAD_A,
        &["load", "max_current_a"],
        "maximum load current",
    )?;
    if let Some(v) = d.load.output_setting_v {
        in_range(
            v,
            ranges::OUTPUT_SETTING_V,
            &["load", "output_setting_v"],
            "output setting",
        )?;
    }
    Ok(())
}

/// The auxiliary rail: voltage, current, ratings, collector share and swing loss.
pub fn aux(d: &Design) -> Checked {
    if let Some(a) = &d.aux {
        in_range(
            a.volts,
            ranges::AUX_V,
            &["aux", "volts"],
            "aux rail voltage",
        )?;
        in_range(
            a.current_a,
            ranges::AUX_A,
            &["aux", "current_a"],
            "aux rail current",
        )?;
        in_range(
            a.transistor_rating_w,
            ranges::RATING_W,
            &["aux", "transistor_rating_w"],
            "power rating",
        )?;
        in_range(
            a.collector_share,
            ranges::SHARE,
            &["aux", "collector_share"],
            "collector_share",
        )?;
        if let Some(r) = a.collector_ohms {
            in_range(
                r,
                ranges::OHMS,
                &["aux", "collector_ohms"],
                "collector resistor",
            )?;
            if a.collector_share > 0.0 {
                return err(
                    &["aux", "collector_ohms"],
                    "give either collector_ohms (the fitted resistor) or collector_share, not both",
                );
            }
        }
        if let Some(w) = a.collector_resistor_rating_w {
            in_range(
                w,
                ranges::RATING_W,
                &["aux", "collector_resistor_rating_w"],
                "power rating",
            )?;
        }
        in_range(
            a.amplifier_swing_loss_v,
            ranges::SWING_V,
            &["aux", "amplifier_swing_loss_v"],
            "swing loss",
        )?;
        in_range(
            a.vce_sat_v,
            ranges::VCE_SAT_V,
            &["aux", "vce_sat_v"],
            "the aux transistor's saturation voltage",
        )?;
    }
    Ok(())
}

/// The error amplifier's output: the most current it sources.
pub fn amplifier(d: &Design) -> Checked {
    if let Some(a) = &d.amplifier {
        in_range(
            a.output_current_a,
            ranges::AMP_OUTPUT_A,
            &["amplifier", "output_current_a"],
            "the amplifier's output current",
        )?;
    }
    Ok(())
}

/// The environment: ordered ambients and a plausible junction temperature coefficient.
pub fn environment(d: &Design) -> Checked {
    let e = &d.environment;
    for (v, key) in [
        (e.ambient_min_c, "ambient_min_c"),
        (e.ambient_c, "ambient_c"),
        (e.ambient_max_c, "ambient_max_c"),
    ] {
        in_range(
            v,
            ranges::AMBIENT_C,
            &["environment", key],
            "ambient temperature",
        )?;
    }
    if !(e.ambient_min_c <= e.ambient_c && e.ambient_c <= e.ambient_max_c) {
        return err(
            &["environment", "ambient_c"],
            format!(
                "ambient temperatures must satisfy ambient_min_c <= ambient_c <= ambient_max_c (got {}, {}, {})",
                e.ambient_min_c, e.ambient_c, e.ambient_max_c
            ),
        );
    }
    in_range(
        e.junction_tempco_mv_per_c,
        ranges::TEMPCO_MV,
        &["environment", "junction_tempco_mv_per_c"],
        "junction temperature coefficient (about -2 mV/degC for silicon)",
    )?;
    if d.pass.tj_max_c <= e.ambient_max_c {
        return err(
            &["pass", "tj_max_c"],
            format!(
                "T_j max ({} degC) must be above the highest ambient temperature (ambient_max_c = {} degC)",
                d.pass.tj_max_c, e.ambient_max_c
            ),
        );
    }
    Ok(())
}

/// The checking rules: deratings, Monte Carlo samples and margins.
pub fn rules(d: &Design) -> Checked {
    let ru = &d.rules;
    for (v, key) in [
        (ru.resistor_derating, "resistor_derating"),
        (ru.semiconductor_derating, "semiconductor_derating"),
    ] {
        in_range(
            v,
            ranges::DERATING,
            &["rules", key],
            "derating (a fraction: 0.5 = half rating)",
        )?;
    }
    if ru.monte_carlo_samples == 0 || ru.monte_carlo_samples > 10_000_000 {
        return err(
            &["rules", "monte_carlo_samples"],
            format!(
                "Monte Carlo samples must be between 1 and 10,000,000 (got {}); write, e.g. `monte_carlo_samples = 10000`",
                ru.monte_carlo_samples
            ),
        );
    }
    in_range(
        ru.tj_margin_c,
        ranges::TJ_MARGIN_C,
        &["rules", "tj_margin_c"],
        "junction temperature margin",
    )?;
    in_range(
        ru.headroom_margin_v,
        ranges::HEADROOM_MARGIN_V,
        &["rules", "headroom_margin_v"],
        "headroom margin",
    )?;
    Ok(())
}
