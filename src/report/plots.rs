//! Plots of a record and of a unit's or a design's history, drawn with plotters into SVG
//! strings or PNG files: the V-I curve against the design (expected curve, shaded worst-case
//! band, measured knees), regulation (delta V against I), short-circuit current against time,
//! a unit's key metrics over dates, and a population histogram with limits. Series differ by
//! marker and line style, not only colour, so prints in grayscale stay readable. Text uses
//! the embedded font (see `font.rs`). Pure drawing: only `to_png` writes a file.

use super::font;
use crate::analysis::{CurvePoint, ExpFit, Metrics};
use crate::compare::{DesignExpectation, HistoryEntry, KeyMetric, Limits};
use plotters::coord::Shift;
use plotters::element::DashedPathElement;
use plotters::prelude::*;
use std::path::Path;

/// A plot could not be drawn.
#[derive(Debug, thiserror::Error)]
#[error("plot '{plot}': {detail}")]
pub struct PlotError {
    pub plot: String,
    pub detail: String,
}

/// Default plot size in pixels.
pub const SIZE: (u32, u32) = (800, 520);

/// Most measured points drawn per series; longer series are thinned by an even stride so a
/// 100,000-row record still gives a small page (fits and knees use every point).
pub const MAX_POINTS: usize = 2000;

pub(super) fn stride(n: usize) -> usize {
    n.div_ceil(MAX_POINTS).max(1)
}

pub(super) const FONT: &str = font::FAMILY;
pub(super) const MEASURED: RGBColor = RGBColor(0, 0, 0);
pub(super) const EXPECTED: RGBColor = RGBColor(30, 80, 160);
pub(super) const KNEE_A: RGBColor = RGBColor(190, 30, 30);
pub(super) const KNEE_B: RGBColor = RGBColor(20, 120, 40);
pub(super) const BAND: RGBColor = RGBColor(150, 150, 150);
const KNEE_SEARCH: RGBColor = RGBColor(200, 110, 0);

/// The V-I points the adaptive knee search took, to draw them apart from the sweep's.
pub fn knee_search_points(rows: &[crate::record::Row]) -> Vec<CurvePoint> {
    use crate::measure::Quantity;
    rows.iter()
        .filter(|r| r.step_kind == crate::record::StepKind::KneeSearch && !r.load_mode.is_off())
        .filter_map(|r| {
            let v = r.value(Quantity::OutputVoltage)?;
            let i = r.value(Quantity::OutputCurrent)?;
            (v.is_finite() && i.is_finite()).then_some(CurvePoint {
                current: i,
                voltage: v,
            })
        })
        .collect()
}

/// The charts with the knee search's points set on the V-I chart.
pub fn with_knee_search<'a>(charts: Vec<Chart<'a>>, points: &'a [CurvePoint]) -> Vec<Chart<'a>> {
    charts
        .into_iter()
        .map(|c| match c {
            Chart::VoltageCurrent {
                curve,
                metrics,
                expectation,
                ..
            } => Chart::VoltageCurrent {
                curve,
                metrics,
                expectation,
                knee_search: points,
            },
            other => other,
        })
        .collect()
}

/// Something that can be drawn.
#[derive(Debug, Clone)]
pub enum Chart<'a> {
    /// V-I curve with the design's expected curve and band.
    VoltageCurrent {
        curve: &'a [CurvePoint],
        metrics: &'a Metrics,
        expectation: Option<&'a DesignExpectation>,
        /// The points the adaptive knee search took (drawn apart from the sweep's).
        knee_search: &'a [CurvePoint],
    },
    /// Output voltage change from no load against load current, with the fitted line.
    Regulation {
        curve: &'a [CurvePoint],
        metrics: &'a Metrics,
    },
    /// Short-circuit current over the dwell with the fitted exponential.
    ShortCircuit {
        series: &'a [(f64, f64)],
        fit: Option<ExpFit>,
        /// The design's worst-case short-circuit current (lowest, highest), when known.
        band: Option<(f64, f64)>,
    },
    /// A unit's key metrics over dates, as a change from its first record.
    History {
        unit: &'a str,
        entries: &'a [HistoryEntry],
    },
    /// Distribution of one metric across units, with spec limits.
    Histogram {
        metric: KeyMetric,
        values: &'a [f64],
        spec: Option<Limits>,
    },
}

