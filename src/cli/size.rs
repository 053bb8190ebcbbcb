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
    /// Foldback: output voltage of the knee (default: the base design's output).
    #[arg(long, value_name = "V")]
    pub vout: Option<f64>,
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
    let mut base = match &args.base {
        Some(p) => Design::load(p)?,
        None => Design::parse(TEMPLATE, "config/design-template.toml")?,
    };
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
    let nominal = design::evaluate(&base, &design::Params::nominal(&base));
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
        vout_v: args.vout.or(Some(nominal.vout_set)),
        series: args.series,
        divider_bottom_ohms: args.divider_bottom,
    };
    let choice = sizing::choose(&targets)?;
    sizing::apply(&mut base, &targets, &choice);
    base.validate().map_err(|(path, msg)| {
        usage(format!(
            "the sized design is not valid at {}: {msg}",
            path.join(".")
        ))
    })?;
    if args.samples == 0 || args.samples > 10_000_000 {
        return Err(usage("--samples must be between 1 and 10,000,000"));
    }
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
        "sizing for {} with {} % margin (target limit {}), {}, {} pass stage, {}",
        eng(args.current, "A"),
        args.margin,
        eng(args.current * (1.0 + args.margin / 100.0), "A"),
        clamp.as_str().replace('_', "-"),
        match stage {
            Stage::Single => "single",
            Stage::Darlington => "Darlington",
        },
        args.series
    )?;
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
    let b = &e.limit_current;
    writeln!(
        w,
        "  limit knee        {} nominal; worst case {} .. {}; Monte Carlo {} .. {}",
        eng(b.nominal, "A"),
        eng(b.worst_case.min, "A"),
        eng(b.worst_case.max, "A"),
        eng(b.monte_carlo.p_low, "A"),
        eng(b.monte_carlo.p_high, "A")
    )?;
    let s = &e.short_circuit_current;
    writeln!(
        w,
        "  short circuit     {} nominal; worst case {} .. {}",
        eng(s.nominal, "A"),
        eng(s.worst_case.min, "A"),
        eng(s.worst_case.max, "A")
    )?;
    if let Some(ps) = e.dissipation.get("sense_resistor") {
        writeln!(
            w,
            "  sense dissipation {} worst case: use a {} part or larger ({} % derating)",
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
            "  pass device       {} worst case, {}",
            eng(pp.watts, "W"),
            pp.condition
        )?;
    }
    if b.worst_case.min < args.current {
        writeln!(
            w,
            "  note: the lowest worst-case limit ({}) is below the rated current; raise the margin, tighten the tolerances or use a transistor limiter",
            eng(b.worst_case.min, "A")
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
        let body = toml::to_string(&base).context("serialising the sized design")?;
        let text = format!(
            "# Written by regulus size: {} with {} % margin, {}.\n{}",
            eng(args.current, "A"),
            args.margin,
            args.series,
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
