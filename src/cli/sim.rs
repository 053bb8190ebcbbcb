//! `regulus sim`: not yet written.

/// Options of `regulus sim`.
#[derive(Debug, clap::Args)]
pub struct Args {}

pub fn run(_args: Args) -> anyhow::Result<u8> {
    Err(super::CodedError::new(super::EXIT_USAGE, "`regulus sim` is not available yet").into())
}
