//! The self-contained HTML report of one record: run metadata, instrument identities, safety
//! cautions, the metrics-against-design table with verdicts (words, not only colours), likely
//! causes, drift flags and the plots as inline SVG. No scripts, no external files. Writes to
//! a generic writer; must not touch the file system.

use super::Summary;
use crate::compare::Verdict;
use crate::quantity::eng;
use crate::record::RunInfo;
use crate::station::FloorResult;
use std::io::Write;

/// Escape text for HTML element content and attribute values.
pub fn escape(s: &str) -> String {
    let mut o = String::with_capacity(s.len());
    for c in s.chars() {
        match c {
            '&' => o.push_str("&amp;"),
            '<' => o.push_str("&lt;"),
            '>' => o.push_str("&gt;"),
            '"' => o.push_str("&quot;"),
            '\'' => o.push_str("&#39;"),
            _ => o.push(c),
        }
    }
    o
}

const STYLE: &str = "body{font-family:sans-serif;margin:24px;max-width:1100px;color:#111}\
h1{font-size:1.5em;margin-bottom:4px}h2{font-size:1.15em;margin-top:28px;border-bottom:1px solid #888}\
table{border-collapse:collapse;margin:8px 0}td,th{border:1px solid #999;padding:4px 8px;text-align:left}\
th{background:#eee}td.num{text-align:right;font-variant-numeric:tabular-nums}\
.v-pass{background:#dff0d8}.v-marginal{background:#fcf3cf;font-weight:bold}\
.v-fail{background:#f2d7d5;font-weight:bold;text-decoration:underline}\
.v-incomplete,.v-error{background:#e5e5e5;font-weight:bold;font-style:italic}\
.caution{border:2px solid #444;padding:8px 12px;background:#f7f7f7}\
figure{margin:12px 0}figcaption{font-size:.9em;color:#333}svg{max-width:100%;height:auto}";

/// Shared by the certificate and the report: the large verdict banner and its colours.
pub const BANNER_STYLE: &str =
    ".banner{border:6px solid #111;padding:10px 18px;margin:10px 0 16px;\
display:flex;justify-content:space-between;align-items:center}\
.banner .word{font-size:64px;font-weight:900;letter-spacing:6px;line-height:1}\
.banner .what{font-size:15px;text-align:right}\
.r-pass{background:#dff0d8}.r-marginal{background:#fcf3cf}.r-fail{background:#f2d7d5}\
.r-incomplete{background:#e5e5e5}.r-error{background:#e5e5e5}\
@media print{.banner{-webkit-print-color-adjust:exact;print-color-adjust:exact}}";

/// The verdict banner as an HTML fragment: the word, large, and what it is about.
pub fn banner_html(result: FloorResult, unit: &str, detail: &str) -> String {
    format!(
        "<div class=\"banner r-{}\" id=\"verdict-banner\"><span class=\"word\">{}</span>\
<span class=\"what\">unit <b>{}</b><br>{}</span></div>",
        result.as_str(),
        result.word(),
        escape(unit),
        escape(detail)
    )
}

/// Printing: A4, smaller type, the plots two to a row and nothing split across pages, so a
/// report prints on two pages or so instead of five.
const PRINT_STYLE: &str = "@page{size:A4;margin:12mm}@media print{body{margin:0;max-width:none;\
font-size:10px}h2{margin-top:10px;font-size:12px}td,th{padding:2px 5px}\
figure{display:inline-block;width:48%;margin:4px 0;vertical-align:top;page-break-inside:avoid}\
table,.caution,ul{page-break-inside:avoid}.caution{padding:4px 8px}\
th,td[class^=v-]{-webkit-print-color-adjust:exact;print-color-adjust:exact}}";

/// The floor result a summary stands for: its overall verdict, by the one rule.
fn floor_result_of(s: &Summary) -> FloorResult {
    crate::floor::from_verdict(s.verdict)
}

fn verdict_cell(v: Verdict) -> String {
    let word = v.label();
    format!("<td class=\"v-{}\">{word}</td>", v.as_str())
}

fn opt(v: Option<f64>, unit: &str) -> String {
    v.map(|x| eng(x, unit))
        .unwrap_or_else(|| "not measured".into())
}

