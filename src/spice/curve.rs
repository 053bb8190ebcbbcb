//! The simulated V-I curve: parsing the simulator's printed DC sweep, the knee and
//! short-circuit figures taken from it, the comparison with the design model, and the curve's
//! CSV form. Pure except [`read_curve_csv`], which reads one file.

use super::SpiceError;
use crate::design::{Band, Expectation};
use crate::quantity::eng;
use serde::Serialize;
use std::io::{self, Write};
use std::path::Path;

/// Header of the simulated-curve CSV.
pub const CSV_HEADER: &str = "current [A],voltage [V]";

/// Default knee criterion: the output has fallen this fraction below its regulated value.
pub const KNEE_DROP: f64 = 0.02;

/// Parse the table that `.print dc i(Vmeas) v(out)` writes in batch mode into (current,
/// voltage) pairs in sweep order. The table may be split into pages, each with its header;
/// other lines (notes, warnings, totals) are ignored.
pub fn parse_print_output(text: &str) -> Result<Vec<(f64, f64)>, SpiceError> {
    let mut cols: Option<(usize, usize, usize)> = None;
    let mut points: Vec<(usize, f64, f64)> = Vec::new();
    for (lineno, line) in text.lines().enumerate() {
        let toks: Vec<&str> = line.split_whitespace().collect();
        if toks
            .first()
            .is_some_and(|t| t.eq_ignore_ascii_case("index"))
        {
            let find = |want: &dyn Fn(&str) -> bool| toks.iter().position(|t| want(t));
            let i = find(&|t: &str| {
                t.eq_ignore_ascii_case("vmeas#branch") || t.eq_ignore_ascii_case("i(vmeas)")
            });
            let v = find(&|t: &str| t.eq_ignore_ascii_case("v(out)"));
            match (i, v) {
                (Some(i), Some(v)) => cols = Some((toks.len(), i, v)),
                _ => {
                    return Err(SpiceError::Output {
                        line: lineno + 1,
                        message: format!(
                            "a table header without the load current (vmeas#branch) and output (v(out)) columns: {line:?}"
                        ),
                    })
                }
            }
            continue;
        }
        let Some((n, ci, cv)) = cols else { continue };
        let Some(first) = toks.first() else { continue };
        let Ok(index) = first.parse::<usize>() else {
            continue;
        };
        if toks.len() != n {
            return Err(SpiceError::Output {
                line: lineno + 1,
                message: format!(
                    "expected {n} columns in a data row, found {}: {line:?}",
                    toks.len()
                ),
            });
        }
        let parse = |t: &str| {
            t.parse::<f64>()
                .ok()
                .filter(|x| x.is_finite())
                .ok_or_else(|| SpiceError::Output {
                    line: lineno + 1,
                    message: format!("not a number: {t:?} in {line:?}"),
                })
        };
        let i = parse(toks[ci])?;
        let v = parse(toks[cv])?;
        if points.last().is_some_and(|(last, _, _)| *last >= index) {
            // A repeated row (some versions repeat the last row of a page): keep the first.
            continue;
        }
        points.push((index, i, v));
    }
    if cols.is_none() {
        return Err(SpiceError::Output {
            line: 0,
            message:
                "no DC sweep table found (no line starting with \"Index\"); did the analysis run?"
                    .into(),
        });
    }
    if points.len() < 3 {
        return Err(SpiceError::Output {
            line: 0,
            message: format!(
                "the DC sweep table has {} rows; at least 3 are needed",
                points.len()
            ),
        });
    }
    Ok(points.into_iter().map(|(_, i, v)| (i, v)).collect())
}

/// The V-I curve from the printed output of a netlist built by [`super::build`], which sweeps
/// from the short to open circuit: points come back lightest load first, short last.
pub fn curve_from_print(text: &str) -> Result<Vec<(f64, f64)>, SpiceError> {
    let mut points = parse_print_output(text)?;
    points.reverse();
    Ok(points)
}

/// Knee and short-circuit figures of a V-I curve swept from open circuit to short.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct CurveSummary {
    /// Output at the lightest load (the first point): the regulated value.
    pub regulated_v: f64,
    /// Knee by the fixed-drop criterion: the current where the output first falls
    /// `drop_fraction` below the regulated value (interpolated between sweep points).
    pub knee_drop_a: Option<f64>,
    /// Knee as the intersection of a line through the regulation region and a line through
    /// the limit region (None when either region has too few points).
    pub knee_fit_a: Option<f64>,
    /// Current at the last point (the short).
    pub short_circuit_a: f64,
    /// Output at the last point (0 V for a true short).
    pub short_circuit_v: f64,
    pub drop_fraction: f64,
}

