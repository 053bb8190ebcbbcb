//! The built-in presets: command sets, queries and reply forms matching the simulated bench's
//! wire protocol (SCPI style) and a tagged streaming meter. Keys given in the bench file win
//! over a preset's. Pure data.

use super::keys::CommandKey::{self, *};
use crate::protocol::ReplySpec;

/// Names of the built-in presets, in the order the documentation lists them.
pub const PRESET_NAMES: [&str; 5] = [
    "scpi_meter",
    "scpi_load",
    "scpi_source",
    "scpi_thermometer",
    "tagged_stream_meter",
];

/// Pattern of the `tagged_stream_meter` preset: `DCV +12.0341 V OK` (tag, signed number,
/// unit, status). Written so that each character has one way to match (a "one-pass"
/// pattern), which the regex engine runs several times faster than an ambiguous one.
pub const TAGGED_STREAM_PATTERN: &str = r"^[ \t]*(?P<tag>[A-Za-z]+)[ \t]+(?P<value>[-+]?[0-9]+(?:\.[0-9]*)?(?:[eE][-+]?[0-9]+)?)[ \t]+(?P<unit>[A-Za-z%]+)[ \t]+(?P<status>[A-Za-z]+)[ \t]*$";

/// What a preset fills in.
#[derive(Debug, Clone)]
pub(super) struct Preset {
    pub commands: &'static [(CommandKey, &'static str)],
    pub identity_query: Option<&'static str>,
    pub confirm_query: Option<&'static str>,
    pub reply: ReplySpec,
    /// The instrument streams lines unasked (reading style `stream` by default).
    pub stream: bool,
}

const SCPI_METER: &[(CommandKey, &str)] = &[
    (MeasureVoltage, "MEAS:VOLT:DC?"),
    (MeasureCurrent, "MEAS:CURR:DC?"),
    (MeasureTemperature, "MEAS:TEMP?"),
];

const SCPI_LOAD: &[(CommandKey, &str)] = &[
    (LoadModeCc, "FUNC CURR"),
    (LoadModeCv, "FUNC VOLT"),
    (LoadModeCr, "FUNC RES"),
    (LoadSetCurrent, "CURR {value:.4}"),
    (LoadSetVoltage, "VOLT {value:.4}"),
    (LoadSetResistance, "RES {value:.4}"),
    (LoadInputOn, "INP ON"),
    (LoadInputOff, "INP OFF"),
    (MeasureVoltage, "MEAS:VOLT?"),
    (MeasureCurrent, "MEAS:CURR?"),
];

const SCPI_SOURCE: &[(CommandKey, &str)] = &[
    (SourceSetVoltage, "VOLT {value:.4}"),
    (SourceOutputOn, "OUTP ON"),
    (SourceOutputOff, "OUTP OFF"),
    (MeasureVoltage, "MEAS:VOLT?"),
    (MeasureCurrent, "MEAS:CURR?"),
];

const SCPI_THERMOMETER: &[(CommandKey, &str)] = &[(MeasureTemperature, "MEAS:TEMP?")];

/// The preset of this name, `None` for an unknown name.
pub(super) fn preset(name: &str) -> Option<Preset> {
    let scpi = |commands, confirm_query| Preset {
        commands,
        identity_query: Some("*IDN?"),
        confirm_query,
        reply: ReplySpec::default(),
        stream: false,
    };
    Some(match name {
        "scpi_meter" => scpi(SCPI_METER, None),
        "scpi_load" => scpi(SCPI_LOAD, Some("*OPC?")),
        "scpi_source" => scpi(SCPI_SOURCE, Some("*OPC?")),
        "scpi_thermometer" => scpi(SCPI_THERMOMETER, None),
        "tagged_stream_meter" => Preset {
            stream: true,
            reply: ReplySpec {
                pattern: Some(TAGGED_STREAM_PATTERN.to_string()),
                overrange_status: vec!["OL".into()],
                ok_status: vec!["OK".into()],
                ..ReplySpec::default()
            },
            ..scpi(&[], None)
        },
        _ => return None,
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::protocol::Template;

    #[test]
    fn every_named_preset_exists_and_its_templates_parse() {
        for name in PRESET_NAMES {
            let p = preset(name).unwrap_or_else(|| panic!("{name}"));
            for (key, text) in p.commands {
                Template::parse(text, key.arity()).unwrap_or_else(|e| panic!("{name}: {e}"));
            }
        }
        assert!(preset("fancy").is_none());
    }
}
