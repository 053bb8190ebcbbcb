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

/// How a preset reads a setting back: a query whose number is compared with the value set,
/// or a query and the reply (a pattern) that means the setting holds.
#[derive(Debug, Clone, Copy)]
pub(super) enum PresetReadback {
    Value(&'static str),
    Text(&'static str, &'static str),
}

/// What a preset fills in.
#[derive(Debug, Clone)]
pub(super) struct Preset {
    pub commands: &'static [(CommandKey, &'static str)],
    pub identity_query: Option<&'static str>,
    pub confirm_query: Option<&'static str>,
    /// Readbacks of the preset's own setting commands (used only for keys whose command the
    /// file does not replace).
    pub readback: &'static [(CommandKey, PresetReadback)],
    /// The error queue (SCPI `SYST:ERR?`) and the reply pattern meaning "no error".
    pub error_query: Option<(&'static str, &'static str)>,
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

/// The reply of `*OPC?` (IEEE 488.2 section 10.19: the ASCII character 1).
pub const OPC_REPLY: &str = r"^\s*\+?1\s*$";

/// SCPI's error queue: `0,"No error"` (SCPI 1999 vol. 2, SYSTem:ERRor, from memory).
const SCPI_ERROR_QUERY: (&str, &str) = ("SYST:ERR?", r#"^\s*[+-]?0\s*(,|$)"#);

const ON: &str = r"^\s*(1|ON)\s*$";
const OFF: &str = r"^\s*(0|OFF)\s*$";

const SCPI_LOAD_READBACK: &[(CommandKey, PresetReadback)] = &[
    (LoadModeCc, PresetReadback::Text("FUNC?", r"^\s*CURR")),
    (LoadModeCv, PresetReadback::Text("FUNC?", r"^\s*VOLT")),
    (LoadModeCr, PresetReadback::Text("FUNC?", r"^\s*RES")),
    (LoadSetCurrent, PresetReadback::Value("CURR?")),
    (LoadSetVoltage, PresetReadback::Value("VOLT?")),
    (LoadSetResistance, PresetReadback::Value("RES?")),
    (LoadInputOn, PresetReadback::Text("INP?", ON)),
    (LoadInputOff, PresetReadback::Text("INP?", OFF)),
];

const SCPI_SOURCE_READBACK: &[(CommandKey, PresetReadback)] = &[
    (SourceSetVoltage, PresetReadback::Value("VOLT?")),
    (SourceOutputOn, PresetReadback::Text("OUTP?", ON)),
    (SourceOutputOff, PresetReadback::Text("OUTP?", OFF)),
];

const SCPI_THERMOMETER: &[(CommandKey, &str)] = &[(MeasureTemperature, "MEAS:TEMP?")];

/// The preset of this name, `None` for an unknown name.
pub(super) fn preset(name: &str) -> Option<Preset> {
    let scpi = |commands, confirm_query| Preset {
        commands,
        identity_query: Some("*IDN?"),
        confirm_query,
        readback: &[],
        error_query: None,
        reply: ReplySpec::default(),
        stream: false,
    };
    Some(match name {
        "scpi_meter" => scpi(SCPI_METER, None),
        "scpi_load" => Preset {
            readback: SCPI_LOAD_READBACK,
            error_query: Some(SCPI_ERROR_QUERY),
            ..scpi(SCPI_LOAD, Some("*OPC?"))
        },
        "scpi_source" => Preset {
            readback: SCPI_SOURCE_READBACK,
            error_query: Some(SCPI_ERROR_QUERY),
            ..scpi(SCPI_SOURCE, Some("*OPC?"))
        },
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
            for (key, rb) in p.readback {
                assert!(p.commands.iter().any(|(k, _)| k == key), "{name}: {key:?}");
                if let PresetReadback::Text(_, pat) = rb {
                    regex::Regex::new(pat).unwrap_or_else(|e| panic!("{name}: {e}"));
                }
            }
        }
        assert!(preset("fancy").is_none());
    }
}
