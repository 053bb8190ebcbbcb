//! The line-regulation and soak plots: a line-and-soak plan run end to end on the simulated
//! bench (real pseudo-terminals and loopback TCP) gets `plots/line_regulation.png` and
//! `plots/soak.png`, decoded by the `png` crate (a decoder that is not ours) and referenced by
//! report.html; a plan without such steps gets neither; flat data still gets a readable axis.
//! Line regulation is the output's change over the line sweep as a percentage of the output
//! (the usual definition of line regulation, common practice); the drift limit is a
//! percentage of the soak's first reading.

use crate::support::e2e::{serial, show, Rig};
use regulus::analysis::SoakPoint;
use regulus::report::plots::SIZE;
use regulus::report::plots_line::LineChart;
use regulus::sim::SimOptions;
use std::path::Path;

const LAB: &str = "teaching-lab-0-20v.toml";

const LINE_AND_SOAK: &str = r#"
name = "line-soak-limits"
source = "100 % of vin"
settle = "40 ms"
samples = 1

[[step]]
kind = "line_sweep"
from = "90 % of vin"
to = "110 % of vin"
points = 5
load = "50 % of max_load"
max_change = "0.5 %"

[[step]]
kind = "soak"
load = "50 % of max_load"
duration = "1 s"
interval = "200 ms"
max_drift = "0.5 %"
max_rise = "25 degC"
"#;

const SWEEP_ONLY: &str = r#"
name = "sweep-only"
source = "100 % of vin"
settle = "40 ms"
samples = 1

[[step]]
kind = "load_sweep"
from = "0 A"
to = "95 % of max_load"
points = 4
"#;

/// Decode a PNG file: (width, height, number of distinct pixel values).
fn decode_png(path: &Path) -> (u32, u32, usize) {
    let file = std::fs::File::open(path).unwrap_or_else(|e| panic!("{}: {e}", path.display()));
    let mut reader = png::Decoder::new(file)
        .read_info()
        .unwrap_or_else(|e| panic!("{}: not a PNG: {e}", path.display()));
    let mut buf = vec![0; reader.output_buffer_size()];
    let info = reader.next_frame(&mut buf).unwrap();
    let bpp = info.color_type.samples() * (info.bit_depth as usize).div_ceil(8);
    let mut seen = std::collections::HashSet::new();
    for px in buf[..info.buffer_size()].chunks(bpp) {
        seen.insert(px.to_vec());
        if seen.len() > 16 {
            break;
        }
    }
    (info.width, info.height, seen.len())
}

/// The numbers of the axis tick labels in an SVG (text elements holding only a number).
fn tick_numbers(svg: &str) -> Vec<f64> {
    svg.split("<text")
        .skip(1)
        .filter_map(|t| t.split('>').nth(1)?.split('<').next()?.trim().parse().ok())
        .collect()
}

#[test]
fn a_line_and_soak_run_gets_both_plots_and_a_sweep_only_run_neither() {
    let _g = serial();
    let rig = Rig::start(LAB, SimOptions::default().seed(311));
    let out = rig.run("PLT-0311", LINE_AND_SOAK);
    // Both metrics are judged against the plan's limits: a verdict, not INCOMPLETE.
    assert!(
        matches!(out.status.code(), Some(0) | Some(1) | Some(5)),
        "{}",
        show(&out)
    );
    let dir = rig.run_dir("PLT-0311");
    let s: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(dir.join("summary.json")).unwrap()).unwrap();
    let checks = s["comparison"]["checks"].as_array().unwrap();
    for m in ["line_regulation", "soak_drift"] {
        assert!(checks.iter().any(|c| c["metric"] == m), "{m}: {s}");
    }
    for name in ["line_regulation", "soak"] {
        let png = dir.join(format!("plots/{name}.png"));
        let (w, h, colours) = decode_png(&png);
        assert_eq!((w, h), SIZE, "{name}");
        assert!(colours > 3, "{name}: only {colours} colours, a blank plot");
        assert!(dir.join(format!("plots/{name}.svg")).is_file(), "{name}");
    }
    let html = std::fs::read_to_string(dir.join("report.html")).unwrap();
    assert!(html.contains("id=\"plot-line_regulation\""), "no line plot");
    assert!(html.contains("id=\"plot-soak\""), "no soak plot");

    // The line plot's voltage axis covers the measured output voltages, and the plan limit
    // is drawn; the soak plot draws both limits.
    let svg = std::fs::read_to_string(dir.join("plots/line_regulation.svg")).unwrap();
    assert!(svg.contains("plan limit: +-0.5 %"), "{svg}");
    assert!(svg.contains("Input voltage (V)"), "{svg}");
    let rec = regulus::record::read_run(&dir).unwrap();
    let pts = regulus::analysis::line_points(&rec.rows);
    assert!(pts.len() >= 5, "{pts:?}");
    let ticks = tick_numbers(&svg);
    let (vlo, vhi) = pts.iter().fold((f64::MAX, f64::MIN), |(lo, hi), p| {
        (lo.min(p.1), hi.max(p.1))
    });
    assert!(
        ticks.iter().any(|t| *t <= vlo + 0.02) && ticks.iter().any(|t| *t >= vhi - 0.02),
        "ticks {ticks:?}, output {vlo} .. {vhi}"
    );
    let svg = std::fs::read_to_string(dir.join("plots/soak.svg")).unwrap();
    assert!(svg.contains("plan drift limit +-0.5 %"), "{svg}");
    assert!(svg.contains("plan rise limit 25 degC"), "{svg}");
    assert!(svg.contains("Time since the soak began (s)"), "{svg}");

    let out = rig.run("PLT-0312", SWEEP_ONLY);
    assert!(
        matches!(out.status.code(), Some(0) | Some(3) | Some(5)),
        "{}",
        show(&out)
    );
    let dir = rig.run_dir("PLT-0312");
    assert!(dir.join("plots/vi_curve.png").is_file());
    for name in ["line_regulation", "soak"] {
        assert!(!dir.join(format!("plots/{name}.png")).exists(), "{name}");
        assert!(!dir.join(format!("plots/{name}.svg")).exists(), "{name}");
    }
    let html = std::fs::read_to_string(dir.join("report.html")).unwrap();
    assert!(!html.contains("plot-line_regulation") && !html.contains("plot-soak"));
}