/// Least-squares line y = a + b x.
fn fit_line(xs: &[f64], ys: &[f64]) -> Option<(f64, f64)> {
    let n = xs.len();
    if n < 2 {
        return None;
    }
    let mx = xs.iter().sum::<f64>() / n as f64;
    let my = ys.iter().sum::<f64>() / n as f64;
    let sxx: f64 = xs.iter().map(|x| (x - mx).powi(2)).sum();
    let sxy: f64 = xs.iter().zip(ys).map(|(x, y)| (x - mx) * (y - my)).sum();
    if sxx <= 0.0 {
        return None;
    }
    let b = sxy / sxx;
    Some((my - b * mx, b))
}

/// Summarise a curve (points in sweep order, lightest load first).
pub fn summarize(points: &[(f64, f64)], drop_fraction: f64) -> Option<CurveSummary> {
    let &(_, regulated_v) = points.first()?;
    let &(short_circuit_a, short_circuit_v) = points.last()?;
    let threshold = regulated_v * (1.0 - drop_fraction);
    let mut knee_drop_a = None;
    let mut first_below = points.len();
    for (k, w) in points.windows(2).enumerate() {
        let ((i0, v0), (i1, v1)) = (w[0], w[1]);
        if v1 < threshold {
            let t = if (v0 - v1).abs() > 0.0 {
                ((v0 - threshold) / (v0 - v1)).clamp(0.0, 1.0)
            } else {
                1.0
            };
            knee_drop_a = Some(i0 + t * (i1 - i0));
            first_below = k + 1;
            break;
        }
    }
    // Two-segment fit: regulation line V = c + d I over 10-80 % of the knee current, limit line
    // I = a + b V over 20-80 % of the regulated output after the knee.
    let knee_fit_a = knee_drop_a.and_then(|kd| {
        let reg: Vec<(f64, f64)> = points[..first_below]
            .iter()
            .copied()
            .filter(|(i, _)| *i >= 0.1 * kd && *i <= 0.8 * kd)
            .collect();
        let lim: Vec<(f64, f64)> = points[first_below..]
            .iter()
            .copied()
            .filter(|(_, v)| *v >= 0.2 * regulated_v && *v <= 0.8 * regulated_v)
            .collect();
        if reg.len() < 2 || lim.len() < 2 {
            return None;
        }
        let (ri, rv): (Vec<f64>, Vec<f64>) = reg.into_iter().unzip();
        let (li, lv): (Vec<f64>, Vec<f64>) = lim.into_iter().unzip();
        let (c, dd) = fit_line(&ri, &rv)?;
        let (a, b) = fit_line(&lv, &li)?;
        let den = 1.0 - b * dd;
        if den.abs() < 1e-12 {
            return None;
        }
        let i = (a + b * c) / den;
        i.is_finite().then_some(i)
    });
    Some(CurveSummary {
        regulated_v,
        knee_drop_a,
        knee_fit_a,
        short_circuit_a,
        short_circuit_v,
        drop_fraction,
    })
}

/// Relative difference of `sim` from `model`, percent.
pub fn diff_pct(sim: f64, model: f64) -> f64 {
    100.0 * (sim - model) / model
}

/// One row of the model-versus-simulation comparison.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct CompareRow {
    pub quantity: String,
    pub unit: String,
    pub model: Band,
    pub simulated: Option<f64>,
    pub difference_pct: Option<f64>,
}

/// Compare a simulated curve's figures with the model's nominal values and bands.
pub fn compare(e: &Expectation, s: &CurveSummary) -> Vec<CompareRow> {
    let row = |q: &str, unit: &str, band: &Band, sim: Option<f64>| CompareRow {
        quantity: q.to_string(),
        unit: unit.to_string(),
        model: *band,
        simulated: sim,
        difference_pct: sim.map(|x| diff_pct(x, band.nominal)),
    };
    vec![
        row("output", "V", &e.vout.setting_band, Some(s.regulated_v)),
        row(
            &format!("limit knee ({} % drop)", s.drop_fraction * 100.0),
            "A",
            &e.limit_current,
            s.knee_drop_a,
        ),
        row(
            "limit knee (two-line fit)",
            "A",
            &e.limit_current,
            s.knee_fit_a,
        ),
        row(
            "short-circuit current",
            "A",
            &e.short_circuit_current,
            Some(s.short_circuit_a),
        ),
    ]
}

