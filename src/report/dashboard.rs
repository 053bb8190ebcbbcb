//! The batch dashboard: one self-contained HTML page (inline SVG, no scripts) over many runs
//! of a design: counts per floor result, yield per day, an individuals and moving-range
//! control chart per key metric, histograms whose bins never straddle a specification limit
//! (limits fall on bin edges) with the legend outside the plotting area, Cpk with its 95 %
//! bounds, and the points outside the control limits. Pure: runs in, HTML out.

use super::html::escape;
use crate::capability;
use crate::compare::{KeyMetric, KeyValues};
use crate::quantity::eng;
use crate::station::FloorResult;
use std::fmt::Write as _;
use std::io::Write;

/// One run on the dashboard.
#[derive(Debug, Clone)]
pub struct DashRun {
    pub unit: String,
    pub station: Option<String>,
    /// RFC 3339 UTC.
    pub started_utc: String,
    pub result: FloorResult,
    pub values: KeyValues,
}

/// A metric's specification limits (the design's worst-case band).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct SpecLimits {
    pub metric: KeyMetric,
    pub lower: f64,
    pub upper: f64,
}

const W: f64 = 640.0;
const H: f64 = 220.0;
const ML: f64 = 70.0;
const MR: f64 = 20.0;
const MT: f64 = 14.0;
const MB: f64 = 34.0;

const STYLE: &str = "body{font-family:sans-serif;margin:24px;max-width:1100px;color:#111}\
h1{font-size:1.5em}h2{font-size:1.15em;margin-top:26px;border-bottom:1px solid #888}\
table{border-collapse:collapse;margin:8px 0}td,th{border:1px solid #999;padding:3px 8px;text-align:left}\
th{background:#eee}td.num{text-align:right;font-variant-numeric:tabular-nums}\
figure{display:inline-block;margin:6px 8px 6px 0;vertical-align:top}figcaption{font-size:.85em}\
svg text{font-family:sans-serif;font-size:11px}\
@media print{figure{page-break-inside:avoid}}";

struct Scale {
    lo: f64,
    hi: f64,
}

impl Scale {
    fn new(values: impl Iterator<Item = f64>) -> Scale {
        let (mut lo, mut hi) = (f64::INFINITY, f64::NEG_INFINITY);
        for v in values.filter(|v| v.is_finite()) {
            lo = lo.min(v);
            hi = hi.max(v);
        }
        if !lo.is_finite() {
            return Scale { lo: 0.0, hi: 1.0 };
        }
        let pad = if hi > lo {
            (hi - lo) * 0.06
        } else {
            lo.abs().max(1e-9) * 0.05
        };
        Scale {
            lo: lo - pad,
            hi: hi + pad,
        }
    }
    fn y(&self, v: f64) -> f64 {
        MT + (H - MT - MB) * (1.0 - (v - self.lo) / (self.hi - self.lo))
    }
    fn x(&self, v: f64) -> f64 {
        ML + (W - ML - MR) * (v - self.lo) / (self.hi - self.lo)
    }
}

fn svg_open(s: &mut String, id: &str, height: f64) {
    let _ = write!(
        s,
        "<svg id=\"{id}\" xmlns=\"http://www.w3.org/2000/svg\" width=\"{W}\" height=\"{height}\" \
viewBox=\"0 0 {W} {height}\"><rect x=\"{ML}\" y=\"{MT}\" width=\"{}\" height=\"{}\" fill=\"#fafafa\" stroke=\"#888\"/>",
        W - ML - MR,
        H - MT - MB
    );
}

fn hline(s: &mut String, y: f64, colour: &str, dash: &str, label: &str) {
    hline_labelled_at(s, y, y, colour, dash, label);
}

/// A horizontal line at `y` with its label at `label_y` (moved off a neighbour's label).
fn hline_labelled_at(s: &mut String, y: f64, label_y: f64, colour: &str, dash: &str, label: &str) {
    let _ = write!(
        s,
        "<line x1=\"{ML}\" x2=\"{}\" y1=\"{y:.1}\" y2=\"{y:.1}\" stroke=\"{colour}\" stroke-dasharray=\"{dash}\"/>\
<text x=\"{}\" y=\"{:.1}\" text-anchor=\"end\" fill=\"{colour}\">{}</text>",
        W - MR,
        ML - 4.0,
        label_y + 4.0,
        escape(label)
    );
}

/// Smallest vertical distance between two line labels, px (about one line of the label font).
const LABEL_GAP: f64 = 11.0;

