//! `regulus design FILE`: compute a design's expected behaviour and print it as a table or JSON.

use super::usage;
use crate::design::{self, Design, Verdict};
use crate::spice;
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
    /// Write a SPICE netlist of the design (a DC load sweep between a short and open circuit).
    #[arg(long, value_name = "OUT.cir")]
    pub netlist: Option<PathBuf>,
    /// Simulate the design with ngspice and print the simulated knee beside the model's
    /// (with --json the comparison goes to stderr).
    #[arg(long)]
    pub simulate: bool,
    /// Save the simulated V-I curve as CSV (implies --simulate).
    #[arg(long, value_name = "OUT.csv")]
    pub simulated_csv: Option<PathBuf>,
    /// Use the simulator's default junction models instead of models matched to the design's drops.
    #[arg(long)]
    pub spice_default_models: bool,
}

pub fn run(args: Args) -> anyhow::Result<u8> {
    let d = Design::load(&args.file)?;
    let samples = args.samples.unwrap_or(d.rules.monte_carlo_samples);
    if samples == 0 || samples > 10_000_000 {
        return Err(usage("--samples must be between 1 and 10,000,000"));
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
    let code = match e.verdict() {
        Verdict::Fail => super::EXIT_FAIL,
        _ => super::EXIT_OK,
    };
    drop(out);
    spice_steps(&args, &d, &e)?;
    Ok(code)
}

/// Netlist export and simulator cross-check, after the table or JSON. With `--json` the
/// comparison goes to stderr so stdout stays one JSON object. A missing simulator is reported
/// and skipped; it does not change the exit code.
fn spice_steps(args: &Args, d: &Design, e: &design::Expectation) -> anyhow::Result<()> {
    let opts = spice::NetlistOptions {
        models: if args.spice_default_models {
            spice::ModelMode::SimulatorDefaults
        } else {
            spice::ModelMode::Matched
        },
    };
    if let Some(path) = &args.netlist {
        let n = spice::build(d, &opts)?;
        std::fs::write(path, &n.text)
            .with_context(|| format!("writing the netlist {}", path.display()))?;
        eprintln!("netlist written to {}", path.display());
    }
    if !(args.simulate || args.simulated_csv.is_some()) {
        return Ok(());
    }
    let sim = match spice::simulate_with(d, &opts, &spice::Ngspice::default()) {
        Ok(s) => s,
        Err(spice::SpiceError::NotInstalled) => {
            eprintln!(
                "simulator check skipped: ngspice was not found on the PATH; {}",
                spice::INSTALL_HINT
            );
            return Ok(());
        }
        Err(err @ spice::SpiceError::Netlist(_)) => return Err(err.into()),
        Err(err) => return Err(err).context("simulating the design with ngspice"),
    };
    let rows = spice::compare(e, &sim.summary);
    let mut buf = Vec::new();
    writeln!(buf)?;
    let notes = spice::departures(d, &sim.netlist);
    spice::render_comparison(
        &mut buf,
        &sim.simulator,
        sim.models.describe(),
        &rows,
        &notes,
    )?;
    if args.json {
        std::io::stderr().write_all(&buf)?;
    } else {
        std::io::stdout().write_all(&buf)?;
    }
    if let Some(path) = &args.simulated_csv {
        let mut text = Vec::new();
        spice::write_curve_csv(&mut text, &sim.points)?;
        std::fs::write(path, text)
            .with_context(|| format!("writing the simulated curve {}", path.display()))?;
        eprintln!("simulated curve written to {}", path.display());
    }
    Ok(())
}
