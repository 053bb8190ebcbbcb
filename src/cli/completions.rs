//! `regulus completions SHELL` prints a shell completion script and `regulus man` the manual
//! page (roff), both generated from the command table itself, so they never fall behind it.

use super::EXIT_OK;
use anyhow::Context;
use clap::CommandFactory;
use std::io::Write;
use std::path::PathBuf;

/// Options of `regulus completions`.
#[derive(Debug, clap::Args)]
pub struct Args {
    /// The shell to complete for.
    #[arg(value_enum)]
    pub shell: clap_complete::Shell,
}

/// Options of `regulus man`.
#[derive(Debug, clap::Args)]
pub struct ManArgs {
    /// Write the pages (regulus.1 and one per command, regulus-run.1 ...) into DIR instead of
    /// printing the main page.
    #[arg(long, value_name = "DIR")]
    pub out: Option<PathBuf>,
}

pub fn run(args: Args) -> anyhow::Result<u8> {
    let mut cmd = super::Cli::command();
    let mut out = std::io::stdout().lock();
    clap_complete::generate(args.shell, &mut cmd, "regulus", &mut out);
    out.flush()?;
    Ok(EXIT_OK)
}

pub fn man(args: ManArgs) -> anyhow::Result<u8> {
    let cmd = super::Cli::command();
    match &args.out {
        Some(dir) => {
            std::fs::create_dir_all(dir).with_context(|| format!("creating {}", dir.display()))?;
            clap_mangen::generate_to(cmd, dir)
                .with_context(|| format!("writing the manual pages into {}", dir.display()))?;
            println!("wrote the manual pages into {}", dir.display());
        }
        None => {
            let mut page = Vec::new();
            clap_mangen::Man::new(cmd).render(&mut page)?;
            std::io::stdout().lock().write_all(&page)?;
        }
    }
    Ok(EXIT_OK)
}