/// Label heights for lines at `ys` (any order): each label at its line, pushed down just
/// enough to clear the one above it, so close lines (a tiny spread) keep readable labels.
fn spread_labels(ys: &[f64]) -> Vec<f64> {
    let mut order: Vec<usize> = (0..ys.len()).collect();
    order.sort_by(|a, b| ys[*a].total_cmp(&ys[*b]));
    let mut out = ys.to_vec();
    let mut last = f64::NEG_INFINITY;
    for k in order {
        let y = ys[k].max(last + LABEL_GAP);
        out[k] = y;
        last = y;
    }
    out
}

/// Legend below the plotting area (never over a limit or a bar); items that do not fit on
/// one row go on a second, the rows ending at the same place.
fn legend(s: &mut String, items: &[(&str, &str)]) {
    let width = |text: &str| 26.0 + 6.5 * text.len() as f64;
    let mut rows: Vec<Vec<(&str, &str)>> = vec![Vec::new()];
    let mut x = ML;
    for &(colour, text) in items {
        if x + width(text) > W && x > ML {
            rows.push(Vec::new());
            x = ML;
        }
        if let Some(r) = rows.last_mut() {
            r.push((colour, text));
        }
        x += width(text);
    }
    let n = rows.len() as f64;
    for (k, row) in rows.iter().enumerate() {
        let y = H - 12.0 - 12.0 * (n - 1.0 - k as f64);
        let mut x = ML;
        for (colour, text) in row {
            let _ = write!(
                s,
                "<rect x=\"{x}\" y=\"{y}\" width=\"14\" height=\"3\" fill=\"{colour}\"/><text x=\"{}\" y=\"{}\">{}</text>",
                x + 18.0,
                y + 4.0,
                escape(text)
            );
            x += width(text);
        }
    }
}

/// Individuals chart (with the spec limits when known) and moving-range chart.
fn control_charts(metric: KeyMetric, values: &[f64], spec: Option<SpecLimits>) -> Option<String> {
    let c = capability::imr(values)?;
    let unit = metric.unit();
    let mut all = values.to_vec();
    all.extend([c.lcl, c.ucl]);
    if let Some(l) = spec {
        all.extend([l.lower, l.upper]);
    }
    let sc = Scale::new(all.into_iter());
    let n = values.len();
    let xs = |i: usize| ML + (W - ML - MR) * (i as f64 + 0.5) / n as f64;
    let mut s = String::new();
    svg_open(&mut s, &format!("imr-{}", metric.as_str()), H);
    let mut lines: Vec<(f64, &str, &str, String)> = vec![
        (c.center, "#333", "", format!("CL {}", eng(c.center, unit))),
        (c.ucl, "#c60", "5,3", format!("UCL {}", eng(c.ucl, unit))),
        (c.lcl, "#c60", "5,3", format!("LCL {}", eng(c.lcl, unit))),
    ];
    if let Some(l) = spec {
        lines.push((
            l.upper,
            "#b00",
            "2,2",
            format!("USL {}", eng(l.upper, unit)),
        ));
        lines.push((
            l.lower,
            "#b00",
            "2,2",
            format!("LSL {}", eng(l.lower, unit)),
        ));
    }
    let ys: Vec<f64> = lines.iter().map(|l| sc.y(l.0)).collect();
    for ((line, y), label_y) in lines.iter().zip(&ys).zip(spread_labels(&ys)) {
        hline_labelled_at(&mut s, *y, label_y, line.1, line.2, &line.3);
    }
    let pts: Vec<String> = values
        .iter()
        .enumerate()
        .map(|(i, v)| format!("{:.1},{:.1}", xs(i), sc.y(*v)))
        .collect();
    let _ = write!(
        s,
        "<polyline fill=\"none\" stroke=\"#036\" points=\"{}\"/>",
        pts.join(" ")
    );
    for (i, v) in values.iter().enumerate() {
        let out = c.outside.contains(&i);
        let _ = write!(
            s,
            "<circle cx=\"{:.1}\" cy=\"{:.1}\" r=\"{}\" fill=\"{}\"/>",
            xs(i),
            sc.y(*v),
            if out { 4.5 } else { 2.5 },
            if out { "#b00" } else { "#036" }
        );
    }
    legend(
        &mut s,
        &[
            ("#036", "individual values, in test order"),
            ("#c60", "control limits (3 sigma)"),
            ("#b00", "spec limits / outside control"),
        ],
    );
    s.push_str("</svg>");
    // Moving-range chart.
    let mr = &c.moving_ranges;
    let sc2 = Scale::new(mr.iter().copied().chain([0.0, c.mr_ucl]));
    let mut m = String::new();
    svg_open(&mut m, &format!("mr-{}", metric.as_str()), H);
    hline(
        &mut m,
        sc2.y(c.mr_bar),
        "#333",
        "",
        &format!("MR {}", eng(c.mr_bar, unit)),
    );
    hline(
        &mut m,
        sc2.y(c.mr_ucl),
        "#c60",
        "5,3",
        &format!("UCL {}", eng(c.mr_ucl, unit)),
    );
    let pts: Vec<String> = mr
        .iter()
        .enumerate()
        .map(|(i, v)| format!("{:.1},{:.1}", xs(i + 1), sc2.y(*v)))
        .collect();
    let _ = write!(
        m,
        "<polyline fill=\"none\" stroke=\"#036\" points=\"{}\"/>",
        pts.join(" ")
    );
    legend(
        &mut m,
        &[
            ("#036", "moving range of two"),
            ("#c60", "upper control limit"),
        ],
    );
    m.push_str("</svg>");
    Some(format!(
        "<figure>{s}<figcaption>{}: individuals chart</figcaption></figure>\
<figure>{m}<figcaption>{}: moving-range chart</figcaption></figure>",
        metric.as_str(),
        metric.as_str()
    ))
}