#[test]
fn flat_line_and_soak_data_still_get_readable_axes() {
    // A perfectly regulated output: 12.000 V at every input voltage, no drift, no
    // temperature change. The axes must not collapse to one repeated tick or "-0.0 .. 0.0".
    let pts: Vec<(f64, f64)> = (0..5).map(|k| (16.0 + k as f64, 12.0)).collect();
    let svg = LineChart::LineRegulation {
        points: &pts,
        reference_voltage: Some(12.0),
        band: None,
        max_change_percent: None,
    }
    .to_svg(SIZE)
    .unwrap();
    let ticks = tick_numbers(&svg);
    let mut distinct = ticks.clone();
    distinct.sort_by(f64::total_cmp);
    distinct.dedup();
    assert!(distinct.len() >= 4, "{ticks:?}");
    assert!(!svg.contains(">-0.0<") && !svg.contains(">-0<"), "{svg}");
    assert!(
        ticks.iter().any(|t| *t < 12.0) && ticks.iter().any(|t| *t > 12.0),
        "{ticks:?}"
    );

    let soak: Vec<SoakPoint> = (0..6)
        .map(|k| SoakPoint {
            elapsed_s: 10.0 + k as f64 * 30.0,
            voltage: Some(12.0),
            temperature: Some(25.0),
        })
        .collect();
    let svg = LineChart::Soak {
        series: &soak,
        max_drift_percent: None,
        max_rise_c: None,
    }
    .to_svg(SIZE)
    .unwrap();
    // 150 s: in minutes, from the soak's own start.
    assert!(svg.contains("Time since the soak began (min)"), "{svg}");
    assert!(!svg.contains(">-0.0<"), "{svg}");
    let ticks = tick_numbers(&svg);
    assert!(
        ticks.iter().any(|t| *t <= -0.5) && ticks.iter().any(|t| *t >= 0.5),
        "{ticks:?}"
    );
}

#[test]
fn a_unit_outside_the_band_shows_the_bands_edge() {
    // A 12 V output judged against a 19.7-21.1 V band: the axis reaches the band's lower
    // edge so the gap shows, and the band is named.
    let pts: Vec<(f64, f64)> = (0..5)
        .map(|k| (16.0 + k as f64, 12.0 + 0.001 * k as f64))
        .collect();
    let svg = LineChart::LineRegulation {
        points: &pts,
        reference_voltage: Some(20.4),
        band: Some(regulus::compare::Limits {
            min: 19.7,
            max: 21.1,
        }),
        max_change_percent: Some(0.2),
    }
    .to_svg(SIZE)
    .unwrap();
    assert!(
        svg.contains("design worst-case output 19.70 .. 21.10 V"),
        "{svg}"
    );
    let ticks = tick_numbers(&svg);
    assert!(ticks.iter().any(|t| *t >= 19.0), "{ticks:?}");
    assert!(ticks.iter().any(|t| *t <= 12.0), "{ticks:?}");
}