impl Chart<'_> {
    /// File stem used for this plot.
    pub fn name(&self) -> &'static str {
        match self {
            Chart::VoltageCurrent { .. } => "vi_curve",
            Chart::Regulation { .. } => "regulation",
            Chart::ShortCircuit { .. } => "short_circuit",
            Chart::History { .. } => "history",
            Chart::Histogram { .. } => "histogram",
        }
    }

    /// A sentence describing the plot, for figure captions.
    pub fn caption(&self) -> &'static str {
        match self {
            Chart::VoltageCurrent { .. } => {
                "Output voltage against load current: measured points, the design's nominal \
                 curve and worst-case band, and the knee by both methods."
            }
            Chart::Regulation { .. } => {
                "Regulation region: change from the no-load voltage against load current, with \
                 the least-squares line whose slope is the output resistance."
            }
            Chart::ShortCircuit { .. } => {
                "Short-circuit current over the dwell with the fitted first-order curve \
                 (junction heating moves the limit)."
            }
            Chart::History { .. } => {
                "Key metrics of one unit over dates, as change from its first record."
            }
            Chart::Histogram { .. } => "Distribution across units with the spec limits.",
        }
    }

    /// Draw as an SVG document (text as `<text>` elements).
    pub fn to_svg(&self, size: (u32, u32)) -> Result<String, PlotError> {
        let mut s = String::new();
        {
            let root = SVGBackend::with_string(&mut s, size).into_drawing_area();
            self.draw(&root)?;
            root.present().map_err(|e| self.err(e))?;
        }
        Ok(s)
    }

    /// Draw into a PNG file.
    pub fn to_png(&self, path: &Path, size: (u32, u32)) -> Result<(), PlotError> {
        let root = BitMapBackend::new(path, size).into_drawing_area();
        self.draw(&root)?;
        root.present().map_err(|e| self.err(e))
    }

    fn err<E: std::fmt::Debug>(&self, e: E) -> PlotError {
        PlotError {
            plot: self.name().to_string(),
            detail: format!("{e:?}"),
        }
    }

    /// Draw on any plotters backend.
    pub fn draw<DB: DrawingBackend>(&self, root: &DrawingArea<DB, Shift>) -> Result<(), PlotError> {
        font::ensure_registered().map_err(|e| self.err(e))?;
        root.fill(&WHITE).map_err(|e| self.err(e))?;
        let r = match self {
            Chart::VoltageCurrent {
                curve,
                metrics,
                expectation,
                knee_search,
            } => draw_vi(root, curve, metrics, *expectation, knee_search),
            Chart::Regulation { curve, metrics } => draw_regulation(root, curve, metrics),
            Chart::ShortCircuit { series, fit, band } => {
                draw_short_circuit(root, series, *fit, *band)
            }
            Chart::History { unit, entries } => draw_history(root, unit, entries),
            Chart::Histogram {
                metric,
                values,
                spec,
            } => draw_histogram(root, *metric, values, *spec),
        };
        r.map_err(|e| self.err(e))
    }
}

pub(super) type DrawResult = Result<(), String>;

pub(super) fn s<E: std::fmt::Debug>(e: E) -> String {
    format!("{e:?}")
}

/// Largest magnitude plotted: readings beyond it are instrument garbage, and plotters'
/// integer pixel arithmetic overflows on absurd coordinates.
const SANE: f64 = 1e6;

pub(super) fn sane(v: f64) -> bool {
    v.is_finite() && v.abs() < SANE
}

/// True when a point lies inside the axis ranges (points outside are not drawn).
pub(super) fn inside(p: (f64, f64), xr: (f64, f64), yr: (f64, f64)) -> bool {
    p.0 >= xr.0 && p.0 <= xr.1 && p.1 >= yr.0 && p.1 <= yr.1
}

