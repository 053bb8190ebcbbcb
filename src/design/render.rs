//! Human-readable rendering of an [`Expectation`]: a table with engineering units and a
//! verdict per check. Writes to any `io::Write` so output can be checked byte for byte.

use super::expect::{Expectation, Verdict};
use super::file::{Clamp, Design};
use super::heating::Solved;
use super::tolerance::Band;
use crate::quantity::{eng, sig3};
use std::io::{self, Write};

fn band_row(w: &mut impl Write, label: &str, b: &Band, unit: &str) -> io::Result<()> {
    let line = format!(
        "  {:<24}{:>10}   {:>10} .. {:<10}   {:>10} .. {:<10}",
        label,
        eng(b.nominal, unit),
        eng(b.worst_case.min, unit),
        eng(b.worst_case.max, unit),
        eng(b.monte_carlo.p_low, unit),
        eng(b.monte_carlo.p_high, unit),
    );
    writeln!(w, "{}", line.trim_end())
}

fn clamp_text(d: &Design) -> String {
    let stage = match d.pass.stage {
        super::file::Stage::Single => "single pass transistor",
        super::file::Stage::Darlington => "Darlington pass stage",
    };
    match d.limit.clamp {
        Clamp::DiodeString => format!(
            "diode-string clamp ({} diodes), {stage}",
            d.limit.diodes.unwrap_or(0)
        ),
        Clamp::Transistor => format!("transistor limiter, {stage}"),
        Clamp::Foldback => format!("foldback limiter, {stage}"),
    }
}

