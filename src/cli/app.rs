//! The command line's shape: one clap derive `Cli` with one `Subcommand` enum, and
//! [`dispatch`], which runs the chosen command and returns its exit code.

use super::{
    batch, compare, completions, dashboard, demo, design, history, index, ports, probe, report,
    run, sim, size, sync,
};
use clap::{Parser, Subcommand};

#[derive(Debug, Parser)]
#[command(
    name = "regulus",
    version,
    about = "Design, characterize and track linear regulated DC power supplies",
    long_about = "regulus computes a linear regulated supply's expected behaviour with tolerance \
bands, drives bench instruments over serial or TCP to characterize each built unit, compares \
measured with designed, flags drift and keeps a dated record per unit.\n\nCAUTION: power supplies \
under test can carry mains voltages, get hot and deliver large short-circuit currents. Follow \
local codes and licensed practice.",
    after_help = super::exit_codes_help()
)]
pub struct Cli {
    #[command(subcommand)]
    pub command: Command,
}

#[derive(Debug, Subcommand)]
pub enum Command {
    /// Compute a design's expected behaviour: output range, limit, dissipation, headroom, thermal.
    Design(design::Args),
    /// Choose a sense resistor and clamp parts from targets, with preferred (E-series) values.
    Size(size::Args),
    /// Connect to a bench's instruments, identify them and take one reading from each.
    Probe(probe::Args),
    /// List serial ports and USB-TMC nodes; with --identify, ask each who it is.
    Ports(ports::Args),
    /// Start a simulated bench (a simulated unit and its instruments) on local ports.
    Sim(sim::Args),
    /// Run a test plan on a unit and keep a dated record (stresses the unit: read the cautions).
    Run(run::Args),
    /// Run the standard plan on the built-in simulated bench; no hardware needed.
    Demo(demo::Args),
    /// Regenerate a record's summary, plots and HTML report.
    Report(report::Args),
    /// List a unit's dated runs with key metrics and drift flags.
    History(history::Args),
    /// Re-evaluate records against a design (for instance a new revision).
    Compare(compare::Args),
    /// (internal) The guardian process a run starts to make the bench safe if regulus dies.
    #[command(name = "__guardian", hide = true)]
    Guardian,
    /// Test units one after another at a station: scan a serial, test, certificate, tally.
    Batch(batch::Args),
    /// Show or rebuild the records folder's index (the folders stay the source of truth).
    Index(index::Args),
    /// Upload finished runs to the shared store (PostgreSQL); queues them while it is away.
    Sync(sync::Args),
    /// Write the batch dashboard page (results, yield, control charts, histograms, Cpk).
    Dashboard(dashboard::Args),
    /// Print a shell completion script (bash, zsh, fish, elvish, powershell).
    Completions(completions::Args),
    /// Print the manual page (roff), or write one per command with --out DIR.
    Man(completions::ManArgs),
}

/// Run the chosen command and return its exit code.
pub fn dispatch(cli: Cli) -> anyhow::Result<u8> {
    // Runs of this binary start guardians that run this same binary.
    if let Ok(exe) = std::env::current_exe() {
        crate::guardian::enable(exe);
    }
    match cli.command {
        Command::Guardian => Ok(crate::guardian::serve()),
        Command::Design(a) => design::run(a),
        Command::Size(a) => size::run(a),
        Command::Probe(a) => probe::run(a),
        Command::Ports(a) => ports::run(a),
        Command::Sim(a) => sim::run(a),
        Command::Run(a) => run::run(a),
        Command::Demo(a) => demo::run(a),
        Command::Report(a) => report::run(a),
        Command::History(a) => history::run(a),
        Command::Compare(a) => compare::run(a),
        Command::Batch(a) => batch::run(a),
        Command::Index(a) => index::run(a),
        Command::Sync(a) => sync::run(a),
        Command::Dashboard(a) => dashboard::run(a),
        Command::Completions(a) => completions::run(a),
        Command::Man(a) => completions::man(a),
    }
}