pub(super) fn range_of(values: impl Iterator<Item = f64>) -> Option<(f64, f64)> {
    let mut lo = f64::INFINITY;
    let mut hi = f64::NEG_INFINITY;
    for v in values.filter(|v| sane(*v)) {
        lo = lo.min(v);
        hi = hi.max(v);
    }
    (lo <= hi).then_some((lo, hi))
}

pub(super) fn pad((lo, hi): (f64, f64), frac: f64) -> (f64, f64) {
    let span = (hi - lo).abs().max(hi.abs().max(lo.abs()) * 1e-3).max(1e-9);
    (lo - span * frac, hi + span * frac)
}

pub(super) fn legend<'a, DB: DrawingBackend + 'a, CT: plotters::coord::CoordTranslate>(
    chart: &mut ChartContext<'a, DB, CT>,
    position: SeriesLabelPosition,
) -> DrawResult {
    chart
        .configure_series_labels()
        .background_style(WHITE.mix(0.85))
        .border_style(BLACK)
        .label_font((FONT, 14))
        .position(position)
        .draw()
        .map_err(s)
}

fn draw_vi<DB: DrawingBackend>(
    root: &DrawingArea<DB, Shift>,
    curve: &[CurvePoint],
    metrics: &Metrics,
    exp: Option<&DesignExpectation>,
    knee_search: &[CurvePoint],
) -> DrawResult {
    let mut imax = range_of(curve.iter().map(|p| p.current))
        .map(|r| r.1)
        .unwrap_or(1.0);
    let mut vmax = range_of(curve.iter().map(|p| p.voltage))
        .map(|r| r.1)
        .unwrap_or(1.0);
    if let Some(e) = exp {
        let extra = [
            (e.limit_current.worst_case.max, e.vout.worst_case.max),
            (e.limit_current.nominal, e.vout.nominal),
        ];
        for (i, v) in e
            .curve
            .iter()
            .chain(&e.curve_low)
            .chain(&e.curve_high)
            .chain(extra.iter())
        {
            if sane(*i) && sane(*v) {
                imax = imax.max(*i);
                vmax = vmax.max(*v);
            }
        }
    }
    let imax = if imax > 0.0 { imax * 1.1 } else { 1.0 };
    // Fitted to the design: a little above its highest worst-case output (the legend sits in
    // the empty lower left, below the regulation line, not in head room above it).
    let vmax = if vmax > 0.0 { vmax * 1.08 } else { 1.0 };
    let (xr, yr) = ((0.0, imax), (0.0, vmax));
    let keep = |p: &(f64, f64)| inside(*p, xr, yr);
    let mut chart = ChartBuilder::on(root)
        .caption("Output voltage against load current", (FONT, 22))
        .margin(12)
        .x_label_area_size(48)
        .y_label_area_size(64)
        .build_cartesian_2d(0.0..imax, 0.0..vmax)
        .map_err(s)?;
    chart
        .configure_mesh()
        .x_desc("Output current (A)")
        .y_desc("Output voltage (V)")
        .label_style((FONT, 14))
        .axis_desc_style((FONT, 16))
        .light_line_style(WHITE.mix(0.0))
        .draw()
        .map_err(s)?;
    if let Some(e) = exp {
        let fill = BAND.mix(0.35).filled();
        let banded = if !e.curve_low.is_empty() && !e.curve_high.is_empty() {
            // The region between the worst-case edge curves. Those curves run through the
            // lowest and highest limit corners, whose output voltages are arbitrary: rescale
            // them to the output's worst-case extremes so the band covers both.
            // The edge curves come from the operating envelope's corners: scaled to its output.
            let vb = e
                .envelope
                .as_ref()
                .map_or(e.vout.worst_case, |x| x.vout.worst_case);
            let scaled = |c: &[(f64, f64)], v_to: f64| -> Vec<(f64, f64)> {
                let v0 = c.first().map(|p| p.1).filter(|v| *v > 0.0).unwrap_or(v_to);
                c.iter().map(|(i, v)| (*i, v * v_to / v0)).collect()
            };
            let mut ring = scaled(&e.curve_high, vb.max);
            ring.extend(scaled(&e.curve_low, vb.min).into_iter().rev());
            ring.retain(keep);
            chart.draw_series([Polygon::new(ring, fill)])
        } else {
            let vb = e.vout.worst_case;
            let ib = e.limit_current.worst_case;
            chart.draw_series([
                Rectangle::new([(0.0, vb.min), (ib.min, vb.max)], fill).into_dyn(),
                Rectangle::new([(ib.min, 0.0), (ib.max, vb.max)], fill).into_dyn(),
            ])
        };
        let curves = !e.curve_low.is_empty() && !e.curve_high.is_empty();
        let worst_label = if curves && e.envelope.is_some() {
            "design worst case (operating envelope)"
        } else {
            "design worst-case band"
        };
        banded
            .map_err(s)?
            .label(worst_label)
            .legend(move |(x, y)| Rectangle::new([(x, y - 6), (x + 18, y + 6)], fill));
        // The Monte Carlo band (where most built units fall) inside the worst-case band.
        let mc_fill = EXPECTED.mix(0.22).filled();
        let (vm, im) = (e.vout.monte_carlo, e.limit_current.monte_carlo);
        if [vm.p_low, vm.p_high, im.p_low, im.p_high]
            .iter()
            .all(|v| sane(*v))
        {
            let clip = |(i, v): (f64, f64)| (i.clamp(xr.0, xr.1), v.clamp(yr.0, yr.1));
            chart
                .draw_series([
                    Rectangle::new(
                        [clip((0.0, vm.p_low)), clip((im.p_low, vm.p_high))],
                        mc_fill,
                    )
                    .into_dyn(),
                    Rectangle::new(
                        [clip((im.p_low, 0.0)), clip((im.p_high, vm.p_high))],
                        mc_fill,
                    )
                    .into_dyn(),
                ])
                .map_err(s)?
                .label(if e.envelope.is_some() {
                    "design Monte Carlo band (as built)"
                } else {
                    "design Monte Carlo band"
                })
                .legend(move |(x, y)| Rectangle::new([(x, y - 6), (x + 18, y + 6)], mc_fill));
        }
        let pts = if e.curve.len() >= 2 {
            e.curve.clone()
        } else {
            let vn = e.vout.nominal;
            let il = e.limit_current.nominal;
            let isc = e.short_circuit_current.map(|b| b.nominal).unwrap_or(il);
            vec![(0.0, vn), (il, vn), (isc, 0.0)]
        };
        let pts: Vec<(f64, f64)> = pts.into_iter().filter(keep).collect();
        chart
            .draw_series(DashedLineSeries::new(pts, 10, 6, EXPECTED.stroke_width(2)))
            .map_err(s)?
            .label("design nominal (dashed)")
            .legend(|(x, y)| {
                DashedPathElement::new(vec![(x, y), (x + 18, y)], 5, 3, EXPECTED.stroke_width(2))
            });
    }
    let searched = |p: &CurvePoint| knee_search.iter().any(|k| k == p);
    let swept: Vec<&CurvePoint> = curve.iter().filter(|p| !searched(p)).collect();
    chart
        .draw_series(
            swept
                .iter()
                .step_by(stride(swept.len()))
                .map(|p| (p.current, p.voltage))
                .filter(keep)
                .map(|p| Circle::new(p, 3, MEASURED.stroke_width(1))),
        )
        .map_err(s)?
        .label("measured (circles)")
        .legend(|(x, y)| Circle::new((x + 9, y), 3, MEASURED.stroke_width(1)));
    if !knee_search.is_empty() {
        chart
            .draw_series(
                knee_search
                    .iter()
                    .map(|p| (p.current, p.voltage))
                    .filter(keep)
                    .map(|p| Cross::new(p, 4, KNEE_SEARCH.stroke_width(2))),
            )
            .map_err(s)?
            .label("knee search points (crosses)")
            .legend(|(x, y)| Cross::new((x + 9, y), 4, KNEE_SEARCH.stroke_width(2)));
    }
    if let Some(k) = &metrics.knee {
        if let Some(p) = k.fixed_drop.filter(|p| keep(&(p.current, p.voltage))) {
            chart
                .draw_series([TriangleMarker::new(
                    (p.current, p.voltage),
                    9,
                    KNEE_A.filled(),
                )])
                .map_err(s)?
                .label(format!(
                    "knee, {:.0} % drop: {}",
                    k.drop_fraction * 100.0,
                    crate::quantity::eng(p.current, "A")
                ))
                .legend(|(x, y)| TriangleMarker::new((x + 9, y), 7, KNEE_A.filled()));
        }
        if let Some(p) = k.two_segment.filter(|p| keep(&(p.current, p.voltage))) {
            chart
                .draw_series([Rectangle::new(
                    [
                        (p.current - imax * 0.008, p.voltage - vmax * 0.012),
                        (p.current + imax * 0.008, p.voltage + vmax * 0.012),
                    ],
                    KNEE_B.stroke_width(2),
                )])
                .map_err(s)?
                .label(format!(
                    "knee, two-segment fit: {}",
                    crate::quantity::eng(p.current, "A")
                ))
                .legend(|(x, y)| {
                    Rectangle::new([(x + 4, y - 5), (x + 14, y + 5)], KNEE_B.stroke_width(2))
                });
        }
    }
    legend(&mut chart, SeriesLabelPosition::LowerLeft)
}

