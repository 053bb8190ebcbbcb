//! `regulus size`: choose the sense resistor (and a foldback divider) from targets as preferred
//! values, print the resulting limit bands and ratings, and optionally write a design file.

use super::usage;
use crate::design::eseries::Series;
use crate::design::sizing::{self, Targets};
use crate::design::{self, Clamp, Design, Stage};
use crate::quantity::eng;
use anyhow::Context;
use std::io::Write;
use std::path::PathBuf;

/// Clamp topology to size.
#[derive(Debug, Clone, Copy, clap::ValueEnum)]
pub enum ClampArg {
    DiodeString,
    Transistor,
    Foldback,
}

/// Pass stage.
#[derive(Debug, Clone, Copy, clap::ValueEnum)]
pub enum StageArg {
    Single,
    Darlington,
}

/// How ideal values become preferred ones.
#[derive(Debug, Clone, Copy, clap::ValueEnum)]
pub enum RoundArg {
    Nearest,
    Up,
    Down,
}

/// Options of `regulus size`.
#[derive(Debug, clap::Args)]
pub struct Args {
    /// Maximum continuous load current in amperes.
    #[arg(long, value_name = "A")]
    pub current: f64,
    /// Put the nominal limit this many percent above the maximum current.
    #[arg(long, value_name = "PCT", default_value_t = 25.0)]
    pub margin: f64,
    /// Clamp topology (default: the base design's, else transistor).
    #[arg(long, value_enum)]
    pub clamp: Option<ClampArg>,
    /// Pass stage (default: the base design's, else single).
    #[arg(long, value_enum)]
    pub stage: Option<StageArg>,
    /// Diode-string clamp: diodes in the string (default: pass junctions + 1).
    #[arg(long, value_name = "N")]
    pub diodes: Option<u32>,
    /// Junction drop at 25 degC used for clamp and pass junctions.
    #[arg(long, value_name = "V", default_value_t = 0.65)]
    pub junction_v: f64,
    /// Foldback: wanted short-circuit current in amperes.
    #[arg(long, value_name = "A")]
    pub short_circuit: Option<f64>,
    /// Output voltage to size and evaluate at (default: the base design's output): the
    /// setting of an adjustable design, else the feedback top resistor is set for it.
    #[arg(long, value_name = "V")]
    pub vout: Option<f64>,
    /// How every ideal value is rounded to the series: nearest, next up or next down
    /// (default: next down for a sharp clamp's sense resistor, keeping the nominal limit at or
    /// above the target; nearest for foldback).
    #[arg(long, value_enum)]
    pub round: Option<RoundArg>,
    /// Share of the aux transistor's nominal drop the collector resistor should take (default:
    /// the base design's share); the resistor is chosen as a preferred value.
    #[arg(long, value_name = "FRACTION")]
    pub collector_share: Option<f64>,
    /// Preferred-value series for the chosen resistors.
    #[arg(long, default_value = "E24")]
    pub series: Series,
    /// Foldback: bottom resistor of the divider in ohms (the top is computed).
    #[arg(long, value_name = "OHMS", default_value_t = 10_000.0)]
    pub divider_bottom: f64,
    /// Design file to start from (its input, reference, pass stage...); default: the template.
    #[arg(long, value_name = "FILE")]
    pub base: Option<PathBuf>,
    /// Write the resulting design file here.
    #[arg(long, value_name = "FILE")]
    pub write: Option<PathBuf>,
    /// Monte Carlo samples for the resulting bands.
    #[arg(long, value_name = "N", default_value_t = 10_000)]
    pub samples: usize,
    /// Print JSON instead of text (SI units).
    #[arg(long, conflicts_with = "write")]
    pub json: bool,
}

const TEMPLATE: &str = include_str!("../../config/design-template.toml");

