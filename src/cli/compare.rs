//! `regulus compare`: not yet written.

/// Options of `regulus compare`.
#[derive(Debug, clap::Args)]
pub struct Args {}

pub fn run(_args: Args) -> anyhow::Result<u8> {
    Err(super::CodedError::new(super::EXIT_USAGE, "`regulus compare` is not available yet").into())
}
