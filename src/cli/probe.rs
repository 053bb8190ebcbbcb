//! `regulus probe`: check a bench file, connect to its instruments, identify them and take
//! one reading from each measuring role, printing a table with round-trip times. Exit 2 on a
//! bench file error, 3 when an instrument fails.

use super::{CodedError, EXIT_ERROR, EXIT_OK};
use crate::bench::{probe, write_probe_table, BenchConfig};
use anyhow::Context;
use std::path::PathBuf;

/// Options of `regulus probe`.
#[derive(Debug, clap::Args)]
pub struct Args {
    /// Bench file (TOML) listing the instruments; see config/bench-template.toml.
    #[arg(long, value_name = "FILE")]
    pub bench: PathBuf,
    /// Probe only this instrument (its name in the bench file).
    #[arg(long, value_name = "NAME")]
    pub instrument: Option<String>,
    /// Print JSON instead of a table.
    #[arg(long)]
    pub json: bool,
}

pub fn run(args: Args) -> anyhow::Result<u8> {
    let cfg = BenchConfig::load(&args.bench)?;
    let rt = tokio::runtime::Builder::new_multi_thread()
        .worker_threads(2)
        .enable_all()
        .build()
        .context("cannot start the async runtime")?;
    let report = rt.block_on(probe(&cfg, args.instrument.as_deref()))?;
    let stdout = std::io::stdout();
    let mut out = stdout.lock();
    if args.json {
        super::json_out::write_probe_json(&mut out, &report)
            .context("cannot write the probe JSON")?;
    } else {
        write_probe_table(&mut out, &report).context("cannot write the probe table")?;
    }
    if report.failed() {
        return Err(CodedError::new(
            EXIT_ERROR,
            "some instruments failed; see the messages above",
        )
        .into());
    }
    Ok(EXIT_OK)
}
