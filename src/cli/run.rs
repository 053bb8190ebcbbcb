//! `regulus run`: not yet written.

/// Options of `regulus run`.
#[derive(Debug, clap::Args)]
pub struct Args {}

pub fn run(_args: Args) -> anyhow::Result<u8> {
    Err(super::CodedError::new(super::EXIT_USAGE, "`regulus run` is not available yet").into())
}