fn draw_regulation<DB: DrawingBackend>(
    root: &DrawingArea<DB, Shift>,
    curve: &[CurvePoint],
    metrics: &Metrics,
) -> DrawResult {
    let v_nl = metrics.no_load.map(|p| p.voltage).unwrap_or(0.0);
    let thr = metrics
        .knee
        .map(|k| k.threshold_voltage)
        .unwrap_or(f64::NEG_INFINITY);
    // The points of the output-resistance fit: at or above the knee threshold and within
    // the regulation span of the fixed-drop knee (the soft knee would hide the slope).
    let i_max = metrics
        .output_resistance
        .map(|r| r.max_current)
        .unwrap_or(f64::INFINITY);
    let pts: Vec<(f64, f64)> = curve
        .iter()
        .filter(|p| p.voltage >= thr && p.current <= i_max)
        .map(|p| (p.current, (p.voltage - v_nl) * 1000.0))
        .filter(|p| sane(p.0) && sane(p.1))
        .collect();
    let xr = pad(
        range_of(pts.iter().map(|p| p.0)).unwrap_or((0.0, 1.0)),
        0.05,
    );
    let yr = pad(
        range_of(pts.iter().map(|p| p.1).chain([0.0])).unwrap_or((-1.0, 1.0)),
        0.15,
    );
    let mut chart = ChartBuilder::on(root)
        .caption(
            "Regulation region: output change against load current",
            (FONT, 22),
        )
        .margin(12)
        .x_label_area_size(48)
        .y_label_area_size(70)
        .build_cartesian_2d(xr.0.min(0.0)..xr.1, yr.0..yr.1)
        .map_err(s)?;
    chart
        .configure_mesh()
        .x_desc("Output current (A)")
        .y_desc("Change from no-load voltage (mV)")
        .label_style((FONT, 14))
        .axis_desc_style((FONT, 16))
        .draw()
        .map_err(s)?;
    chart
        .draw_series(
            pts.iter()
                .step_by(stride(pts.len()))
                .map(|p| Cross::new(*p, 5, MEASURED.stroke_width(2))),
        )
        .map_err(s)?
        .label("measured (crosses)")
        .legend(|(x, y)| Cross::new((x + 9, y), 5, MEASURED.stroke_width(2)));
    if let Some(r) = metrics.output_resistance {
        let u = r
            .std_uncertainty
            .map(|u| format!(" +- {}", crate::quantity::eng(u, "ohm")))
            .unwrap_or_default();
        let x_end = range_of(pts.iter().map(|p| p.0))
            .map(|r| r.1)
            .unwrap_or(xr.1);
        // The fitted line itself: its intercept need not sit exactly on the no-load point.
        let y0 = ((r.intercept_voltage - v_nl) * 1000.0).clamp(yr.0, yr.1);
        let y_end = ((r.intercept_voltage - v_nl - r.ohms * x_end) * 1000.0).clamp(yr.0, yr.1);
        let line: Vec<(f64, f64)> = [(0.0, y0), (x_end, y_end)]
            .into_iter()
            .filter(|p| inside(*p, (xr.0.min(0.0), xr.1), yr))
            .collect();
        chart
            .draw_series(DashedLineSeries::new(line, 10, 6, EXPECTED.stroke_width(2)))
            .map_err(s)?
            .label(format!(
                "fit, output resistance {}{u} (dashed)",
                crate::quantity::eng(r.ohms, "ohm")
            ))
            .legend(|(x, y)| {
                DashedPathElement::new(vec![(x, y), (x + 18, y)], 5, 3, EXPECTED.stroke_width(2))
            });
    }
    legend(&mut chart, SeriesLabelPosition::LowerLeft)
}

