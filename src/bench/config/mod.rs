//! The bench file: its TOML layout (`raw`), the command-key table (`keys`), the built-in
//! presets (`presets`), the named rules (`checks`, `load`) and the checked configuration
//! (`checked`), validated before any port is opened. Config errors name the file, line and
//! column and say what to fix. Only [`BenchConfig::load`] reads a file; the documented layout
//! lives in `config/bench-template.toml`.

mod checked;
mod checks;
mod context;
mod keys;
mod load;
mod lockstep_checks;
mod presets;
mod raw;
#[cfg(test)]
mod tests;

pub use crate::transport::{FlowControl, LinkConfig, Parity, SerialSettings, TcpSettings};
pub use checked::{
    Acknowledge, BenchConfig, CommandSet, Confirm, ErrorQuery, InstrumentConfig, Limits, Lockstep,
    Readback, ReadingStyle, StreamPick,
};
pub use keys::{CommandKey, KeyInfo, Need, KEYS, KEY_NAMES, ROLE_NEEDS, SAFE_STATE_KEYS};
pub use presets::{PRESET_NAMES, TAGGED_STREAM_PATTERN};

/// 1-based line and column (in characters) of a byte offset (shared with every config file).
pub use crate::config::line_col as line_column;