/// Render the expectation as a table.
pub fn table(w: &mut impl Write, d: &Design, e: &Expectation) -> io::Result<()> {
    let rev = d
        .design
        .revision
        .as_deref()
        .map(|r| format!("  (revision {r})"))
        .unwrap_or_default();
    writeln!(w, "{}{}", d.design.name, rev)?;
    writeln!(
        w,
        "{}; Monte Carlo {} units, seed {}",
        clamp_text(d),
        e.monte_carlo_samples,
        e.seed
    )?;
    writeln!(w)?;
    let header = format!(
        "  {:<24}{:>10}   {:^24}   {:^24}",
        "", "nominal", "worst case", "Monte Carlo (+-3 sigma)"
    );
    writeln!(w, "{}", header.trim_end())?;
    if e.vout.adjustable {
        band_row(w, "output, lowest", &e.vout.min_band, "V")?;
        band_row(w, "output, highest", &e.vout.max_band, "V")?;
        if (e.vout.setting - e.vout.max).abs() > 1e-9 {
            band_row(w, "output, at setting", &e.vout.setting_band, "V")?;
        }
    } else {
        band_row(w, "output", &e.vout.setting_band, "V")?;
    }
    band_row(w, "clamp threshold", &e.sense_voltage, "V")?;
    band_row(w, "limit knee", &e.limit_current, "A")?;
    band_row(w, "short-circuit current", &e.short_circuit_current, "A")?;
    writeln!(
        w,
        "  as built (part tolerances only, at {} and the nominal input; the bench judges by these):",
        eng(e.as_built.ambient_c, "degC")
    )?;
    band_row(w, "  output", &e.as_built.vout, "V")?;
    let a = &e.as_built;
    if a.limit_current_heated.worst_case.max > a.limit_current.worst_case.max + 1e-6 {
        band_row(w, "  limit knee, cold", &a.limit_current, "A")?;
        band_row(w, "  knee, cold to settled", &a.limit_current_heated, "A")?;
        writeln!(
            w,
            "    (a reading with the case temperature is judged by the cold band moved to its \
             junction; without one, cold to settled, the pass junction up to {:.0} degC)",
            a.knee_settled_junction_c
        )?;
    } else {
        band_row(w, "  limit knee", &a.limit_current, "A")?;
    }
    band_row(w, "  short-circuit current", &a.short_circuit_current, "A")?;
    if d.limit.clamp == Clamp::Foldback {
        writeln!(
            w,
            "  {:<24}{:>10}   (short-circuit / knee)",
            "foldback ratio",
            sig3(e.foldback_ratio)
        )?;
    }
    writeln!(w)?;
    writeln!(
        w,
        "input: {} nominal, {} highest (high line, no load), {} lowest (low line, full load, bottom of {} ripple)",
        eng(e.input.nominal_v, "V"),
        eng(e.input.max_v, "V"),
        eng(e.input.min_v, "V"),
        eng(e.input.ripple_v, "V"),
    )?;
    if let Some(r) = &e.input.rectifier {
        writeln!(
            w,
            "input stage: secondary {} no load, {} at rated load; bridge {} peaks over {:.0} degrees, {} average, {} dissipated; reservoir ripple {} RMS{}",
            eng(r.secondary_no_load_vrms, "V"),
            eng(r.secondary_full_load_vrms, "V"),
            eng(r.peak_current_a, "A"),
            r.conduction_angle_deg,
            eng(r.average_current_a, "A"),
            eng(r.dissipation_w, "W"),
            eng(r.ripple_current_a, "A"),
            r.surge_current_a
                .map(|s| format!("; switch-on surge {}", eng(s, "A")))
                .unwrap_or_default()
        )?;
    }
    writeln!(w)?;
    writeln!(
        w,
        "  {:<24}{:>10}{:>10}{:>10}{:>11}   condition",
        "dissipation", "worst", "rated", "allowed", "suggested"
    )?;
    for (name, s) in &e.dissipation {
        let opt = |v: Option<f64>| v.map(|x| eng(x, "W")).unwrap_or_else(|| "-".into());
        writeln!(
            w,
            "  {:<24}{:>10}{:>10}{:>10}{:>11}   {}",
            name,
            eng(s.watts, "W"),
            opt(s.rating_watts),
            opt(s.allowed_watts),
            opt(s.suggested_rating_watts),
            s.condition
        )?;
    }
    writeln!(w)?;
    let sink = if e.thermal.max_theta_sa < 0.0 {
        "none can: reduce the worst-case dissipation (lower input, lower limit, foldback) or share it"
            .to_string()
    } else {
        eng(e.thermal.max_theta_sa, "degC/W")
    };
    match (e.junction_temp_c, e.thermal.theta_total) {
        (Some(tj), Some(th)) => writeln!(
            w,
            "thermal: pass device T_j {} at {} ambient through {} total; largest heatsink for T_j <= {}: {}",
            eng(tj, "degC"),
            eng(e.thermal.self_heated.worst.ambient_c, "degC"),
            eng(th, "degC/W"),
            eng(d.pass.tj_max_c - d.rules.tj_margin_c, "degC"),
            sink,
        )?,
        _ => writeln!(
            w,
            "thermal: no heatsink given; largest heatsink for T_j <= {}: {}",
            eng(d.pass.tj_max_c - d.rules.tj_margin_c, "degC"),
            sink,
        )?,
    }
    self_heated(w, e)?;
    writeln!(w)?;
    writeln!(w, "checks")?;
    for c in &e.checks {
        let pct = if c.limit.abs() > 1e-12 {
            format!(" ({:+.1} %)", 100.0 * c.margin / c.limit.abs())
        } else {
            String::new()
        };
        writeln!(
            w,
            "  {:<9}{:<34}{:>10} against {:<10} margin {}{}",
            c.verdict.as_str(),
            c.name,
            eng(c.value, &c.unit),
            eng(c.limit, &c.unit),
            signed_eng(c.margin, &c.unit),
            pct
        )?;
    }
    let overall = e.verdict();
    writeln!(w)?;
    writeln!(
        w,
        "overall: {}{}",
        overall.as_str(),
        match overall {
            Verdict::Ok => "",
            Verdict::Marginal => " (inside ratings, outside the margins the rules ask for)",
            Verdict::Fail => " (a check is outside its limit: see above)",
        }
    )?;
    Ok(())
}

fn signed_eng(v: f64, unit: &str) -> String {
    let s = eng(v, unit);
    if v >= 0.0 {
        format!("+{s}")
    } else {
        s
    }
}

fn solved_row(w: &mut impl Write, label: &str, s: &Solved) -> io::Result<()> {
    let state = if !s.settled {
        "  (does not settle: runaway)"
    } else if !s.below_tj_max {
        "  (above T_j max)"
    } else {
        ""
    };
    writeln!(
        w,
        "  {:<34}{:>9} {:>9}   T_j {:>9}   at {} ambient, input {}{}",
        label,
        eng(s.current_a, "A"),
        eng(s.pass_watts, "W"),
        eng(s.pass_junction_c, "degC"),
        eng(s.ambient_c, "degC"),
        eng(s.input_v, "V"),
        state
    )
}