/// Bin edges for a histogram: with limits, the limits are edges (bins of width
/// (USL - LSL) / 10 stepped out from the lower limit until the data is covered), so no bin
/// straddles a limit; without limits, ten bins over the data.
pub fn bin_edges(values: &[f64], spec: Option<SpecLimits>) -> Vec<f64> {
    let (lo, hi) = values
        .iter()
        .filter(|v| v.is_finite())
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), v| {
            (a.min(*v), b.max(*v))
        });
    if !lo.is_finite() {
        return Vec::new();
    }
    match spec {
        Some(l) if l.upper > l.lower => {
            let w = (l.upper - l.lower) / 10.0;
            // Whole bins of width w from the lower limit, at most 20 beyond each limit; data
            // further out falls in one wider bin at each end.
            let first = (((lo.min(l.lower) - l.lower) / w).floor() as i64).max(-20);
            let last = (((hi.max(l.upper) - l.lower) / w).ceil() as i64).min(30);
            let mut edges: Vec<f64> = (first..=last).map(|j| l.lower + j as f64 * w).collect();
            if lo < edges[0] {
                edges.insert(0, lo);
            }
            if hi > edges[edges.len() - 1] {
                edges.push(hi);
            }
            edges
        }
        _ => {
            let w = if hi > lo {
                (hi - lo) / 10.0
            } else {
                lo.abs().max(1e-9) * 0.01
            };
            (0..=10).map(|j| lo + j as f64 * w).collect()
        }
    }
}

fn histogram(metric: KeyMetric, values: &[f64], spec: Option<SpecLimits>) -> Option<String> {
    let edges = bin_edges(values, spec);
    if edges.len() < 2 {
        return None;
    }
    let mut counts = vec![0usize; edges.len() - 1];
    for v in values {
        if let Some(i) = (0..counts.len())
            .find(|&i| *v >= edges[i] && (*v < edges[i + 1] || i + 1 == counts.len()))
        {
            counts[i] += 1;
        }
    }
    let unit = metric.unit();
    let sx = Scale {
        lo: edges[0],
        hi: edges[edges.len() - 1],
    };
    let top = counts.iter().copied().max().unwrap_or(1).max(1) as f64;
    let yc = |c: f64| MT + (H - MT - MB) * (1.0 - c / top);
    let mut s = String::new();
    svg_open(&mut s, &format!("hist-{}", metric.as_str()), H);
    for (i, c) in counts.iter().enumerate() {
        if *c == 0 {
            continue;
        }
        let x0 = sx.x(edges[i]);
        let x1 = sx.x(edges[i + 1]);
        let inside =
            spec.is_none_or(|l| edges[i] >= l.lower - 1e-12 && edges[i + 1] <= l.upper + 1e-12);
        let _ = write!(
            s,
            "<rect x=\"{x0:.1}\" y=\"{:.1}\" width=\"{:.1}\" height=\"{:.1}\" fill=\"{}\" stroke=\"#fff\"/>",
            yc(*c as f64),
            (x1 - x0).max(0.5),
            yc(0.0) - yc(*c as f64),
            if inside { "#69c" } else { "#c66" }
        );
    }
    if let Some(l) = spec {
        for (v, name) in [(l.lower, "LSL"), (l.upper, "USL")] {
            let x = sx.x(v);
            let _ = write!(
                s,
                "<line class=\"limit\" x1=\"{x:.1}\" x2=\"{x:.1}\" y1=\"{MT}\" y2=\"{}\" stroke=\"#b00\" stroke-width=\"2\"/>\
<text x=\"{x:.1}\" y=\"{}\" text-anchor=\"middle\" fill=\"#b00\">{name} {}</text>",
                H - MB,
                H - MB + 12.0,
                escape(&eng(v, unit))
            );
        }
    }
    let _ = write!(
        s,
        "<text x=\"{}\" y=\"{}\" text-anchor=\"end\">{} units max per bin</text>",
        ML - 4.0,
        MT + 10.0,
        top
    );
    legend(
        &mut s,
        &[
            ("#69c", "inside the limits"),
            ("#c66", "outside the limits"),
            ("#b00", "spec limit"),
        ],
    );
    s.push_str("</svg>");
    Some(format!(
        "<figure>{s}<figcaption>{}: histogram</figcaption></figure>",
        metric.as_str()
    ))
}

