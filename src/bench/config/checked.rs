//! The checked bench configuration: what the bench runs from once every rule has passed.
//! Templates are parsed, links typed, reading styles resolved; nothing here can hold a value
//! the checks refuse. No I/O.

use super::keys::CommandKey;
use crate::measure::Role;
use crate::protocol::{ExpectedUnit, ReplyParser, Template};
use crate::transport::LinkConfig;
use regex::Regex;
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

/// Replies to commands that answer (`ACK` / `NAK` style): every setting, init and safe-state
/// command is answered by one line matching `success` or `error`.
#[derive(Debug, Clone)]
pub struct Acknowledge {
    pub success: Regex,
    pub error: Regex,
}

/// The query that says the settings sent so far are applied, and the reply that means so
/// (SCPI `*OPC?` -> `1`, IEEE 488.2 section 10.19).
#[derive(Debug, Clone)]
pub struct Confirm {
    pub query: String,
    pub expect: Regex,
}

/// How a setting is read back after it is confirmed.
#[derive(Debug, Clone)]
pub enum Readback {
    /// A number compared with the value sent, within the template's resolution (`CURR?`; or
    /// a status line such as `MODE=CC SET=0.5000 INP=1` with a pattern capturing `value`).
    Value { query: String, reply: ReplyParser },
    /// A reply that must match `expect` (`INP?` -> `^1$`).
    Text { query: String, expect: Regex },
}

impl Readback {
    pub fn query(&self) -> &str {
        match self {
            Readback::Value { query, .. } | Readback::Text { query, .. } => query,
        }
    }
}

/// The instrument's error queue, read after settings (SCPI `SYST:ERR?`): a reply not matching
/// `none` is the instrument refusing a command.
#[derive(Debug, Clone)]
pub struct ErrorQuery {
    pub query: String,
    pub none: Regex,
}

/// Everything that makes a setting count as applied, per instrument.
#[derive(Debug, Clone, Default)]
pub struct Lockstep {
    pub acknowledge: Option<Acknowledge>,
    pub confirm: Option<Confirm>,
    pub readback: BTreeMap<CommandKey, Readback>,
    pub error_query: Option<ErrorQuery>,
}

/// Instrument-side limits: sequences sent before a stressful step (short circuit, knee
/// search) and after it, so the instrument protects the bench on its own.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct Limits {
    pub arm: Vec<String>,
    pub disarm: Vec<String>,
}

/// One instrument, checked.
#[derive(Debug, Clone)]
pub struct InstrumentConfig {
    pub name: String,
    /// 1-based line and column of its `[[instrument]]` table in the bench file (for messages
    /// of checks made later, against a plan).
    pub place: Option<(usize, usize)>,
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
    /// Acknowledgements, confirmation, readback and error queue of settings.
    pub lockstep: Lockstep,
    pub safe_state: Vec<String>,
    pub limits: Limits,
    /// Unit texts configured per measuring role (instead of the role's SI unit).
    pub units: BTreeMap<Role, String>,
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

    /// The unit a reading for `role` must carry.
    pub fn expected_unit(&self, role: Role) -> ExpectedUnit {
        match (self.units.get(&role), role.quantity()) {
            (Some(t), _) => ExpectedUnit::Text(t.clone()),
            (None, Some(q)) => ExpectedUnit::Of(q),
            (None, None) => ExpectedUnit::Any,
        }
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
    /// A configuration error about one instrument, at its table in the bench file.
    pub fn error_at(
        &self,
        inst: &InstrumentConfig,
        message: impl std::fmt::Display,
    ) -> crate::config::Located {
        crate::config::Located {
            file: self.label.clone(),
            line: inst.place.map(|p| p.0),
            column: inst.place.map(|p| p.1),
            message: format!("instrument '{}': {message}", inst.name),
        }
    }

    /// The instrument holding `role`, if any.
    pub fn instrument_for(&self, role: Role) -> Option<&InstrumentConfig> {
        self.instruments.iter().find(|i| i.roles.contains(&role))
    }
}