/// Print the comparison as a table.
pub fn render_comparison(
    w: &mut impl Write,
    simulator: &str,
    models: &str,
    rows: &[CompareRow],
    notes: &[super::Departure],
) -> io::Result<()> {
    writeln!(
        w,
        "simulated with {simulator} ({models}; DC sweep, no self-heating)"
    )?;
    writeln!(
        w,
        "  {:<26}{:>10}   {:^24}   {:^24}   {:>10}   {:>10}",
        "", "model", "worst case", "Monte Carlo (+-3 sigma)", "simulated", "difference"
    )?;
    for r in rows {
        let (sim, diff) = match (r.simulated, r.difference_pct) {
            (Some(s), Some(d)) => (eng(s, &r.unit), format!("{d:+.1} %")),
            _ => ("-".to_string(), "-".to_string()),
        };
        let inside = match r.simulated {
            Some(s) if !r.model.worst_case.contains(s) => "  outside the worst-case band",
            _ => "",
        };
        writeln!(
            w,
            "  {:<26}{:>10}   {:>10} .. {:<10}   {:>10} .. {:<10}   {:>10}   {:>10}{}",
            r.quantity,
            eng(r.model.nominal, &r.unit),
            eng(r.model.worst_case.min, &r.unit),
            eng(r.model.worst_case.max, &r.unit),
            eng(r.model.monte_carlo.p_low, &r.unit),
            eng(r.model.monte_carlo.p_high, &r.unit),
            sim,
            diff,
            inside
        )?;
    }
    for n in notes {
        let effect = match (n.knee_pct, n.short_circuit_pct) {
            (Some(k), Some(s)) => {
                format!(" (about {k:+.1} % on the knee, {s:+.1} % on the short-circuit current)")
            }
            _ => String::new(),
        };
        writeln!(w, "  note: {}{effect}", n.text)?;
    }
    Ok(())
}

/// Write a curve as CSV (`current [A],voltage [V]`).
pub fn write_curve_csv(w: &mut impl Write, points: &[(f64, f64)]) -> io::Result<()> {
    writeln!(w, "{CSV_HEADER}")?;
    for (i, v) in points {
        writeln!(w, "{i},{v}")?;
    }
    Ok(())
}

/// Parse curve CSV text; `label` names the source in errors.
pub fn parse_curve_csv(text: &str, label: &str) -> Result<Vec<(f64, f64)>, SpiceError> {
    let bad = |line: usize, message: String| SpiceError::Csv {
        path: label.to_string(),
        line,
        message,
    };
    let mut lines = text.lines().enumerate();
    match lines.next() {
        Some((_, h)) if h.trim().trim_start_matches('\u{feff}') == CSV_HEADER => {}
        Some((_, h)) => {
            return Err(bad(
                1,
                format!("expected the header {CSV_HEADER:?}, found {h:?}"),
            ))
        }
        None => {
            return Err(bad(
                1,
                format!("empty file; expected the header {CSV_HEADER:?}"),
            ))
        }
    }
    let mut out = Vec::new();
    for (k, line) in lines {
        if line.trim().is_empty() {
            continue;
        }
        let mut it = line.split(',');
        let (Some(a), Some(b), None) = (it.next(), it.next(), it.next()) else {
            return Err(bad(k + 1, format!("expected two columns, found {line:?}")));
        };
        let num = |t: &str, what: &str| {
            t.trim()
                .parse::<f64>()
                .ok()
                .filter(|x| x.is_finite())
                .ok_or_else(|| bad(k + 1, format!("{what} is not a number: {t:?}")))
        };
        out.push((num(a, "current")?, num(b, "voltage")?));
    }
    Ok(out)
}

/// Read a curve CSV file written by [`write_curve_csv`].
pub fn read_curve_csv(path: &Path) -> Result<Vec<(f64, f64)>, SpiceError> {
    let text = std::fs::read_to_string(path).map_err(|source| SpiceError::Io {
        what: format!("reading the simulated curve {}", path.display()),
        source,
    })?;
    parse_curve_csv(&text, &path.display().to_string())
}

#[cfg(test)]
mod tests {
    use super::*;