/// Write the dashboard page.
pub fn write_dashboard<W: Write>(
    mut w: W,
    title: &str,
    runs: &[DashRun],
    limits: &[SpecLimits],
) -> std::io::Result<()> {
    let e = escape;
    writeln!(
        w,
        "<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\"><title>Batch dashboard: {}</title>\
<style>{STYLE}</style></head><body><h1>Batch dashboard: {}</h1>",
        e(title),
        e(title)
    )?;
    let first = runs.first().map(|r| r.started_utc.as_str()).unwrap_or("-");
    let last = runs.last().map(|r| r.started_utc.as_str()).unwrap_or("-");
    writeln!(
        w,
        "<p>{} run(s) from {} to {} (UTC).</p>",
        runs.len(),
        e(first),
        e(last)
    )?;

    writeln!(
        w,
        "<h2>Results</h2><table id=\"counts\"><tr><th>result</th><th>runs</th></tr>"
    )?;
    for r in FloorResult::ALL {
        let n = runs.iter().filter(|x| x.result == r).count();
        writeln!(
            w,
            "<tr><td>{}</td><td class=\"num\">{n}</td></tr>",
            r.word()
        )?;
    }
    let judged = runs.iter().filter(|r| r.result.judged()).count();
    let ok = runs.iter().filter(|r| r.result.accepted()).count();
    let y = if judged > 0 {
        format!("{:.1} %", 100.0 * ok as f64 / judged as f64)
    } else {
        "-".into()
    };
    writeln!(
        w,
        "<tr><th>yield (accepted / judged)</th><td class=\"num\">{y}</td></tr></table>"
    )?;

    writeln!(w, "<h2>Yield per day</h2><table id=\"yield\"><tr><th>day (UTC)</th><th>judged</th><th>accepted</th><th>yield</th></tr>")?;
    let mut days: Vec<(String, usize, usize)> = Vec::new();
    for r in runs.iter().filter(|r| r.result.judged()) {
        let day: String = r.started_utc.chars().take(10).collect();
        match days.iter_mut().find(|d| d.0 == day) {
            Some(d) => {
                d.1 += 1;
                d.2 += usize::from(r.result.accepted());
            }
            None => days.push((day, 1, usize::from(r.result.accepted()))),
        }
    }
    for (day, n, a) in &days {
        writeln!(
            w,
            "<tr><td>{day}</td><td class=\"num\">{n}</td><td class=\"num\">{a}</td><td class=\"num\">{:.1} %</td></tr>",
            100.0 * *a as f64 / *n as f64
        )?;
    }
    writeln!(w, "</table>")?;

    writeln!(w, "<h2>Capability</h2><table id=\"capability\"><tr><th>metric</th><th>n</th><th>mean</th><th>std dev</th><th>LSL</th><th>USL</th><th>Cpk</th><th>95 % bounds</th></tr>")?;
    let mut charts = String::new();
    let mut outliers = Vec::new();
    for k in KeyMetric::ALL {
        let judged_runs: Vec<&DashRun> = runs
            .iter()
            .filter(|r| r.result.judged() && r.values.get(k).is_some_and(f64::is_finite))
            .collect();
        let vals: Vec<f64> = judged_runs.iter().filter_map(|r| r.values.get(k)).collect();
        if vals.len() < 2 {
            continue;
        }
        let spec = limits.iter().find(|l| l.metric == k).copied();
        let unit = k.unit();
        let (mean, sd) = capability::mean_sd(&vals).unwrap_or((f64::NAN, f64::NAN));
        let cpk = spec
            .filter(|_| vals.len() >= capability::MIN_N_FOR_CPK)
            .and_then(|l| capability::cpk(&vals, l.lower, l.upper));
        writeln!(
            w,
            "<tr><td>{}</td><td class=\"num\">{}</td><td class=\"num\">{}</td><td class=\"num\">{}</td><td class=\"num\">{}</td><td class=\"num\">{}</td><td class=\"num\">{}</td><td class=\"num\">{}</td></tr>",
            k.as_str(),
            vals.len(),
            e(&eng(mean, unit)),
            e(&eng(sd, unit)),
            spec.map(|l| eng(l.lower, unit)).unwrap_or_else(|| "-".into()),
            spec.map(|l| eng(l.upper, unit)).unwrap_or_else(|| "-".into()),
            match (cpk, spec) {
                (Some(c), _) => format!("{:.2}", c.cpk),
                (None, Some(_)) => format!("needs {}+ runs", capability::MIN_N_FOR_CPK),
                (None, None) => "-".into(),
            },
            cpk.map(|c| format!("{:.2} .. {:.2}", c.lower_95, c.upper_95)).unwrap_or_else(|| "-".into()),
        )?;
        if let Some(c) = capability::imr(&vals) {
            for i in &c.outside {
                let r = judged_runs[*i];
                outliers.push(format!(
                    "<tr><td>{}</td><td>{}</td><td>{}</td><td class=\"num\">{}</td><td>{}</td></tr>",
                    e(&r.unit),
                    e(r.station.as_deref().unwrap_or("-")),
                    e(&r.started_utc),
                    e(&eng(vals[*i], unit)),
                    k.as_str()
                ));
            }
        }
        charts.push_str(&format!("<h3>{}</h3>", k.as_str()));
        if let Some(cc) = control_charts(k, &vals, spec) {
            charts.push_str(&cc);
        }
        if let Some(h) = histogram(k, &vals, spec) {
            charts.push_str(&h);
        }
    }
    writeln!(w, "</table><p>Cpk = min(USL - mean, mean - LSL) / (3 s), 95 % bounds by Bissell's approximation; limits are the design's worst-case band. Only judged runs (PASS, MARGINAL, FAIL) count.</p>")?;
    writeln!(w, "<h2>Outliers (outside the individuals chart's control limits)</h2><table id=\"outliers\"><tr><th>unit</th><th>station</th><th>started (UTC)</th><th>value</th><th>metric</th></tr>")?;
    for o in &outliers {
        writeln!(w, "{o}")?;
    }
    if outliers.is_empty() {
        writeln!(w, "<tr><td colspan=\"5\">none</td></tr>")?;
    }
    writeln!(w, "</table><h2>Charts</h2>{charts}</body></html>")
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn close_lines_keep_readable_labels_in_their_order() {
        // Three lines on one pixel row (a spread far below the chart's resolution) and one far
        // off: the three labels step down one gap each, in the lines' order; the far one stays.
        let ys = [100.2, 100.0, 100.1, 30.0];
        let at = spread_labels(&ys);
        assert_eq!(at[3], 30.0);
        assert_eq!(at[1], 100.0);
        assert!((at[2] - (100.0 + LABEL_GAP)).abs() < 1e-9, "{at:?}");
        assert!((at[0] - (100.0 + 2.0 * LABEL_GAP)).abs() < 1e-9, "{at:?}");
    }

    #[test]
    fn limits_fall_on_bin_edges() {
        let spec = SpecLimits {
            metric: KeyMetric::LimitCurrent,
            lower: 1.15,
            upper: 2.21,
        };
        let values = [1.10, 1.2, 1.5, 1.7, 2.0, 2.3];
        let edges = bin_edges(&values, Some(spec));
        for limit in [spec.lower, spec.upper] {
            assert!(
                edges.iter().any(|e| (e - limit).abs() < 1e-9),
                "{limit} is not an edge of {edges:?}"
            );
        }
        assert!(
            edges[0] <= 1.10 && *edges.last().unwrap() >= 2.3,
            "{edges:?}"
        );
        // Data far outside the limits: one wide bin at each end, limits stay edges.
        let edges = bin_edges(&[-500.0, 1.5, 900.0], Some(spec));
        assert!(edges.len() <= 53, "{edges:?}");
        assert_eq!(edges[0], -500.0);
        assert_eq!(*edges.last().unwrap(), 900.0);
        for limit in [spec.lower, spec.upper] {
            assert!(edges.iter().any(|e| (e - limit).abs() < 1e-9));
        }
        assert!(bin_edges(&[], Some(spec)).is_empty());
    }
}