/// Write the report page.
pub fn write_html<W: Write>(
    mut w: W,
    info: &RunInfo,
    s: &Summary,
    svgs: &[(&str, &str, String)],
) -> std::io::Result<()> {
    let e = escape;
    writeln!(
        w,
        "<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
    )?;
    writeln!(
        w,
        "<title>regulus report: unit {} / {}</title><style>{STYLE}{PRINT_STYLE}{}</style></head><body>",
        e(&info.unit),
        e(&info.plan_name),
        BANNER_STYLE
    )?;
    let mut overall = match s.verdict {
        Some(v) => format!(
            "<table><tr><th>Overall verdict</th>{}</tr></table>",
            verdict_cell(v)
        ),
        None => "<p>No design expectation was given: metrics only, no verdict.</p>".into(),
    };
    // Why the outcome is not a plain pass, and steps the plan ran beyond the design.
    for (title, lines) in [("Why", &s.reasons), ("Beyond the design", &s.beyond_design)] {
        if !lines.is_empty() {
            let items: String = lines.iter().map(|r| format!("<li>{}</li>", e(r))).collect();
            overall.push_str(&format!(
                "<p>{title}:</p><ul class=\"reasons\">{items}</ul>"
            ));
        }
    }
    writeln!(
        w,
        "<h1>Unit {} &mdash; plan {}</h1>\n{}\n{overall}",
        e(&info.unit),
        e(&info.plan_name),
        banner_html(
            floor_result_of(s),
            &info.unit,
            &format!("design {}", info.design.name)
        )
    )?;
    match s.record_state.as_str() {
        "incomplete" => writeln!(
            w,
            "<p id=\"state\"><strong>Incomplete record:</strong> the run stopped without \
             finishing run.json (no process holds it). The figures below cover only the rows \
             taken.</p>"
        )?,
        "running" => writeln!(
            w,
            "<p id=\"state\"><strong>Run in progress:</strong> a process is still writing this \
             record; the figures below cover the rows taken so far.</p>"
        )?,
        _ => {}
    }
    writeln!(
        w,
        "<div class=\"caution\" id=\"cautions\"><strong>Cautions.</strong> Supplies under test \
         can carry mains voltages, pass devices and heatsinks get hot, and short-circuit tests \
         deliver large currents. Disconnect mains before touching the unit, let heatsinks cool, \
         rate leads and loads for the short-circuit current, and follow local codes and \
         licensed practice; this report does not replace them.</div>"
    )?;

    // Run metadata.
    writeln!(w, "<h2>Run</h2><table id=\"run\">")?;
    let rows: [(&str, String); 10] = [
        ("Unit", info.unit.clone()),
        ("Plan", info.plan_name.clone()),
        (
            "Design",
            format!(
                "{} ({}, sha256 {})",
                info.design.name, info.design.path, info.design.sha256
            ),
        ),
        ("Started (UTC)", info.started_utc.clone()),
        (
            "Ended (UTC)",
            info.ended_utc.clone().unwrap_or_else(|| "-".into()),
        ),
        ("Outcome", super::outcome_str(info.outcome).to_string()),
        ("Reason", info.reason.clone().unwrap_or_else(|| "-".into())),
        (
            "Operator",
            info.operator.clone().unwrap_or_else(|| "-".into()),
        ),
        ("Note", info.note.clone().unwrap_or_else(|| "-".into())),
        (
            "Rows",
            format!("{} (tool {})", info.rows, info.tool_version),
        ),
    ];
    for (k, v) in rows {
        writeln!(w, "<tr><th>{k}</th><td>{}</td></tr>", e(&v))?;
    }
    writeln!(w, "</table>")?;

    writeln!(
        w,
        "<h2>Instruments</h2><table id=\"instruments\"><tr><th>Name</th><th>Roles</th><th>Link</th><th>Identity</th></tr>"
    )?;
    for i in &info.instruments {
        let roles: Vec<&str> = i.roles.iter().map(|r| r.as_str()).collect();
        writeln!(
            w,
            "<tr><td>{}</td><td>{}</td><td>{}</td><td>{}</td></tr>",
            e(&i.name),
            e(&roles.join(", ")),
            e(&i.link),
            e(i.identity.as_deref().unwrap_or("not queried"))
        )?;
    }
    writeln!(w, "</table>")?;

    // Comparison with the design.
    if let Some(c) = &s.comparison {
        // An expectation with as-built bands judges by them; an older one by the envelope.
        let as_built = c.judged_as_built();
        writeln!(
            w,
            "<h2>Measured against design {}</h2><table id=\"verdicts\"><tr><th>Metric</th><th>Measured</th>\
             <th>Nominal</th><th>Worst case{}</th><th>Monte Carlo band</th><th>Margin</th><th>Deviation</th><th>Verdict</th>\
             <th>Operating envelope</th></tr>",
            e(&c.design_name),
            if as_built { " (as built)" } else { "" }
        )?;
        for ch in &c.checks {
            writeln!(
                w,
                "<tr><td>{}</td><td class=\"num\">{}</td><td class=\"num\">{}</td><td class=\"num\">{} &ndash; {}</td>\
                 <td class=\"num\">{} &ndash; {}</td><td class=\"num\">{} ({:+.1} %)</td><td class=\"num\">{:+.1} %</td>{}\
                 <td class=\"num\">{}</td></tr>",
                e(&ch.metric.replace('_', " ")),
                eng(ch.measured, &ch.unit),
                eng(ch.nominal, &ch.unit),
                eng(ch.worst_case.min, &ch.unit),
                eng(ch.worst_case.max, &ch.unit),
                eng(ch.monte_carlo_band.min, &ch.unit),
                eng(ch.monte_carlo_band.max, &ch.unit),
                eng(ch.margin, &ch.unit),
                ch.margin_percent,
                ch.deviation_percent,
                verdict_cell(ch.verdict),
                ch.envelope
                    .map(|x| format!(
                        "{} &ndash; {}",
                        eng(x.min, &ch.unit),
                        eng(x.max, &ch.unit)
                    ))
                    .unwrap_or_else(|| "&ndash;".to_string())
            )?;
        }
        writeln!(w, "</table>")?;
        let bases: Vec<_> = c
            .checks
            .iter()
            .filter_map(|ch| Some((&ch.metric, ch.band_basis.as_ref()?)))
            .collect();
        if !bases.is_empty() {
            writeln!(w, "<ul class=\"bases\">")?;
            for (m, b) in bases {
                writeln!(w, "<li>{}: band {}</li>", e(&m.replace('_', " ")), e(b))?;
            }
            writeln!(w, "</ul>")?;
        }
        writeln!(
            w,
            "<p>{} Pass: inside the Monte Carlo band. Marginal: inside \
             the worst case, outside the Monte Carlo band. Fail: outside the worst case. Margin: \
             distance to the nearer worst-case limit (negative outside), percent of nominal.</p>",
            if as_built {
                "Bands are the design's as-built bands (part tolerances at its room and input, \
                 at the temperatures listed above); the operating envelope (ambient range and \
                 line too) is shown for reference."
            } else {
                "Bands are the design's operating envelope (part tolerances, ambient range and \
                 line)."
            }
        )?;
        if !c.not_measured.is_empty() {
            writeln!(w, "<p>Not measured: {}</p>", e(&c.not_measured.join(", ")))?;
        }
        if !c.likely_causes.is_empty() {
            writeln!(w, "<h2>Likely causes</h2><ul id=\"causes\">")?;
            for cause in &c.likely_causes {
                writeln!(w, "<li>{}</li>", e(cause))?;
            }
            writeln!(w, "</ul>")?;
        }
    }

    // Metrics.
    let m = &s.metrics;
    writeln!(
        w,
        "<h2>Metrics</h2><table id=\"metrics\"><tr><th>Metric</th><th>Value</th><th>How</th></tr>"
    )?;
    let mut mrow = |name: &str, value: String, how: String| -> std::io::Result<()> {
        writeln!(
            w,
            "<tr><td>{}</td><td class=\"num\">{}</td><td>{}</td></tr>",
            e(name),
            e(&value),
            e(&how)
        )
    };
    mrow(
        "No-load voltage",
        opt(m.no_load.map(|p| p.voltage), "V"),
        m.no_load
            .map(|p| format!("load sweep point at {}", eng(p.current, "A")))
            .unwrap_or_default(),
    )?;
    mrow(
        "Full-load voltage",
        opt(m.full_load.map(|p| p.voltage), "V"),
        m.full_load
            .map(|p| format!("at {}", eng(p.current, "A")))
            .unwrap_or_default(),
    )?;
    mrow(
        "Load regulation",
        m.load_regulation
            .map(|r| format!("{:.3} %", r.percent))
            .unwrap_or_else(|| "not measured".into()),
        m.load_regulation
            .map(|r| {
                format!(
                    "(V_NL - V_FL) / V_ref, V_ref = {} voltage {}",
                    r.reference.label(),
                    eng(r.reference_voltage, "V")
                )
            })
            .unwrap_or_default(),
    )?;
    mrow(
        "Output resistance",
        m.output_resistance
            .map(|r| {
                let u = r
                    .std_uncertainty
                    .map(|u| format!(" +- {}", eng(u, "ohm")))
                    .unwrap_or_default();
                format!("{}{u}", eng(r.ohms, "ohm"))
            })
            .unwrap_or_else(|| "not measured".into()),
        m.output_resistance
            .map(|r| {
                format!(
                    "least-squares fit over {} points (standard uncertainty)",
                    r.points
                )
            })
            .unwrap_or_default(),
    )?;
    if let Some(k) = &m.knee {
        mrow(
            "Knee (fixed drop)",
            opt(k.fixed_drop.map(|p| p.current), "A"),
            format!(
                "first crossing below {} ({:.1} % drop), interpolated",
                eng(k.threshold_voltage, "V"),
                k.drop_fraction * 100.0
            ),
        )?;
        mrow(
            "Knee (two-segment fit)",
            opt(k.two_segment.map(|p| p.current), "A"),
            k.two_segment
                .map(|p| {
                    format!(
                        "regulation line meets limit line at {}",
                        eng(p.voltage, "V")
                    )
                })
                .unwrap_or_default(),
        )?;
    }
    if let Some(sc) = &m.short_circuit {
        mrow(
            "Short-circuit current (start / end)",
            format!(
                "{} / {}",
                eng(sc.start_current, "A"),
                eng(sc.end_current, "A")
            ),
            format!("dwell {:.1} s, {} points", sc.dwell_s, sc.points),
        )?;
        mrow(
            "Short-circuit drift",
            format!(
                "{:+.2} % ({} per s)",
                sc.drift_percent,
                eng(sc.drift_a_per_s, "A")
            ),
            "(end - start) / start".into(),
        )?;
        mrow(
            "Thermal time constant",
            sc.time_constant
                .map(|f| format!("{:.1} s", f.tau_s))
                .unwrap_or_else(|| "no settling seen".into()),
            sc.time_constant
                .map(|f| {
                    format!(
                        "I(t) = I_inf + (I_0 - I_inf) exp(-t/tau); I_0 {}, I_inf {}",
                        eng(f.i_0, "A"),
                        eng(f.i_inf, "A")
                    )
                })
                .unwrap_or_default(),
        )?;
        if let Some(r) = sc.recovered {
            mrow(
                "Recovery after the short",
                if r { "recovered" } else { "DID NOT RECOVER" }.into(),
                "output back above the knee threshold".into(),
            )?;
        }
    }
    if let Some(f) = m.foldback_ratio {
        mrow(
            "Foldback ratio",
            format!("{f:.3}"),
            "I_sc / I_knee (fixed drop)".into(),
        )?;
    }
    if let Some(l) = &m.line_regulation {
        mrow(
            "Line regulation",
            format!("{:.3} % ({:.4} %/V)", l.percent, l.percent_per_volt),
            format!(
                "fitted change {} over {} to {}, V_ref = {} voltage {}",
                eng(l.delta_output, "V"),
                eng(l.input_low, "V"),
                eng(l.input_high, "V"),
                l.reference.label(),
                eng(l.reference_voltage, "V")
            ),
        )?;
    }
    if let Some(t) = m.max_temperature {
        mrow(
            "Highest temperature",
            eng(t, "degC"),
            "pass device case".into(),
        )?;
    }
    writeln!(w, "</table>")?;
    if !m.notes.is_empty() {
        writeln!(w, "<ul id=\"notes\">")?;
        for n in &m.notes {
            writeln!(w, "<li>{}</li>", e(n))?;
        }
        writeln!(w, "</ul>")?;
    }

    writeln!(w, "<h2>Drift</h2>")?;
    if s.drift.is_empty() {
        writeln!(
            w,
            "<p id=\"drift\">No drift flags against this unit's earlier records.</p>"
        )?;
    } else {
        writeln!(w, "<ul id=\"drift\">")?;
        for f in &s.drift {
            writeln!(w, "<li>DRIFT: {}</li>", e(&f.message))?;
        }
        writeln!(w, "</ul>")?;
    }

    writeln!(w, "<h2>Plots</h2>")?;
    for (name, caption, svg) in svgs {
        // Drop the XML declaration if present; the SVG element itself is inlined.
        let body = svg.find("<svg").map(|i| &svg[i..]).unwrap_or(svg.as_str());
        writeln!(
            w,
            "<figure id=\"plot-{}\">{body}<figcaption>{}</figcaption></figure>",
            e(name),
            e(caption)
        )?;
    }
    writeln!(
        w,
        "<p>Summary schema version {}; regenerate with <code>regulus report</code>.</p></body></html>",
        s.schema_version
    )?;
    Ok(())
}