fn draw_short_circuit<DB: DrawingBackend>(
    root: &DrawingArea<DB, Shift>,
    series: &[(f64, f64)],
    fit: Option<ExpFit>,
    band: Option<(f64, f64)>,
) -> DrawResult {
    let xr = pad(
        range_of(series.iter().map(|p| p.0)).unwrap_or((0.0, 1.0)),
        0.03,
    );
    // From zero: a drift of a few percent over the dwell must look like a few percent.
    let band = band.filter(|(lo, hi)| sane(*lo) && sane(*hi) && lo <= hi);
    let top = range_of(series.iter().map(|p| p.1).chain(band.map(|b| b.1)))
        .map(|(_, hi)| hi.max(0.0))
        .filter(|hi| *hi > 0.0)
        .unwrap_or(1.0);
    let yr = (0.0, top * 1.15);
    let mut chart = ChartBuilder::on(root)
        .caption("Short-circuit current over the dwell", (FONT, 22))
        .margin(12)
        .x_label_area_size(48)
        .y_label_area_size(70)
        .build_cartesian_2d(xr.0..xr.1, yr.0..yr.1)
        .map_err(s)?;
    chart
        .configure_mesh()
        .x_desc("Time since the short was applied (s)")
        .y_desc("Short-circuit current (A)")
        .label_style((FONT, 14))
        .axis_desc_style((FONT, 16))
        .draw()
        .map_err(s)?;
    if let Some((lo, hi)) = band {
        let fill = BAND.mix(0.35).filled();
        chart
            .draw_series([Rectangle::new(
                [(xr.0, lo.max(yr.0)), (xr.1, hi.min(yr.1))],
                fill,
            )])
            .map_err(s)?
            .label("design worst-case band")
            .legend(move |(x, y)| Rectangle::new([(x, y - 6), (x + 18, y + 6)], fill));
    }
    chart
        .draw_series(
            series
                .iter()
                .step_by(stride(series.len()))
                .filter(|p| inside(**p, xr, yr))
                .map(|p| Circle::new(*p, 3, MEASURED.stroke_width(1))),
        )
        .map_err(s)?
        .label("measured (circles)")
        .legend(|(x, y)| Circle::new((x + 9, y), 3, MEASURED.stroke_width(1)));
    if let Some(f) = fit {
        let n = 200;
        let line: Vec<(f64, f64)> = (0..=n)
            .map(|k| {
                let t = xr.0.max(0.0) + (xr.1 - xr.0.max(0.0)) * k as f64 / n as f64;
                (t, f.i_inf + (f.i_0 - f.i_inf) * (-t / f.tau_s).exp())
            })
            .filter(|p| inside(*p, xr, yr))
            .collect();
        chart
            .draw_series(DashedLineSeries::new(line, 10, 6, EXPECTED.stroke_width(2)))
            .map_err(s)?
            .label(format!("first-order fit, tau = {:.1} s (dashed)", f.tau_s))
            .legend(|(x, y)| {
                DashedPathElement::new(vec![(x, y), (x + 18, y)], 5, 3, EXPECTED.stroke_width(2))
            });
    }
    legend(&mut chart, SeriesLabelPosition::LowerLeft)
}

