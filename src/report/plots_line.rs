//! Plots of the steps that hold the load and move something else: line regulation (output
//! voltage against input voltage, with the fitted line, the design's worst-case output band
//! and the plan's limit drawn as the steepest slope that still passes) and a soak (the
//! output's drift from its first reading and the temperature rise against elapsed time, with
//! the plan's limits). Drawn with the helpers of `plots.rs`; pure drawing: only `to_png`
//! writes a file.

use super::font;
use super::plots::{
    legend, pad, range_of, s, sane, stride, DrawResult, PlotError, BAND, EXPECTED, FONT, KNEE_A,
    KNEE_B, MEASURED,
};
use crate::analysis::{linear_fit, SoakPoint};
use crate::compare::Limits;
use plotters::coord::Shift;
use plotters::element::DashedPathElement;
use plotters::prelude::*;
use std::path::Path;

/// Narrowest output-voltage axis, V: flat data still gets readable ticks (10 mV spans four
/// to five digits of a bench meter; project choice).
const MIN_VOLT_SPAN: f64 = 0.01;
/// Narrowest drift axis, mV (project choice, as above).
const MIN_DRIFT_SPAN_MV: f64 = 2.0;
/// Narrowest temperature-rise axis, degC (project choice).
const MIN_RISE_SPAN_C: f64 = 2.0;

/// A line-regulation or soak plot.
#[derive(Debug, Clone)]
pub enum LineChart<'a> {
    /// Output voltage against input voltage over the line sweep.
    LineRegulation {
        /// (input voltage, output voltage) points.
        points: &'a [(f64, f64)],
        /// The voltage the percentage is referred to (the metric's reference), V.
        reference_voltage: Option<f64>,
        /// The design's worst-case output band, when judged against a design.
        band: Option<Limits>,
        /// Largest |output change| over the sweep that passes, percent of the reference.
        max_change_percent: Option<f64>,
    },
    /// Output drift and temperature rise against time over a soak.
    Soak {
        series: &'a [SoakPoint],
        /// Largest |drift| that passes, percent of the first reading.
        max_drift_percent: Option<f64>,
        /// Largest temperature rise that passes, degC.
        max_rise_c: Option<f64>,
    },
}

impl LineChart<'_> {
    /// File stem used for this plot.
    pub fn name(&self) -> &'static str {
        match self {
            LineChart::LineRegulation { .. } => "line_regulation",
            LineChart::Soak { .. } => "soak",
        }
    }

    /// A sentence describing the plot, for figure captions.
    pub fn caption(&self) -> &'static str {
        match self {
            LineChart::LineRegulation { .. } => {
                "Line regulation: output voltage against input voltage over the line sweep, \
                 with the least-squares line, the design's worst-case output band and the \
                 plan's limit drawn as the steepest slope that still passes."
            }
            LineChart::Soak { .. } => {
                "Soak: the output's change from its first reading and the temperature rise \
                 from the first reading against time, with the plan's limits."
            }
        }
    }

    /// Draw as an SVG document.
    pub fn to_svg(&self, size: (u32, u32)) -> Result<String, PlotError> {
        let mut out = String::new();
        {
            let root = SVGBackend::with_string(&mut out, size).into_drawing_area();
            self.draw(&root)?;
            root.present().map_err(|e| self.err(e))?;
        }
        Ok(out)
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
            LineChart::LineRegulation {
                points,
                reference_voltage,
                band,
                max_change_percent,
            } => draw_line(root, points, *reference_voltage, *band, *max_change_percent),
            LineChart::Soak {
                series,
                max_drift_percent,
                max_rise_c,
            } => draw_soak(root, series, *max_drift_percent, *max_rise_c),
        };
        r.map_err(|e| self.err(e))
    }
}

/// `(lo, hi)` widened about its centre to at least `min` wide.
fn at_least((lo, hi): (f64, f64), min: f64) -> (f64, f64) {
    if hi - lo >= min {
        (lo, hi)
    } else {
        let c = (lo + hi) / 2.0;
        (c - min / 2.0, c + min / 2.0)
    }
}

