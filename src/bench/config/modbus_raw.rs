//! The `[instrument.modbus]` table as written: serde types with spans where a rule points.
//! Every table refuses unknown keys; [`super::modbus_checks`] checks them.

use crate::protocol::modbus::{DataType, ObjectKind, WordOrder};
use serde::Deserialize;
use std::collections::BTreeMap;
use toml::Spanned;

/// The `[instrument.modbus]` table as written.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub(crate) struct RawModbus {
    pub unit: Option<Spanned<i64>>,
    pub frame_gap_ms: Option<Spanned<f64>>,
    pub confirm: Option<ConfirmName>,
    pub identity: Option<Spanned<RawIdentity>>,
    pub registers: Option<Spanned<BTreeMap<Spanned<String>, Spanned<RawRegister>>>>,
}

#[derive(Debug, Clone, Copy, Deserialize)]
#[serde(rename_all = "snake_case")]
pub(crate) enum ConfirmName {
    Readback,
    WriteResponse,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub(crate) struct RawIdentity {
    pub object: ObjectKind,
    pub address: i64,
    pub words: i64,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub(crate) struct RawRegister {
    pub object: Spanned<ObjectKind>,
    pub address: Spanned<i64>,
    #[serde(rename = "type")]
    pub data_type: Option<Spanned<DataType>>,
    pub word_order: Option<WordOrder>,
    pub scale: Option<Spanned<f64>>,
    pub unit: Option<Spanned<String>>,
    pub value: Option<Spanned<toml::Value>>,
    /// Raw value(s) that mean "over range": an integer or a list of them.
    pub overrange: Option<Spanned<toml::Value>>,
    /// A coil, discrete input or register bit that is set while the reading is over range.
    pub overrange_flag: Option<Spanned<RawFlag>>,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub(crate) struct RawFlag {
    pub object: ObjectKind,
    pub address: i64,
    pub bit: Option<i64>,
}
