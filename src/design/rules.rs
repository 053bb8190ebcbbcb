//! The design file's rules, one named function per part of the file, each returning the key
//! path at fault and what to write there. They check what the file format cannot (signs,
//! ranges, combinations) and compute nothing about the circuit: the one rule that needs the
//! model (the output range) lives beside the model's caller in `check`. Pure.

use super::file::{Clamp, Design, InputKind, Resistor};

/// A rule's finding: the key path at fault and a message saying what to fix.
pub type Problem = (Vec<&'static str>, String);
/// What a rule returns.
pub type Checked = Result<(), Problem>;

pub(super) fn err<T>(path: &[&'static str], msg: impl Into<String>) -> Result<T, Problem> {
    Err((path.to_vec(), msg.into()))
}
fn finite_pos(v: f64, path: &[&'static str], what: &str) -> Checked {
    if !v.is_finite() || v <= 0.0 {
        return err(path, format!("{what} must be a positive number (got {v})"));
    }
    Ok(())
}
fn resistor(r: &Resistor, base: &[&'static str]) -> Checked {
    let mut p = base.to_vec();
    p.push("ohms");
    if !r.ohms.is_finite() || r.ohms <= 0.0 {
        return err(
            &p,
            format!("resistance must be greater than zero ohms (got {})", r.ohms),
        );
    }
    let mut p = base.to_vec();
    p.push("tolerance_pct");
    if !r.tolerance_pct.is_finite() || r.tolerance_pct < 0.0 || r.tolerance_pct >= 100.0 {
        return err(
            &p,
            format!(
                "tolerance must be at least 0 % and below 100 % (got {} %)",
                r.tolerance_pct
            ),
        );
    }
    if let Some(w) = r.rating_w {
        let mut p = base.to_vec();
        p.push("rating_w");
        finite_pos(w, &p, "power rating")?;
    }
    let mut p = base.to_vec();
    p.push("min_ohms");
    if !r.min_ohms.is_finite() || r.min_ohms < 0.0 || r.min_ohms >= r.ohms {
        return err(&p, "min_ohms must be at least 0 and below ohms");
    }
    if r.min_ohms > 0.0 && !r.pot {
        return err(&p, "min_ohms only applies to a potentiometer (pot = true)");
    }
    Ok(())
}
fn junction(v: f64, spread: f64, path: &[&'static str], spath: &[&'static str]) -> Checked {
    if !v.is_finite() || !(0.1..=1.5).contains(&v) {
        return err(path, format!("a silicon junction drop is about 0.6-0.7 V; {v} V is not plausible (0.1-1.5 V accepted)"));
    }
    if !spread.is_finite() || spread < 0.0 || spread >= v {
        return err(
            spath,
            format!("the spread must be at least 0 and below the drop itself (got {spread} V)"),
        );
    }
    Ok(())
}

/// The unregulated input: line tolerance, and the values its kind needs.
pub fn input(d: &Design) -> Checked {
    let inp = &d.input;
    if !inp.line_tolerance_pct.is_finite() || !(0.0..100.0).contains(&inp.line_tolerance_pct) {
        return err(
            &["input", "line_tolerance_pct"],
            "line tolerance must be at least 0 % and below 100 %",
        );
    }
    match inp.kind {
        InputKind::Dc => match inp.volts {
            None => {
                return err(
                    &["input", "kind"],
                    "a DC input needs `volts` (the nominal input voltage)",
                )
            }
            Some(v) => finite_pos(v, &["input", "volts"], "input voltage")?,
        },
        InputKind::FullWave => {
            match inp.secondary_vrms {
                None => return err(
                    &["input", "kind"],
                    "a full-wave input needs `secondary_vrms` (transformer secondary RMS volts)",
                ),
                Some(v) => finite_pos(v, &["input", "secondary_vrms"], "secondary voltage")?,
            }
            match inp.reservoir_uf {
                None => return err(
                    &["input", "kind"],
                    "a full-wave input needs `reservoir_uf` (reservoir capacitance in microfarads)",
                ),
                Some(v) => finite_pos(v, &["input", "reservoir_uf"], "reservoir capacitance")?,
            }
            finite_pos(inp.mains_hz, &["input", "mains_hz"], "mains frequency")?;
            if !inp.rectifier_drop_v.is_finite() || inp.rectifier_drop_v < 0.0 {
                return err(
                    &["input", "rectifier_drop_v"],
                    "rectifier drop must be 0 V or more",
                );
            }
            if !inp.reservoir_tolerance_pct.is_finite()
                || !(0.0..100.0).contains(&inp.reservoir_tolerance_pct)
            {
                return err(
                    &["input", "reservoir_tolerance_pct"],
                    "tolerance must be at least 0 % and below 100 %",
                );
            }
        }
    }
    Ok(())
}

/// The reference: voltage, tolerance and wiper travel.
pub fn reference(d: &Design) -> Checked {
    let r = &d.reference;
    finite_pos(r.volts, &["reference", "volts"], "reference voltage")?;
    if !r.tolerance_pct.is_finite() || !(0.0..100.0).contains(&r.tolerance_pct) {
        return err(
            &["reference", "tolerance_pct"],
            "tolerance must be at least 0 % and below 100 %",
        );
    }
    if !(0.0..=100.0).contains(&r.wiper_min_pct)
        || !(0.0..=100.0).contains(&r.wiper_max_pct)
        || r.wiper_min_pct >= r.wiper_max_pct
    {
        return err(
            &["reference", "wiper_min_pct"],
            "wiper travel must satisfy 0 <= wiper_min_pct < wiper_max_pct <= 100",
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
    if !p.vce_min_v.is_finite() || p.vce_min_v < 0.0 {
        return err(&["pass", "vce_min_v"], "minimum V_CE must be 0 V or more");
    }
    finite_pos(
        p.power_rating_w,
        &["pass", "power_rating_w"],
        "power rating",
    )?;
    finite_pos(p.theta_jc, &["pass", "theta_jc"], "theta_jc")?;
    if !p.theta_cs.is_finite() || p.theta_cs < 0.0 {
        return err(&["pass", "theta_cs"], "theta_cs must be 0 or more");
    }
    if let Some(t) = p.theta_sa {
        if !t.is_finite() || t < 0.0 {
            return err(&["pass", "theta_sa"], "theta_sa must be 0 or more");
        }
    }
    if !p.tj_max_c.is_finite() || p.tj_max_c <= d.environment.ambient_max_c {
        return err(
            &["pass", "tj_max_c"],
            "T_j max must be above the highest ambient temperature",
        );
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
    finite_pos(
        d.load.max_current_a,
        &["load", "max_current_a"],
        "maximum load current",
    )?;
    Ok(())
}

/// The auxiliary rail: voltage, current, ratings, collector share and swing loss.
pub fn aux(d: &Design) -> Checked {
    if let Some(a) = &d.aux {
        finite_pos(a.volts, &["aux", "volts"], "aux rail voltage")?;
        finite_pos(a.current_a, &["aux", "current_a"], "aux rail current")?;
        finite_pos(
            a.transistor_rating_w,
            &["aux", "transistor_rating_w"],
            "power rating",
        )?;
        if !(0.0..0.9 + 1e-12).contains(&a.collector_share) {
            return err(
                &["aux", "collector_share"],
                "collector_share must be between 0 and 0.9",
            );
        }
        if let Some(w) = a.collector_resistor_rating_w {
            finite_pos(w, &["aux", "collector_resistor_rating_w"], "power rating")?;
        }
        if !a.amplifier_swing_loss_v.is_finite() || a.amplifier_swing_loss_v < 0.0 {
            return err(
                &["aux", "amplifier_swing_loss_v"],
                "swing loss must be 0 V or more",
            );
        }
    }
    Ok(())
}

/// The environment: ordered ambients and a plausible junction temperature coefficient.
pub fn environment(d: &Design) -> Checked {
    let e = &d.environment;
    if !(e.ambient_min_c <= e.ambient_c && e.ambient_c <= e.ambient_max_c) {
        return err(
            &["environment", "ambient_c"],
            "ambient temperatures must satisfy ambient_min_c <= ambient_c <= ambient_max_c",
        );
    }
    if !e.junction_tempco_mv_per_c.is_finite() || e.junction_tempco_mv_per_c.abs() > 10.0 {
        return err(
            &["environment", "junction_tempco_mv_per_c"],
            "junction temperature coefficient should be about -2 mV/degC (-10 to 10 accepted)",
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
        if !v.is_finite() || v <= 0.0 || v > 1.0 {
            return err(
                &["rules", key],
                "derating must be a fraction above 0 and at most 1 (0.5 = half rating)",
            );
        }
    }
    if ru.monte_carlo_samples == 0 || ru.monte_carlo_samples > 10_000_000 {
        return err(
            &["rules", "monte_carlo_samples"],
            "Monte Carlo samples must be between 1 and 10,000,000",
        );
    }
    if !ru.tj_margin_c.is_finite() || ru.tj_margin_c < 0.0 {
        return err(&["rules", "tj_margin_c"], "margin must be 0 or more");
    }
    if !ru.headroom_margin_v.is_finite() || ru.headroom_margin_v < 0.0 {
        return err(&["rules", "headroom_margin_v"], "margin must be 0 or more");
    }
    Ok(())
}