fn draw_line<DB: DrawingBackend>(
    root: &DrawingArea<DB, Shift>,
    points: &[(f64, f64)],
    vref: Option<f64>,
    band: Option<Limits>,
    max_change: Option<f64>,
) -> DrawResult {
    let pts: Vec<(f64, f64)> = points
        .iter()
        .copied()
        .filter(|p| sane(p.0) && sane(p.1))
        .collect();
    let (x_lo, x_hi) = range_of(pts.iter().map(|p| p.0)).unwrap_or((0.0, 1.0));
    let xs: Vec<f64> = pts.iter().map(|p| p.0).collect();
    let ys: Vec<f64> = pts.iter().map(|p| p.1).collect();
    let fit = linear_fit(&xs, &ys).filter(|f| sane(f.slope) && sane(f.intercept));
    let at = |f: &crate::analysis::LineFit, x: f64| f.intercept + f.slope * x;
    // The plan's limit as the steepest passing lines through the fit's centre: an output
    // change over the sweep of max % of the reference voltage (what the check measures).
    let envelope = match (fit, max_change, vref) {
        (Some(f), Some(max), Some(vr)) if x_hi > x_lo && sane(max) && sane(vr) => {
            let xm = (x_lo + x_hi) / 2.0;
            let ym = at(&f, xm);
            let k = max / 100.0 * vr.abs() / (x_hi - x_lo);
            Some([
                [(x_lo, ym - k * (xm - x_lo)), (x_hi, ym + k * (x_hi - xm))],
                [(x_lo, ym + k * (xm - x_lo)), (x_hi, ym - k * (x_hi - xm))],
            ])
        }
        _ => None,
    };
    let env_ys = envelope.iter().flatten().flatten().map(|p| p.1);
    let data = range_of(ys.iter().copied().chain(env_ys)).unwrap_or((0.0, 1.0));
    let mut yr = pad(at_least(data, MIN_VOLT_SPAN), 0.12);
    let band = band.filter(|b| sane(b.min) && sane(b.max) && b.min <= b.max);
    // A unit outside the design's band shows the band too, and the legend goes into the
    // empty gap between them.
    let mut legend_at = SeriesLabelPosition::UpperMiddle;
    if let Some(b) = band {
        if b.max < yr.0 {
            yr = pad((b.min, yr.1), 0.05);
            legend_at = SeriesLabelPosition::MiddleMiddle;
        } else if b.min > yr.1 {
            yr = pad((yr.0, b.max), 0.05);
            legend_at = SeriesLabelPosition::MiddleMiddle;
        }
    }
    let xr = pad(at_least((x_lo, x_hi), 1.0), 0.05);
    let mut chart = ChartBuilder::on(root)
        .caption("Line regulation: output against input voltage", (FONT, 22))
        .margin(12)
        .x_label_area_size(48)
        .y_label_area_size(80)
        .build_cartesian_2d(xr.0..xr.1, yr.0..yr.1)
        .map_err(s)?;
    chart
        .configure_mesh()
        .x_desc("Input voltage (V)")
        .y_desc("Output voltage (V)")
        .label_style((FONT, 14))
        .axis_desc_style((FONT, 16))
        .y_label_formatter(&|v| volts_label(*v, yr))
        .draw()
        .map_err(s)?;
    if let Some(b) = band {
        // Lighter when the band fills the whole plot (a unit well inside it).
        let (lo, hi) = (b.min.max(yr.0), b.max.min(yr.1));
        let fill = BAND
            .mix(if lo <= yr.0 && hi >= yr.1 { 0.2 } else { 0.4 })
            .filled();
        if lo < hi {
            chart
                .draw_series([Rectangle::new([(xr.0, lo), (xr.1, hi)], fill)])
                .map_err(s)?
                .label(format!(
                    "design worst-case output {:.2} .. {:.2} V",
                    b.min, b.max
                ))
                .legend(move |(x, y)| Rectangle::new([(x, y - 6), (x + 18, y + 6)], fill));
        }
    }
    chart
        .draw_series(
            pts.iter()
                .step_by(stride(pts.len()))
                .map(|p| Circle::new(*p, 4, MEASURED.stroke_width(2))),
        )
        .map_err(s)?
        .label("measured (circles)")
        .legend(|(x, y)| Circle::new((x + 9, y), 4, MEASURED.stroke_width(2)));
    if let Some(f) = fit {
        let per_v = vref
            .filter(|v| *v != 0.0)
            .map(|v| format!(", {:+.4} %/V", f.slope / v * 100.0))
            .unwrap_or_default();
        chart
            .draw_series(DashedLineSeries::new(
                [(x_lo, at(&f, x_lo)), (x_hi, at(&f, x_hi))],
                10,
                6,
                EXPECTED.stroke_width(2),
            ))
            .map_err(s)?
            .label(format!(
                "fit: {:+.2} mV over the sweep{per_v} (dashed)",
                f.slope * (x_hi - x_lo) * 1000.0
            ))
            .legend(|(x, y)| {
                DashedPathElement::new(vec![(x, y), (x + 18, y)], 5, 3, EXPECTED.stroke_width(2))
            });
    }
    if let (Some(env), Some(max)) = (envelope, max_change) {
        let style = KNEE_A.stroke_width(2);
        chart
            .draw_series(
                env.into_iter()
                    .map(|l| DashedPathElement::new(l.to_vec(), 4, 4, style)),
            )
            .map_err(s)?
            .label(format!("plan limit: +-{max} % over the sweep (dotted)"))
            .legend(move |(x, y)| DashedPathElement::new(vec![(x, y), (x + 18, y)], 2, 2, style));
    }
    legend(&mut chart, legend_at)
}