pub fn run(args: Args) -> anyhow::Result<u8> {
    let (base_text, base_label) = match &args.base {
        Some(p) => (
            std::fs::read_to_string(p).map_err(|source| design::DesignError::Read {
                path: p.display().to_string(),
                source,
            })?,
            p.display().to_string(),
        ),
        None => (
            TEMPLATE.to_string(),
            "config/design-template.toml".to_string(),
        ),
    };
    let original = Design::parse(&base_text, &base_label)?;
    let mut base = original.clone();
    let clamp = match args.clamp {
        Some(ClampArg::DiodeString) => Clamp::DiodeString,
        Some(ClampArg::Transistor) => Clamp::Transistor,
        Some(ClampArg::Foldback) => Clamp::Foldback,
        None => base.limit.clamp,
    };
    let stage = match args.stage {
        Some(StageArg::Single) => Stage::Single,
        Some(StageArg::Darlington) => Stage::Darlington,
        None => base.pass.stage,
    };
    if args.samples == 0 || args.samples > 10_000_000 {
        return Err(usage("--samples must be between 1 and 10,000,000"));
    }
    // The output every evaluation uses: --vout when given, else the base design's.
    let output_change = match args.vout {
        Some(v) => Some(sizing::set_output(&mut base, v)?),
        None => None,
    };
    let nominal = design::evaluate(&base, &design::Params::nominal(&base));
    let collector = base.aux.as_ref().map(|a| sizing::CollectorTarget {
        share: args.collector_share.unwrap_or(match a.collector_ohms {
            Some(r) if nominal.vin_no_load > a.volts => {
                r * a.current_a / (nominal.vin_no_load - a.volts)
            }
            _ => a.collector_share,
        }),
        vin_nominal: nominal.vin_no_load,
        aux_volts: a.volts,
        aux_current_a: a.current_a,
    });
    if args.collector_share.is_some() && collector.is_none() {
        return Err(usage(
            "--collector-share needs a base design with an [aux] rail",
        ));
    }
    let targets = Targets {
        max_current_a: args.current,
        margin_pct: args.margin,
        clamp,
        stage,
        diodes: args.diodes.or(if clamp == base.limit.clamp {
            base.limit.diodes
        } else {
            None
        }),
        junction_v: args.junction_v,
        short_circuit_a: args.short_circuit,
        vout_v: Some(nominal.vout_set),
        series: args.series,
        divider_bottom_ohms: args.divider_bottom,
        rounding: args.round.map(|r| match r {
            RoundArg::Nearest => sizing::Rounding::Nearest,
            RoundArg::Up => sizing::Rounding::Up,
            RoundArg::Down => sizing::Rounding::Down,
        }),
        collector: collector.filter(|c| c.share > 0.0),
    };
    let choice = sizing::choose(&targets)?;
    sizing::apply(&mut base, &targets, &choice);
    base.validate().map_err(|(path, msg)| {
        usage(format!(
            "the sized design is not valid at {}: {msg}",
            path.join(".")
        ))
    })?;
    let e = design::expect_with(&base, args.samples, base.rules.seed);

    let stdout = std::io::stdout();
    let mut w = stdout.lock();
    if args.json {
        let asked = super::json_out::SizeAsked {
            max_current_a: args.current,
            margin_pct: args.margin,
            clamp: clamp.as_str(),
            stage: match stage {
                Stage::Single => "single",
                Stage::Darlington => "darlington",
            },
            series: args.series.to_string(),
        };
        super::json_out::write_size_json(&mut w, &asked, &choice, &e)?;
        return Ok(super::EXIT_OK);
    }
    writeln!(
        w,
        "sizing for {} with {} % margin (target limit {}), {}, {} pass stage, {} (+-{} % parts)",
        eng(args.current, "A"),
        args.margin,
        eng(args.current * (1.0 + args.margin / 100.0), "A"),
        clamp.as_str().replace('_', "-"),
        match stage {
            Stage::Single => "single",
            Stage::Darlington => "Darlington",
        },
        args.series,
        args.series.tolerance_pct()
    )?;
    writeln!(
        w,
        "  rounding          {} to {}{}",
        choice.rounding.as_str(),
        args.series,
        if choice.rounding_is_default {
            " (the default for this clamp; choose with --round nearest|up|down)"
        } else {
            " (--round)"
        }
    )?;
    match output_change {
        Some(sizing::OutputChange::Setting(v)) => {
            writeln!(w, "  output            {} (the setting evaluated)", eng(v, "V"))?
        }
        Some(sizing::OutputChange::FeedbackTop { ohms, vout }) => writeln!(
            w,
            "  output            {} (feedback top set to {} exactly: fit a preferred value or a trimmer)",
            eng(vout, "V"),
            eng(ohms, "ohm")
        )?,
        None => writeln!(
            w,
            "  output            {} (the base design's; --vout to change)",
            eng(nominal.vout_set, "V")
        )?,
    }
    if let Some(n) = choice.diodes {
        writeln!(w, "  clamp diodes      {n}")?;
    }
    writeln!(
        w,
        "  sense resistor    ideal {} -> {} +-{} %",
        eng(choice.ideal_sense_ohms, "ohm"),
        eng(choice.sense_ohms, "ohm"),
        choice.sense_tolerance_pct
    )?;
    if let Some((top, bottom)) = choice.divider {
        writeln!(
            w,
            "  foldback divider  top {} / bottom {} (k = {:.4}; ideal {:.4})",
            eng(top, "ohm"),
            eng(bottom, "ohm"),
            bottom / (top + bottom),
            choice.ideal_k.unwrap_or(f64::NAN)
        )?;
    }
    if let Some(c) = choice.collector {
        writeln!(
            w,
            "  collector resistor ideal {} -> {}: takes {:.1} % of the nominal drop, {} at full aux current",
            eng(c.ideal_ohms, "ohm"),
            eng(c.ohms, "ohm"),
            c.share * 100.0,
            eng(c.watts, "W")
        )?;
    }
    let b = &e.limit_current;
    writeln!(
        w,
        "  limit knee        {} nominal; worst case {} .. {}; Monte Carlo {} .. {} (at {})",
        eng(b.nominal, "A"),
        eng(b.worst_case.min, "A"),
        eng(b.worst_case.max, "A"),
        eng(b.monte_carlo.p_low, "A"),
        eng(b.monte_carlo.p_high, "A"),
        eng(e.vout.setting, "V")
    )?;
    let s = &e.short_circuit_current;
    writeln!(
        w,
        "  short circuit     {} nominal; worst case {} .. {}",
        eng(s.nominal, "A"),
        eng(s.worst_case.min, "A"),
        eng(s.worst_case.max, "A")
    )?;
    let sh = &e.thermal.self_heated;
    if let Some(ps) = e.dissipation.get("sense_resistor") {
        writeln!(
            w,
            "  sense dissipation {} typical (nominal unit, settled short), {} worst case: use a {} part or larger ({} % derating)",
            eng(sh.short_nominal.sense_watts.max(sh.knee_nominal.sense_watts), "W"),
            eng(ps.watts, "W"),
            ps.suggested_rating_watts
                .map(|r| eng(r, "W"))
                .unwrap_or_else(|| "more than 100 W".into()),
            base.rules.resistor_derating * 100.0
        )?;
    }
    if let Some(pp) = e.dissipation.get("pass_device") {
        writeln!(
            w,
            "  pass device       {} typical (nominal unit, settled short), {} worst case, {}",
            eng(sh.short_nominal.pass_watts, "W"),
            eng(pp.watts, "W"),
            pp.condition
        )?;
    }
    if b.worst_case.min < args.current {
        let mut advice = vec!["raise the margin (--margin)".to_string()];
        if args.series.tolerance_pct() > 1.0 {
            advice.push("a closer-tolerance series (--series E96)".into());
        }
        if clamp == Clamp::DiodeString {
            advice.push(
                "a transistor limiter (--clamp transistor: one junction's spread instead of the string's)"
                    .into(),
            );
        }
        writeln!(
            w,
            "  note: the lowest worst-case limit ({}) is below the rated current; {}",
            eng(b.worst_case.min, "A"),
            advice.join(", or ")
        )?;
    }
    if let Some(path) = &args.write {
        if let Some(sug) = e
            .dissipation
            .get("sense_resistor")
            .and_then(|p| p.suggested_rating_watts)
        {
            base.limit.sense.rating_w = Some(sug.max(base.limit.sense.rating_w.unwrap_or(0.0)));
        }
        let body = design::edit::rewrite(&base_text, &original, &base)
            .context("writing the sized design into the base file's text")?;
        let text = format!(
            "# Written by regulus size: {} with {} % margin, {}, rounding {}.\n{}",
            eng(args.current, "A"),
            args.margin,
            args.series,
            choice.rounding.as_str(),
            body
        );
        if path.exists() {
            return Err(usage(format!(
                "{} exists: choose another file name (regulus never overwrites a design)",
                path.display()
            )));
        }
        std::fs::write(path, text).with_context(|| format!("writing {}", path.display()))?;
        writeln!(w, "wrote {}", path.display())?;
    }
    Ok(super::EXIT_OK)
}
