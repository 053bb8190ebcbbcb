//! `regulus history`: not yet written.

/// Options of `regulus history`.
#[derive(Debug, clap::Args)]
pub struct Args {}

pub fn run(_args: Args) -> anyhow::Result<u8> {
    Err(super::CodedError::new(super::EXIT_USAGE, "`regulus history` is not available yet").into())
}