/// Output-voltage tick labels with enough digits for the axis span.
fn volts_label(v: f64, (lo, hi): (f64, f64)) -> String {
    let span = (hi - lo).abs();
    let digits = if span >= 2.0 {
        1
    } else if span >= 0.2 {
        2
    } else if span >= 0.02 {
        3
    } else {
        4
    };
    format!("{v:.digits$}")
}

/// Time axis unit for a span in seconds: (divisor, word).
fn time_unit(span_s: f64) -> (f64, &'static str) {
    if span_s >= 2.0 * 3600.0 {
        (3600.0, "h")
    } else if span_s >= 120.0 {
        (60.0, "min")
    } else {
        (1.0, "s")
    }
}

fn draw_soak<DB: DrawingBackend>(
    root: &DrawingArea<DB, Shift>,
    series: &[SoakPoint],
    max_drift: Option<f64>,
    max_rise: Option<f64>,
) -> DrawResult {
    let series: Vec<&SoakPoint> = series.iter().filter(|p| sane(p.elapsed_s)).collect();
    let t0 = series.first().map(|p| p.elapsed_s).unwrap_or(0.0);
    let span = range_of(series.iter().map(|p| p.elapsed_s - t0)).map_or(0.0, |r| r.1);
    let (per, unit) = time_unit(span);
    let v0 = series.iter().find_map(|p| p.voltage.filter(|v| sane(*v)));
    let c0 = series
        .iter()
        .find_map(|p| p.temperature.filter(|v| sane(*v)));
    let drift: Vec<(f64, f64)> = match v0 {
        Some(v0) => series
            .iter()
            .filter_map(|p| Some(((p.elapsed_s - t0) / per, (p.voltage? - v0) * 1000.0)))
            .filter(|p| sane(p.0) && sane(p.1))
            .collect(),
        None => Vec::new(),
    };
    let rise: Vec<(f64, f64)> = match c0 {
        Some(c0) => series
            .iter()
            .filter_map(|p| Some(((p.elapsed_s - t0) / per, p.temperature? - c0)))
            .filter(|p| sane(p.0) && sane(p.1))
            .collect(),
        None => Vec::new(),
    };
    // The drift limit in mV of the first reading.
    let drift_limit = match (max_drift, v0) {
        (Some(m), Some(v0)) if sane(m) => Some(m / 100.0 * v0.abs() * 1000.0),
        _ => None,
    };
    let xr = pad((0.0, (span / per).max(1.0)), 0.03);
    let y1 = range_of(
        drift
            .iter()
            .map(|p| p.1)
            .chain([0.0])
            .chain(drift_limit.into_iter().flat_map(|l| [-l, l])),
    )
    .unwrap_or((-1.0, 1.0));
    let y1 = pad(at_least(y1, MIN_DRIFT_SPAN_MV), 0.12);
    let y2 = range_of(
        rise.iter()
            .map(|p| p.1)
            .chain([0.0])
            .chain(max_rise.filter(|m| sane(*m))),
    )
    .unwrap_or((0.0, 1.0));
    // Head room above the highest rise or limit, so the rise limit does not sit on the
    // drift limit's line of the other axis.
    let y2 = pad(
        (y2.0, y2.0 + (y2.1 - y2.0).max(MIN_RISE_SPAN_C) * 1.3),
        0.05,
    );
    let mut chart = ChartBuilder::on(root)
        .caption("Soak: output drift and temperature rise", (FONT, 22))
        .margin(12)
        .x_label_area_size(48)
        .y_label_area_size(70)
        .right_y_label_area_size(if rise.is_empty() { 0 } else { 70 })
        .build_cartesian_2d(xr.0..xr.1, y1.0..y1.1)
        .map_err(s)?
        .set_secondary_coord(xr.0..xr.1, y2.0..y2.1);
    chart
        .configure_mesh()
        .x_desc(format!("Time since the soak began ({unit})"))
        .y_desc("Output change from the first reading (mV)")
        .label_style((FONT, 14))
        .axis_desc_style((FONT, 16))
        .draw()
        .map_err(s)?;
    if !rise.is_empty() {
        chart
            .configure_secondary_axes()
            .y_desc("Temperature rise from the first reading (degC)")
            .label_style((FONT, 14))
            .axis_desc_style((FONT, 16))
            .draw()
            .map_err(s)?;
    }
    if let (Some(l), Some(m)) = (drift_limit, max_drift) {
        let style = KNEE_A.stroke_width(2);
        chart
            .draw_series(
                [-l, l].map(|y| DashedPathElement::new([(xr.0, y), (xr.1, y)], 8, 5, style)),
            )
            .map_err(s)?
            .label(format!("plan drift limit +-{m} % (dashed)"))
            .legend(move |(x, y)| DashedPathElement::new(vec![(x, y), (x + 18, y)], 5, 3, style));
    }
    if !drift.is_empty() {
        chart
            .draw_series(LineSeries::new(drift.clone(), MEASURED.stroke_width(1)))
            .map_err(s)?;
        chart
            .draw_series(
                drift
                    .iter()
                    .step_by(stride(drift.len()))
                    .map(|p| Circle::new(*p, 3, MEASURED.stroke_width(2))),
            )
            .map_err(s)?
            .label("output change (circles, left axis)")
            .legend(|(x, y)| Circle::new((x + 9, y), 3, MEASURED.stroke_width(2)));
    }
    if !rise.is_empty() {
        if let Some(m) = max_rise.filter(|m| sane(*m)) {
            let style = KNEE_B.stroke_width(2);
            chart
                .draw_secondary_series([DashedPathElement::new(
                    [(xr.0, m), (xr.1, m)],
                    3,
                    4,
                    style,
                )])
                .map_err(s)?
                .label(format!("plan rise limit {m} degC (dotted, right axis)"))
                .legend(move |(x, y)| {
                    DashedPathElement::new(vec![(x, y), (x + 18, y)], 2, 2, style)
                });
        }
        chart
            .draw_secondary_series(LineSeries::new(rise.clone(), EXPECTED.stroke_width(1)))
            .map_err(s)?;
        chart
            .draw_secondary_series(
                rise.iter()
                    .step_by(stride(rise.len()))
                    .map(|p| TriangleMarker::new(*p, 5, EXPECTED.filled())),
            )
            .map_err(s)?
            .label("temperature rise (triangles, right axis)")
            .legend(|(x, y)| TriangleMarker::new((x + 9, y), 5, EXPECTED.filled()));
    }
    legend(&mut chart, SeriesLabelPosition::UpperLeft)
}