fn days_since(first: &str, t: &str) -> Option<f64> {
    let a = chrono::DateTime::parse_from_rfc3339(first).ok()?;
    let b = chrono::DateTime::parse_from_rfc3339(t).ok()?;
    Some((b - a).num_milliseconds() as f64 / 86_400_000.0)
}

/// A tracked metric: colour, marker index and (days, % change) points.
type Tracked = (KeyMetric, RGBColor, usize, Vec<(f64, f64)>);

fn draw_history<DB: DrawingBackend>(
    root: &DrawingArea<DB, Shift>,
    unit: &str,
    entries: &[HistoryEntry],
) -> DrawResult {
    let first = entries
        .first()
        .map(|e| e.started_utc.as_str())
        .unwrap_or("");
    let days: Vec<f64> = entries
        .iter()
        .enumerate()
        .map(|(i, e)| days_since(first, &e.started_utc).unwrap_or(i as f64))
        .collect();
    // The axis unit follows the span (days, hours or minutes), and the axis is at least two
    // units wide, so one record or two close together read sensibly.
    let span = range_of(days.iter().copied()).map_or(0.0, |(lo, hi)| hi - lo);
    let (per_day, unit_word) = if span >= 2.0 {
        (1.0, "Days")
    } else if span * 24.0 >= 2.0 {
        (24.0, "Hours")
    } else {
        (1440.0, "Minutes")
    };
    let xs: Vec<f64> = days.iter().map(|d| d * per_day).collect();
    let tracked = [
        (KeyMetric::OutputVoltage, MEASURED, 0usize),
        (KeyMetric::LimitCurrent, KNEE_A, 1),
        (KeyMetric::ShortCircuitCurrent, KNEE_B, 2),
    ];
    let mut series: Vec<Tracked> = Vec::new();
    for (k, c, m) in tracked {
        let base = entries.iter().find_map(|e| e.values.get(k));
        let Some(b) = base.filter(|b| *b != 0.0) else {
            continue;
        };
        let pts: Vec<(f64, f64)> = entries
            .iter()
            .zip(&xs)
            .filter_map(|(e, x)| e.values.get(k).map(|v| (*x, (v / b - 1.0) * 100.0)))
            .filter(|p| sane(p.0) && sane(p.1))
            .collect();
        series.push((k, c, m, pts));
    }
    let (lo, hi) = range_of(xs.iter().copied()).unwrap_or((0.0, 1.0));
    let (lo, hi) = if hi - lo < 2.0 {
        let c = (lo + hi) / 2.0;
        (c - 1.0, c + 1.0)
    } else {
        (lo, hi)
    };
    let xr = pad((lo, hi), 0.05);
    let yr = pad(
        range_of(
            series
                .iter()
                .flat_map(|s| s.3.iter().map(|p| p.1))
                .chain([-1.0, 1.0]),
        )
        .unwrap_or((-1.0, 1.0)),
        0.15,
    );
    let mut chart = ChartBuilder::on(root)
        .caption(format!("Unit {unit}: key metrics over time"), (FONT, 22))
        .margin(12)
        .x_label_area_size(48)
        .y_label_area_size(70)
        .build_cartesian_2d(xr.0..xr.1, yr.0..yr.1)
        .map_err(s)?;
    chart
        .configure_mesh()
        .x_desc(format!("{unit_word} since the first record"))
        .y_desc("Change from the first record (%)")
        .label_style((FONT, 14))
        .axis_desc_style((FONT, 16))
        .draw()
        .map_err(s)?;
    for (k, c, marker, pts) in series {
        let label = format!(
            "{} ({})",
            k.as_str().replace('_', " "),
            ["circles", "triangles", "crosses"][marker]
        );
        let style = c.stroke_width(1);
        chart
            .draw_series(LineSeries::new(pts.clone(), style))
            .map_err(s)?;
        let anno = match marker {
            0 => chart
                .draw_series(
                    pts.iter()
                        .map(|p| Circle::new(*p, 4, c.stroke_width(2)).into_dyn()),
                )
                .map_err(s)?,
            1 => chart
                .draw_series(
                    pts.iter()
                        .map(|p| TriangleMarker::new(*p, 6, c.filled()).into_dyn()),
                )
                .map_err(s)?,
            _ => chart
                .draw_series(
                    pts.iter()
                        .map(|p| Cross::new(*p, 5, c.stroke_width(2)).into_dyn()),
                )
                .map_err(s)?,
        };
        anno.label(label).legend(move |(x, y)| match marker {
            0 => Circle::new((x + 9, y), 4, c.stroke_width(2)).into_dyn(),
            1 => TriangleMarker::new((x + 9, y), 6, c.filled()).into_dyn(),
            _ => Cross::new((x + 9, y), 5, c.stroke_width(2)).into_dyn(),
        });
    }
    legend(&mut chart, SeriesLabelPosition::LowerLeft)
}

