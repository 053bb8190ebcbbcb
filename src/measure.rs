//! Shared vocabulary of the bench: what an instrument can do (roles), what it measures
//! (quantities), what a reading is (a value or an explicit overrange), and how an electronic
//! load is set (CC / CV / CR modes). Pure data; no I/O lives here.

use serde::{Deserialize, Serialize};
use std::collections::BTreeMap;
use std::fmt;

/// What an instrument does on a bench. One instrument may hold several roles (an electronic
/// load usually also measures the current it sinks and the voltage across it).
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Role {
    /// Measures the unit's output voltage.
    OutputVoltmeter,
    /// Measures the unit's output current.
    OutputAmmeter,
    /// Electronic load on the unit's output (CC / CV / CR, input on / off).
    Load,
    /// Programmable source feeding the unit's input.
    InputSource,
    /// Measures the unit's input voltage.
    InputVoltmeter,
    /// Measures the unit's input current.
    InputAmmeter,
    /// Measures a temperature on the unit (pass device case or heatsink).
    Thermometer,
}

impl Role {
    pub const ALL: [Role; 7] = [
        Role::OutputVoltmeter,
        Role::OutputAmmeter,
        Role::Load,
        Role::InputSource,
        Role::InputVoltmeter,
        Role::InputAmmeter,
        Role::Thermometer,
    ];

    /// The quantity a measuring role reads, if it is a measuring role.
    pub fn quantity(self) -> Option<Quantity> {
        match self {
            Role::OutputVoltmeter => Some(Quantity::OutputVoltage),
            Role::OutputAmmeter => Some(Quantity::OutputCurrent),
            Role::InputVoltmeter => Some(Quantity::InputVoltage),
            Role::InputAmmeter => Some(Quantity::InputCurrent),
            Role::Thermometer => Some(Quantity::Temperature),
            Role::Load | Role::InputSource => None,
        }
    }

    pub fn as_str(self) -> &'static str {
        match self {
            Role::OutputVoltmeter => "output_voltmeter",
            Role::OutputAmmeter => "output_ammeter",
            Role::Load => "load",
            Role::InputSource => "input_source",
            Role::InputVoltmeter => "input_voltmeter",
            Role::InputAmmeter => "input_ammeter",
            Role::Thermometer => "thermometer",
        }
    }
}

impl fmt::Display for Role {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.as_str())
    }
}

/// A measured quantity, always stored in SI units (volts, amperes, degrees Celsius).
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Quantity {
    OutputVoltage,
    OutputCurrent,
    InputVoltage,
    InputCurrent,
    Temperature,
}

impl Quantity {
    pub const ALL: [Quantity; 5] = [
        Quantity::OutputVoltage,
        Quantity::OutputCurrent,
        Quantity::InputVoltage,
        Quantity::InputCurrent,
        Quantity::Temperature,
    ];

    /// SI unit symbol used in CSV headers and reports.
    pub fn unit(self) -> &'static str {
        match self {
            Quantity::OutputVoltage | Quantity::InputVoltage => "V",
            Quantity::OutputCurrent | Quantity::InputCurrent => "A",
            Quantity::Temperature => "degC",
        }
    }

    /// Column / key name, e.g. `output_voltage`.
    pub fn as_str(self) -> &'static str {
        match self {
            Quantity::OutputVoltage => "output_voltage",
            Quantity::OutputCurrent => "output_current",
            Quantity::InputVoltage => "input_voltage",
            Quantity::InputCurrent => "input_current",
            Quantity::Temperature => "temperature",
        }
    }

    pub fn parse(s: &str) -> Option<Quantity> {
        Quantity::ALL.into_iter().find(|q| q.as_str() == s)
    }
}

impl fmt::Display for Quantity {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.as_str())
    }
}

/// One reading from a meter: a number in SI units, or an explicit overrange (never a number).
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Reading {
    Value(f64),
    Overrange,
}

impl Reading {
    pub fn value(self) -> Option<f64> {
        match self {
            Reading::Value(v) => Some(v),
            Reading::Overrange => None,
        }
    }
}

/// Everything read in one step, by quantity. Quantities without an instrument are absent.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
pub struct Measurement {
    pub values: BTreeMap<Quantity, Reading>,
}

impl Measurement {
    pub fn get(&self, q: Quantity) -> Option<f64> {
        self.values.get(&q).and_then(|r| r.value())
    }
    pub fn set(&mut self, q: Quantity, r: Reading) {
        self.values.insert(q, r);
    }
}

/// Operating mode of an electronic load (the trade's CC / CV / CR modes).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, Serialize, Deserialize)]
pub enum LoadMode {
    /// Constant current: the load sinks the set current (amperes).
    #[serde(rename = "cc")]
    ConstantCurrent,
    /// Constant voltage: the load sinks whatever holds its input at the set voltage (volts).
    #[serde(rename = "cv")]
    ConstantVoltage,
    /// Constant resistance: the load behaves as the set resistance (ohms).
    #[serde(rename = "cr")]
    ConstantResistance,
}

impl LoadMode {
    pub fn as_str(self) -> &'static str {
        match self {
            LoadMode::ConstantCurrent => "cc",
            LoadMode::ConstantVoltage => "cv",
            LoadMode::ConstantResistance => "cr",
        }
    }
    /// Unit of the setpoint in this mode.
    pub fn unit(self) -> &'static str {
        match self {
            LoadMode::ConstantCurrent => "A",
            LoadMode::ConstantVoltage => "V",
            LoadMode::ConstantResistance => "ohm",
        }
    }
}

impl fmt::Display for LoadMode {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.as_str())
    }
}
