//! The simulated instruments by kind (names, models, the maker of every identity reply) and
//! the unit's true values they can see. Pure data.

use crate::sim::unit::OperatingPoint;
use serde::Serialize;

/// Maker in every `*IDN?` reply (an invented name for the simulated bench).
pub const MAKER: &str = "Regulus Simulated Bench";

/// The kinds of simulated instrument.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum InstrumentKind {
    /// Query meter on the output voltage (`MEAS:VOLT:DC?`).
    QueryMeter,
    /// Meter on the output current that streams `DCI +1.2034 A OK` lines unasked.
    StreamMeter,
    /// Electronic load on the output (CC / CV / CR).
    Load,
    /// Programmable source feeding the unit's input.
    Source,
    /// Thermometer on the pass device's case.
    Thermometer,
}

impl InstrumentKind {
    pub const ALL: [InstrumentKind; 5] = [
        InstrumentKind::QueryMeter,
        InstrumentKind::StreamMeter,
        InstrumentKind::Load,
        InstrumentKind::Source,
        InstrumentKind::Thermometer,
    ];

    /// Name of the instrument in messages, fault specs and the bench file.
    pub fn name(self) -> &'static str {
        match self {
            InstrumentKind::QueryMeter => "dmm",
            InstrumentKind::StreamMeter => "ammeter",
            InstrumentKind::Load => "eload",
            InstrumentKind::Source => "psu",
            InstrumentKind::Thermometer => "thermo",
        }
    }

    pub fn parse(name: &str) -> Option<InstrumentKind> {
        InstrumentKind::ALL.into_iter().find(|k| k.name() == name)
    }

    /// Model field of the identity reply (invented model names).
    pub fn model(self) -> &'static str {
        match self {
            InstrumentKind::QueryMeter => "Gnomon query voltmeter",
            InstrumentKind::StreamMeter => "Ticker streaming ammeter",
            InstrumentKind::Load => "Sinkhole electronic load",
            InstrumentKind::Source => "Wellspring bench source",
            InstrumentKind::Thermometer => "Ember thermometer",
        }
    }
}

/// The unit's true values an instrument can see (before the instrument's own noise).
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Default)]
pub struct Snapshot {
    pub vout: f64,
    pub iout: f64,
    pub vin: f64,
    pub iin: f64,
    pub case_c: f64,
}

impl From<OperatingPoint> for Snapshot {
    fn from(op: OperatingPoint) -> Snapshot {
        Snapshot {
            vout: op.vout,
            iout: op.iout,
            vin: op.vin,
            iin: op.iin,
            case_c: op.case_c,
        }
    }
}
