//! The bench file as written: serde types that mirror its tables one to one, with spans
//! (`toml::Spanned`) where a later check needs to point at a place. Every table refuses unknown
//! keys. No checking beyond what serde does; [`super::checks`] turns these into checked types.

use super::keys::{CommandKey, KEY_NAMES};
use crate::measure::Role;
use crate::transport::{FlowControl, Parity};
use serde::de::{self, Deserializer, MapAccess, SeqAccess, Visitor};
use serde::Deserialize;
use std::collections::BTreeMap;
use std::fmt;
use std::path::PathBuf;
use toml::Spanned;

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub(super) struct RawFile {
    pub bench: Option<RawBenchMeta>,
    #[serde(default)]
    pub instrument: Vec<Spanned<RawInstrument>>,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub(super) struct RawBenchMeta {
    pub name: Option<String>,
    pub note: Option<String>,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub(super) struct RawInstrument {
    pub name: Spanned<String>,
    pub roles: Spanned<Vec<Role>>,
    pub preset: Option<Spanned<String>>,
    pub serial: Option<Spanned<RawSerial>>,
    pub tcp: Option<Spanned<RawTcp>>,
    pub write_terminator: Option<Spanned<String>>,
    pub read_terminator: Option<Spanned<String>>,
    pub reply_timeout_ms: Option<Spanned<u64>>,
    pub command_gap_ms: Option<u64>,
    pub retries: Option<Spanned<u32>>,
    pub init: Option<Spanned<Vec<String>>>,
    pub identity_query: Option<String>,
    pub confirm_query: Option<String>,
    pub confirm_reply: Option<Spanned<String>>,
    pub acknowledge: Option<Spanned<RawAcknowledge>>,
    pub readback: Option<BTreeMap<CommandKey, Spanned<RawReadback>>>,
    pub error_query: Option<String>,
    pub no_error: Option<Spanned<String>>,
    pub safe_state: Option<Spanned<Vec<String>>>,
    pub arm_limits: Option<Spanned<Vec<String>>>,
    pub disarm_limits: Option<Spanned<Vec<String>>>,
    pub traffic_log: Option<PathBuf>,
    /// Date the instrument's calibration falls due (a TOML date); the bench does not use it,
    /// certificates read it from the record's bench snapshot.
    #[allow(dead_code)]
    pub calibration_due: Option<toml::value::Datetime>,
    pub commands: Option<RawCommands>,
    pub role_queries: Option<BTreeMap<Role, Spanned<String>>>,
    pub reply: Option<RawReply>,
    pub reading: Option<Spanned<RawReading>>,
    /// A Modbus instrument's register map (see `modbus_raw`).
    pub modbus: Option<Spanned<super::modbus_raw::RawModbus>>,
    /// A USB-TMC link (see `usbtmc_checks`).
    pub usbtmc: Option<Spanned<super::usbtmc_raw::RawUsbTmc>>,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub(super) struct RawSerial {
    pub port: String,
    pub baud: Option<u32>,
    pub data_bits: Option<u8>,
    pub parity: Option<Parity>,
    pub stop_bits: Option<u8>,
    pub flow_control: Option<FlowControl>,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub(super) struct RawTcp {
    pub host: String,
    pub port: Option<u16>,
    pub connect_timeout_ms: Option<u64>,
}

/// The `[instrument.commands]` table: template text by key, each with its place. Read through
/// the key table of [`super::keys`], so the keys are listed in one place only.
#[derive(Debug, Default, Clone)]
pub(super) struct RawCommands(pub BTreeMap<CommandKey, Spanned<String>>);

/// Shown by serde when the commands table has the wrong type (kept as the file format's
/// messages have always read).
const COMMANDS_EXPECTING: &str = "struct RawCommands";

impl<'de> Deserialize<'de> for CommandKey {
    fn deserialize<D: Deserializer<'de>>(d: D) -> Result<CommandKey, D::Error> {
        struct KeyVisitor;
        impl Visitor<'_> for KeyVisitor {
            type Value = CommandKey;
            fn expecting(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
                f.write_str("field identifier")
            }
            fn visit_str<E: de::Error>(self, v: &str) -> Result<CommandKey, E> {
                CommandKey::from_name(v).ok_or_else(|| E::unknown_field(v, &KEY_NAMES))
            }
        }
        d.deserialize_identifier(KeyVisitor)
    }
}

impl<'de> Deserialize<'de> for RawCommands {
    fn deserialize<D: Deserializer<'de>>(d: D) -> Result<RawCommands, D::Error> {
        struct CommandsVisitor;
        impl<'de> Visitor<'de> for CommandsVisitor {
            type Value = RawCommands;
            fn expecting(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
                f.write_str(COMMANDS_EXPECTING)
            }
            fn visit_map<A: MapAccess<'de>>(self, mut map: A) -> Result<RawCommands, A::Error> {
                let mut out = BTreeMap::new();
                while let Some(key) = map.next_key::<CommandKey>()? {
                    if out.contains_key(&key) {
                        return Err(de::Error::duplicate_field(key.name()));
                    }
                    let value: Option<Spanned<String>> = map.next_value()?;
                    if let Some(v) = value {
                        out.insert(key, v);
                    }
                }
                Ok(RawCommands(out))
            }
            // A table may also be written as an array of its values in key order (serde's
            // struct convention); every key must then be given.
            fn visit_seq<A: SeqAccess<'de>>(self, mut seq: A) -> Result<RawCommands, A::Error> {
                let mut out = BTreeMap::new();
                for (i, key) in CommandKey::all().enumerate() {
                    let value: Option<Spanned<String>> = match seq.next_element()? {
                        Some(v) => v,
                        None => {
                            return Err(de::Error::invalid_length(
                                i,
                                &"struct RawCommands with 14 elements",
                            ))
                        }
                    };
                    if let Some(v) = value {
                        out.insert(key, v);
                    }
                }
                Ok(RawCommands(out))
            }
        }
        d.deserialize_struct(COMMANDS_EXPECTING, &KEY_NAMES, CommandsVisitor)
    }
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub(super) struct RawAcknowledge {
    pub success: String,
    pub error: String,
}

/// A readback: a query whose number is compared with the value set, or a table with a
/// pattern (`value` capture) or an expected reply.
#[derive(Debug, Deserialize)]
#[serde(untagged)]
pub(super) enum RawReadback {
    Query(String),
    Table(RawReadbackTable),
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub(super) struct RawReadbackTable {
    pub query: String,
    pub pattern: Option<String>,
    pub expect: Option<String>,
}

#[derive(Debug, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub(super) struct RawReply {
    pub units: Option<BTreeMap<Role, String>>,
    pub pattern: Option<Spanned<String>>,
    pub scale: Option<Spanned<f64>>,
    pub unit_prefixes: Option<bool>,
    pub overrange_tokens: Option<Vec<String>>,
    pub overrange_status: Option<Vec<String>>,
    pub ok_status: Option<Vec<String>>,
}

#[derive(Debug, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub(super) struct RawReading {
    pub style: Option<ReadStyleName>,
    pub pick: Option<super::checked::StreamPick>,
    pub window_ms: Option<u64>,
    pub max_age_ms: Option<u64>,
    pub tags: Option<BTreeMap<Role, String>>,
}

#[derive(Debug, Clone, Copy, PartialEq, Eq, Deserialize)]
#[serde(rename_all = "snake_case")]
pub(super) enum ReadStyleName {
    Query,
    Stream,
}