fn draw_histogram<DB: DrawingBackend>(
    root: &DrawingArea<DB, Shift>,
    metric: KeyMetric,
    values: &[f64],
    spec: Option<Limits>,
) -> DrawResult {
    let vals: Vec<f64> = values.iter().copied().filter(|v| sane(*v)).collect();
    let spec = spec.filter(|sp| sane(sp.min) && sane(sp.max));
    let mut r = range_of(vals.iter().copied()).unwrap_or((0.0, 1.0));
    if let Some(sp) = spec {
        r = (r.0.min(sp.min), r.1.max(sp.max));
    }
    let xr = pad(r, 0.08);
    let bins = ((vals.len() as f64).sqrt().ceil() as usize).clamp(5, 40);
    let (dlo, dhi) = range_of(vals.iter().copied()).unwrap_or((0.0, 1.0));
    let width = ((dhi - dlo) / bins as f64).max((xr.1 - xr.0) / 200.0);
    let mut counts = vec![0usize; bins];
    for v in &vals {
        let b = (((v - dlo) / width) as usize).min(bins - 1);
        counts[b] += 1;
    }
    let ymax = counts.iter().copied().max().unwrap_or(1).max(1) as f64 * 1.2;
    let unit = metric.unit();
    let mut chart = ChartBuilder::on(root)
        .caption(
            format!("{} across units", metric.as_str().replace('_', " ")),
            (FONT, 22),
        )
        .margin(12)
        .x_label_area_size(48)
        .y_label_area_size(60)
        .build_cartesian_2d(xr.0..xr.1, 0.0..ymax)
        .map_err(s)?;
    chart
        .configure_mesh()
        .x_desc(format!("{} ({unit})", metric.as_str().replace('_', " ")))
        .y_desc("Units")
        .label_style((FONT, 14))
        .axis_desc_style((FONT, 16))
        .draw()
        .map_err(s)?;
    chart
        .draw_series(counts.iter().enumerate().map(|(i, c)| {
            let x0 = dlo + i as f64 * width;
            Rectangle::new([(x0, 0.0), (x0 + width, *c as f64)], BAND.mix(0.6).filled())
        }))
        .map_err(s)?
        .label("units per bin (grey bars)")
        .legend(|(x, y)| Rectangle::new([(x, y - 6), (x + 18, y + 6)], BAND.mix(0.6).filled()));
    if let Some(sp) = spec {
        chart
            .draw_series([sp.min, sp.max].into_iter().map(|x| {
                DashedPathElement::new(vec![(x, 0.0), (x, ymax)], 8, 5, KNEE_A.stroke_width(2))
            }))
            .map_err(s)?
            .label("spec limits LSL / USL (dashed)")
            .legend(|(x, y)| {
                DashedPathElement::new(vec![(x, y), (x + 18, y)], 5, 3, KNEE_A.stroke_width(2))
            });
    }
    legend(&mut chart, SeriesLabelPosition::UpperRight)
}