    /// An ideal sharp-limit curve: 10 V up to 2 A, then straight down to the short at 2 A.
    fn ideal() -> Vec<(f64, f64)> {
        let mut p: Vec<(f64, f64)> = (0..=20).map(|k| (k as f64 * 0.1, 10.0)).collect();
        p.extend((1..=10).map(|k| (2.0, 10.0 - k as f64)));
        p
    }

    #[test]
    fn knee_of_a_sharp_curve_is_its_corner() {
        let s = summarize(&ideal(), 0.02).expect("summary");
        assert_eq!(s.regulated_v, 10.0);
        assert!((s.knee_drop_a.expect("knee") - 2.0).abs() < 1e-12);
        assert!((s.knee_fit_a.expect("fit") - 2.0).abs() < 1e-9);
        assert_eq!((s.short_circuit_a, s.short_circuit_v), (2.0, 0.0));
    }

    #[test]
    fn knee_interpolates_on_a_sloped_limit_line() {
        // Limit line I = 1 + 0.1 V from (2 A, 10 V) to (1 A, 0 V) (foldback).
        let mut p: Vec<(f64, f64)> = (0..=20).map(|k| (k as f64 * 0.1, 10.0)).collect();
        p.extend((1..=10).map(|k| {
            let v = 10.0 - k as f64;
            (1.0 + 0.1 * v, v)
        }));
        let s = summarize(&p, 0.02).expect("summary");
        // 2 % below 10 V is 9.8 V, on the limit line at 1.98 A.
        assert!((s.knee_drop_a.expect("knee") - 1.98).abs() < 1e-9);
        assert!((s.knee_fit_a.expect("fit") - 2.0).abs() < 1e-9);
        assert_eq!(s.short_circuit_a, 1.0);
    }

    #[test]
    fn csv_round_trip_and_errors() {
        let mut buf = Vec::new();
        write_curve_csv(&mut buf, &ideal()).expect("write");
        let text = String::from_utf8(buf).expect("utf8");
        assert!(text.starts_with("current [A],voltage [V]\n"));
        assert_eq!(parse_curve_csv(&text, "t").expect("parse"), ideal());
        let e = parse_curve_csv("current [A],voltage [V]\n1,2\n3,x\n", "f.csv").unwrap_err();
        assert!(e.to_string().contains("f.csv:3"), "{e}");
        assert!(parse_curve_csv("a,b\n", "f.csv").is_err());
    }

    #[test]
    fn comparison_table_rows_read_model_bands_simulation_and_difference() {
        use crate::design::{Interval, McStats};
        let band = Band {
            nominal: 2.0,
            worst_case: Interval { min: 1.8, max: 2.2 },
            monte_carlo: McStats {
                samples: 10,
                mean: 2.0,
                sigma: 0.03,
                p_low: 1.9,
                p_high: 2.1,
            },
        };
        let rows = vec![
            CompareRow {
                quantity: "short-circuit current".into(),
                unit: "A".into(),
                model: band,
                simulated: Some(2.05),
                difference_pct: Some(diff_pct(2.05, 2.0)),
            },
            CompareRow {
                quantity: "limit knee (two-line fit)".into(),
                unit: "A".into(),
                model: band,
                simulated: Some(2.5),
                difference_pct: Some(diff_pct(2.5, 2.0)),
            },
        ];
        let notes = [crate::spice::Departure {
            text: "clamp current".into(),
            knee_pct: Some(0.5),
            short_circuit_pct: Some(0.75),
        }];
        let mut buf = Vec::new();
        render_comparison(&mut buf, "ngspice-39", "matched", &rows, &notes).expect("render");
        let text = String::from_utf8(buf).expect("utf8");
        let lines: Vec<&str> = text.lines().collect();
        assert_eq!(
            lines[0],
            "simulated with ngspice-39 (matched; DC sweep, no self-heating)"
        );
        assert_eq!(
            lines[2],
            "  short-circuit current         2.00 A       1.80 A .. 2.20 A           1.90 A .. 2.10 A           2.05 A       +2.5 %"
        );
        assert!(
            lines[3].ends_with("+25.0 %  outside the worst-case band"),
            "{}",
            lines[3]
        );
        assert_eq!(
            lines[4],
            "  note: clamp current (about +0.5 % on the knee, +0.8 % on the short-circuit current)"
        );
    }

    #[test]
    fn parser_rejects_text_without_a_table() {
        let e = parse_print_output("Error: no such vector\n").unwrap_err();
        assert!(e.to_string().contains("no DC sweep table"), "{e}");
    }
}