/// The self-heated operating points and the assumptions behind them.
fn self_heated(w: &mut impl Write, e: &Expectation) -> io::Result<()> {
    let sh = &e.thermal.self_heated;
    writeln!(w)?;
    writeln!(
        w,
        "self-heated (clamp and thermal relations solved together, per corner):"
    )?;
    solved_row(w, "sustained short, nominal unit", &sh.short_nominal)?;
    solved_row(w, "sustained short, hottest corner", &sh.short_worst)?;
    solved_row(w, "limit knee, nominal unit", &sh.knee_nominal)?;
    solved_row(w, "limit knee, hottest corner", &sh.knee_worst)?;
    writeln!(
        w,
        "  settled limit over the corners: knee {} .. {}, short {} .. {}",
        eng(sh.knee_current.min, "A"),
        eng(sh.knee_current.max, "A"),
        eng(sh.short_current.min, "A"),
        eng(sh.short_current.max, "A"),
    )?;
    writeln!(w, "  assuming:")?;
    for a in &sh.assumptions {
        writeln!(w, "    - {a}")?;
    }
    for (label, dw) in [
        ("nominal unit", &sh.short_dwell_nominal),
        ("hottest corner", &sh.short_dwell_worst),
    ] {
        let Some(dw) = dw else { continue };
        let last = dw.curve.last().map(|p| p.1).unwrap_or(dw.start_junction_c);
        let verdict = match dw.longest_s {
            Some(t) => format!(
                "T_j max {} after {} of short",
                eng(dw.limit_c, "degC"),
                eng(t, "s")
            ),
            None => format!(
                "no limit (the short settles at {}, below T_j max)",
                eng(last, "degC")
            ),
        };
        writeln!(
            w,
            "  short dwell, {label}: {verdict}; from the rated-load steady state (T_j {}, case {}, sink {})",
            eng(dw.start_junction_c, "degC"),
            eng(dw.start_case_c, "degC"),
            eng(dw.start_sink_c, "degC")
        )?;
        let marks: Vec<String> = [1.0, 10.0, 60.0, 600.0]
            .iter()
            .filter_map(|t| dw.curve.iter().find(|p| p.0 >= *t))
            .map(|p| {
                format!(
                    "{}: T_j {} case {}",
                    eng(p.0, "s"),
                    eng(p.1, "degC"),
                    eng(p.2, "degC")
                )
            })
            .collect();
        if !marks.is_empty() {
            writeln!(w, "    {}", marks.join("; "))?;
        }
    }
    if let Some(points) = &e.soa {
        writeln!(
            w,
            "  safe operating area (DC line derated with case temperature):"
        )?;
        for p in points.iter().take(6) {
            writeln!(
                w,
                "    {:<44}{:>9} at V_CE {:>8}, case {:>9}: allowed {}",
                p.condition,
                eng(p.current_a, "A"),
                eng(p.vce, "V"),
                eng(p.case_c, "degC"),
                eng(p.allowed_a, "A")
            )?;
        }
    }
    let dr = &e.drive;
    if let (Some(vce), Some(rail)) = (dr.aux_vce_at_lowest_input_v, dr.aux_rail_at_lowest_input_v) {
        writeln!(
            w,
            "  aux rail at the lowest input: transistor V_CE {} after the {} collector resistor; rail {}",
            eng(vce, "V"),
            eng(dr.collector_ohms.unwrap_or(0.0), "ohm"),
            eng(rail, "V")
        )?;
    }
    if let (Some(rated), Some(lim)) = (dr.base_drive_at_rated_a, dr.base_drive_at_limit_a) {
        writeln!(
            w,
            "  pass stage drive: {} at rated load, {} at the highest settled limit{}",
            eng(rated, "A"),
            eng(lim, "A"),
            match (dr.amplifier_output_a, dr.clamp_sink_a) {
                (Some(a), Some(c)) => format!(
                    "; the amplifier gives {}, the clamp sinks up to {}",
                    eng(a, "A"),
                    eng(c, "A")
                ),
                _ => String::new(),
            }
        )?;
    }
    Ok(())
}
