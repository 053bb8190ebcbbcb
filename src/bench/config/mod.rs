//! The bench file: its TOML layout (`raw`), the command-key table (`keys`), the built-in
//! presets (`presets`), the named rules (`checks`, `load`) and the checked configuration
//! (`checked`), validated before any port is opened. Config errors name the file, line and
//! column and say what to fix. Only [`BenchConfig::load`] reads a file; the documented layout
//! lives in `config/bench-template.toml`.

mod checked;
mod checks;
mod context;
mod keys;
mod link_text;
mod load;
mod lockstep_checks;
mod modbus_checks;
mod modbus_map;
mod modbus_raw;
#[cfg(test)]
mod modbus_tests;
mod presets;
mod raw;
#[cfg(test)]
mod tests;
mod usbtmc_checks;
mod usbtmc_raw;

pub use crate::transport::{
    FlowControl, LinkConfig, Parity, SerialSettings, TcpSettings, UsbTmcSettings,
};
pub use checked::{
    Acknowledge, BenchConfig, CommandSet, Confirm, ErrorQuery, InstrumentConfig, Limits, Lockstep,
    Readback, ReadingStyle, StreamPick,
};
pub use keys::{CommandKey, KeyInfo, Need, KEYS, KEY_NAMES, ROLE_NEEDS, SAFE_STATE_KEYS};
pub use modbus_checks::rtu_silence;
pub use modbus_map::{
    Confirm as ModbusConfirm, Fixed, Framing, IdentityBlock, ModbusMap, Payload, RegisterAction,
};
pub use presets::{PRESET_NAMES, TAGGED_STREAM_PATTERN};

/// 1-based line and column (in characters) of a byte offset (shared with every config file).
pub use crate::config::line_col as line_column;
