//! The checked bench configuration: what the bench runs from once every rule has passed.
//! Templates are parsed, links typed, reading styles resolved; nothing here can hold a value
//! the checks refuse. No I/O.

use super::keys::CommandKey;
use crate::measure::Role;
use crate::protocol::{ReplyParser, Template};
use crate::transport::LinkConfig;
use serde::Deserialize;
use std::collections::BTreeMap;
use std::path::PathBuf;
use std::time::Duration;

/// Which line of a stream is used.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum StreamPick {
    /// The newest fresh line.
    Newest,
    /// The mean of the fresh lines received within the window.
    Average,
}

/// How readings are taken from an instrument.
#[derive(Debug, Clone, PartialEq)]
pub enum ReadingStyle {
    /// Send the measuring command, read one reply line.
    Query,
    /// The instrument sends lines on its own; take the newest or average a window, ignoring
    /// lines older than `max_age`. `tags` routes lines to roles by the pattern's `tag` capture.
    Stream {
        pick: StreamPick,
        window: Duration,
        max_age: Duration,
        tags: BTreeMap<Role, String>,
    },
}

/// The checked command set of one instrument (templates validated at load).
#[derive(Debug, Clone, Default)]
pub struct CommandSet {
    /// Template per command key given (by the file or its preset).
    pub templates: BTreeMap<CommandKey, Template>,
    /// Measuring command per measuring role held (from `role_queries` or `measure_*`).
    pub measure: BTreeMap<Role, Template>,
}

impl CommandSet {
    /// The template for a key, if the instrument has one.
    pub fn get(&self, key: CommandKey) -> Option<&Template> {
        self.templates.get(&key)
    }
}

/// One instrument, checked.
#[derive(Debug, Clone)]
pub struct InstrumentConfig {
    pub name: String,
    pub roles: Vec<Role>,
    pub preset: Option<String>,
    pub link: LinkConfig,
    pub write_terminator: String,
    pub read_terminator: String,
    pub reply_timeout: Duration,
    pub command_gap: Duration,
    pub retries: u32,
    pub init: Vec<String>,
    pub identity_query: Option<String>,
    /// Sent after setting commands; its reply means the instrument has applied them (SCPI
    /// `*OPC?`, IEEE 488.2 section 10.19). `None`: settings are not confirmed.
    pub confirm_query: Option<String>,
    pub safe_state: Vec<String>,
    pub traffic_log: Option<PathBuf>,
    pub commands: CommandSet,
    pub reply: ReplyParser,
    pub reading: ReadingStyle,
    /// The register map of a Modbus instrument (`None`: a text instrument).
    pub modbus: Option<super::modbus_map::ModbusMap>,
}

impl InstrumentConfig {
    /// Measuring roles this instrument holds.
    pub fn measuring_roles(&self) -> impl Iterator<Item = Role> + '_ {
        self.roles
            .iter()
            .copied()
            .filter(|r| r.quantity().is_some())
    }
}

/// A checked bench file.
#[derive(Debug, Clone)]
pub struct BenchConfig {
    /// Where the configuration came from (file path or a label), used in messages.
    pub label: String,
    pub name: Option<String>,
    pub note: Option<String>,
    pub instruments: Vec<InstrumentConfig>,
}

impl BenchConfig {
    /// The instrument holding `role`, if any.
    pub fn instrument_for(&self, role: Role) -> Option<&InstrumentConfig> {
        self.instruments.iter().find(|i| i.roles.contains(&role))
    }
}
