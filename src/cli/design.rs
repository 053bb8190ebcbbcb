//! `regulus design FILE`: compute a design's expected behaviour and print it as a table or JSON.

use crate::design::{self, Design, Verdict};
use anyhow::Context;
use std::io::Write;
use std::path::PathBuf;

/// Options of `regulus design`.
#[derive(Debug, clap::Args)]
pub struct Args {
    /// Design file (TOML); see config/design-template.toml.
    pub file: PathBuf,
    /// Print one JSON object (SI units) instead of the table.
    #[arg(long)]
    pub json: bool,
    /// Monte Carlo samples (overrides the design file's rules.monte_carlo_samples).
    #[arg(long, value_name = "N")]
    pub samples: Option<usize>,
    /// Monte Carlo seed (overrides the design file's rules.seed).
    #[arg(long, value_name = "N")]
    pub seed: Option<u64>,
}

pub fn run(args: Args) -> anyhow::Result<u8> {
    let d = Design::load(&args.file)?;
    let samples = args.samples.unwrap_or(d.rules.monte_carlo_samples);
    if samples == 0 || samples > 10_000_000 {
        return Err(super::CodedError::new(
            super::EXIT_USAGE,
            "--samples must be between 1 and 10,000,000",
        )
        .into());
    }
    let e = design::expect_with(&d, samples, args.seed.unwrap_or(d.rules.seed));
    let stdout = std::io::stdout();
    let mut out = stdout.lock();
    if args.json {
        serde_json::to_writer_pretty(&mut out, &e).context("writing JSON")?;
        writeln!(out)?;
    } else {
        design::render::table(&mut out, &d, &e).context("writing the table")?;
    }
    Ok(match e.verdict() {
        Verdict::Fail => super::EXIT_FAIL,
        _ => super::EXIT_OK,
    })
}
