//! The bench file: its TOML layout, the built-in presets, and validation into a checked
//! [`BenchConfig`] before any port is opened. Config errors name the file, line and column and
//! say what to fix. This file reads the bench file in [`BenchConfig::load`] and does no other
//! I/O; the documented layout lives in `config/bench-template.toml`.

use crate::measure::{Quantity, Role};
use crate::protocol::{Arity, ReplyParser, ReplySpec, Template};
use serde::Deserialize;
use std::collections::BTreeMap;
use std::ops::Range;
use std::path::{Path, PathBuf};
use std::time::Duration;
use toml::Spanned;

use super::BenchError;

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

// ---------------------------------------------------------------------------------------------
// Raw layout (what serde reads); every table rejects unknown keys.

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct RawFile {
    bench: Option<RawBenchMeta>,
    #[serde(default)]
    instrument: Vec<Spanned<RawInstrument>>,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct RawBenchMeta {
    name: Option<String>,
    note: Option<String>,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct RawInstrument {
    name: Spanned<String>,
    roles: Spanned<Vec<Role>>,
    preset: Option<Spanned<String>>,
    serial: Option<Spanned<RawSerial>>,
    tcp: Option<Spanned<RawTcp>>,
    write_terminator: Option<Spanned<String>>,
    read_terminator: Option<Spanned<String>>,
    reply_timeout_ms: Option<Spanned<u64>>,
    command_gap_ms: Option<u64>,
    retries: Option<Spanned<u32>>,
    init: Option<Vec<String>>,
    identity_query: Option<String>,
    confirm_query: Option<String>,
    safe_state: Option<Vec<String>>,
    traffic_log: Option<PathBuf>,
    commands: Option<RawCommands>,
    role_queries: Option<BTreeMap<Role, Spanned<String>>>,
    reply: Option<RawReply>,
    reading: Option<Spanned<RawReading>>,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct RawSerial {
    port: String,
    baud: Option<u32>,
    data_bits: Option<u8>,
    parity: Option<Parity>,
    stop_bits: Option<u8>,
    flow_control: Option<FlowControl>,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct RawTcp {
    host: String,
    port: Option<u16>,
    connect_timeout_ms: Option<u64>,
}

/// Command template keys; the names are part of the bench file format.
#[derive(Debug, Default, Deserialize, Clone)]
#[serde(deny_unknown_fields)]
struct RawCommands {
    load_mode_cc: Option<Spanned<String>>,
    load_mode_cv: Option<Spanned<String>>,
    load_mode_cr: Option<Spanned<String>>,
    load_set_current: Option<Spanned<String>>,
    load_set_voltage: Option<Spanned<String>>,
    load_set_resistance: Option<Spanned<String>>,
    load_input_on: Option<Spanned<String>>,
    load_input_off: Option<Spanned<String>>,
    source_set_voltage: Option<Spanned<String>>,
    source_output_on: Option<Spanned<String>>,
    source_output_off: Option<Spanned<String>>,
    measure_voltage: Option<Spanned<String>>,
    measure_current: Option<Spanned<String>>,
    measure_temperature: Option<Spanned<String>>,
}

#[derive(Debug, Default, Deserialize)]
#[serde(deny_unknown_fields)]
struct RawReply {
    pattern: Option<Spanned<String>>,
    scale: Option<Spanned<f64>>,
    unit_prefixes: Option<bool>,
    overrange_tokens: Option<Vec<String>>,
    overrange_status: Option<Vec<String>>,
    ok_status: Option<Vec<String>>,
}

#[derive(Debug, Default, Deserialize)]
#[serde(deny_unknown_fields)]
struct RawReading {
    style: Option<ReadStyleName>,
    pick: Option<StreamPick>,
    window_ms: Option<u64>,
    max_age_ms: Option<u64>,
    tags: Option<BTreeMap<Role, String>>,
}

#[derive(Debug, Clone, Copy, PartialEq, Eq, Deserialize)]
#[serde(rename_all = "snake_case")]
enum ReadStyleName {
    Query,
    Stream,
}

// ---------------------------------------------------------------------------------------------
// Checked configuration.

/// Serial parity.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Parity {
    None,
    Odd,
    Even,
}

/// Serial flow control.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum FlowControl {
    None,
    Software,
    Hardware,
}

/// Serial line settings.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct SerialSettings {
    pub port: String,
    pub baud: u32,
    pub data_bits: u8,
    pub parity: Parity,
    pub stop_bits: u8,
    pub flow_control: FlowControl,
}

/// How an instrument is reached.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum LinkConfig {
    Serial(SerialSettings),
    Tcp {
        host: String,
        port: u16,
        connect_timeout: Duration,
    },
}

impl LinkConfig {
    /// Short description, e.g. `serial /dev/ttyUSB0 @ 9600 8N1` or `tcp 10.0.0.5:5025`.
    pub fn describe(&self) -> String {
        match self {
            LinkConfig::Serial(s) => {
                let p = match s.parity {
                    Parity::None => 'N',
                    Parity::Odd => 'O',
                    Parity::Even => 'E',
                };
                format!(
                    "serial {} @ {} {}{}{}",
                    s.port, s.baud, s.data_bits, p, s.stop_bits
                )
            }
            LinkConfig::Tcp { host, port, .. } => format!("tcp {host}:{port}"),
        }
    }
}

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
    pub load_mode_cc: Option<Template>,
    pub load_mode_cv: Option<Template>,
    pub load_mode_cr: Option<Template>,
    pub load_set_current: Option<Template>,
    pub load_set_voltage: Option<Template>,
    pub load_set_resistance: Option<Template>,
    pub load_input_on: Option<Template>,
    pub load_input_off: Option<Template>,
    pub source_set_voltage: Option<Template>,
    pub source_output_on: Option<Template>,
    pub source_output_off: Option<Template>,
    /// Measuring command per measuring role held (from `role_queries` or `measure_*`).
    pub measure: BTreeMap<Role, Template>,
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
    /// Read and check a bench file.
    pub fn load(path: &Path) -> Result<BenchConfig, BenchError> {
        let text = std::fs::read_to_string(path).map_err(|e| BenchError::ReadFile {
            path: path.display().to_string(),
            detail: e.to_string(),
        })?;
        BenchConfig::parse_file(&text, path)
    }

    /// Check the text of the bench file at `path` (already read): the path names it in
    /// messages, and relative traffic log paths are relative to the file's folder.
    pub fn parse_file(text: &str, path: &Path) -> Result<BenchConfig, BenchError> {
        let mut cfg = BenchConfig::parse(text, &path.display().to_string())?;
        if let Some(dir) = path.parent() {
            for inst in &mut cfg.instruments {
                if let Some(log) = &inst.traffic_log {
                    if log.is_relative() {
                        inst.traffic_log = Some(dir.join(log));
                    }
                }
            }
        }
        Ok(cfg)
    }

    /// Check bench file text; `label` names it in messages (usually the path).
    pub fn parse(text: &str, label: &str) -> Result<BenchConfig, BenchError> {
        let err_at = |span: Option<Range<usize>>, message: String| {
            let (line, column) = span.map(|s| line_column(text, s.start)).unwrap_or((1, 1));
            BenchError::Config {
                file: label.to_string(),
                line,
                column,
                message,
            }
        };
        let raw: RawFile =
            toml::from_str(text).map_err(|e| err_at(e.span(), e.message().trim().to_string()))?;
        if raw.instrument.is_empty() {
            return Err(err_at(
                None,
                "no instruments: add at least one [[instrument]] table (see config/bench-template.toml)"
                    .into(),
            ));
        }
        let mut instruments: Vec<InstrumentConfig> = Vec::new();
        let mut role_owner: BTreeMap<Role, String> = BTreeMap::new();
        for sp in raw.instrument {
            let span = sp.span();
            let inst = check_instrument(sp.into_inner(), span.clone(), &err_at)?;
            if instruments.iter().any(|i| i.name == inst.name) {
                return Err(err_at(
                    Some(span),
                    format!(
                        "instrument name '{}' is used twice; give each instrument its own name",
                        inst.name
                    ),
                ));
            }
            for r in &inst.roles {
                if let Some(prev) = role_owner.insert(*r, inst.name.clone()) {
                    return Err(err_at(
                        Some(span),
                        format!(
                            "role '{r}' is held by both '{prev}' and '{}'; one instrument per role",
                            inst.name
                        ),
                    ));
                }
            }
            instruments.push(inst);
        }
        let (name, note) = raw.bench.map(|b| (b.name, b.note)).unwrap_or((None, None));
        Ok(BenchConfig {
            label: label.to_string(),
            name,
            note,
            instruments,
        })
    }

    /// The instrument holding `role`, if any.
    pub fn instrument_for(&self, role: Role) -> Option<&InstrumentConfig> {
        self.instruments.iter().find(|i| i.roles.contains(&role))
    }
}

/// 1-based line and column (in characters) of a byte offset (shared with every config file).
pub use crate::config::line_col as line_column;

/// What a preset fills in; keys given in the bench file win.
struct Preset {
    commands: RawCommands,
    identity_query: Option<&'static str>,
    confirm_query: Option<&'static str>,
    reply: ReplySpec,
    stream: bool,
}

fn cmd(s: &str) -> Option<Spanned<String>> {
    Some(Spanned::new(0..0, s.to_string()))
}

fn preset(name: &str) -> Option<Preset> {
    let mut p = Preset {
        commands: RawCommands::default(),
        identity_query: Some("*IDN?"),
        confirm_query: None,
        reply: ReplySpec::default(),
        stream: false,
    };
    let c = &mut p.commands;
    match name {
        "scpi_meter" => {
            c.measure_voltage = cmd("MEAS:VOLT:DC?");
            c.measure_current = cmd("MEAS:CURR:DC?");
            c.measure_temperature = cmd("MEAS:TEMP?");
        }
        "scpi_load" => {
            c.load_mode_cc = cmd("FUNC CURR");
            c.load_mode_cv = cmd("FUNC VOLT");
            c.load_mode_cr = cmd("FUNC RES");
            c.load_set_current = cmd("CURR {value:.4}");
            c.load_set_voltage = cmd("VOLT {value:.4}");
            c.load_set_resistance = cmd("RES {value:.4}");
            c.load_input_on = cmd("INP ON");
            c.load_input_off = cmd("INP OFF");
            p.confirm_query = Some("*OPC?");
            c.measure_voltage = cmd("MEAS:VOLT?");
            c.measure_current = cmd("MEAS:CURR?");
        }
        "scpi_source" => {
            c.source_set_voltage = cmd("VOLT {value:.4}");
            c.source_output_on = cmd("OUTP ON");
            c.source_output_off = cmd("OUTP OFF");
            p.confirm_query = Some("*OPC?");
            c.measure_voltage = cmd("MEAS:VOLT?");
            c.measure_current = cmd("MEAS:CURR?");
        }
        "scpi_thermometer" => {
            c.measure_temperature = cmd("MEAS:TEMP?");
        }
        "tagged_stream_meter" => {
            p.stream = true;
            p.reply = ReplySpec {
                pattern: Some(TAGGED_STREAM_PATTERN.to_string()),
                overrange_status: vec!["OL".into()],
                ok_status: vec!["OK".into()],
                ..ReplySpec::default()
            };
        }
        _ => return None,
    }
    Some(p)
}

fn pick<T>(user: Option<T>, preset: Option<T>) -> Option<T> {
    user.or(preset)
}

fn check_instrument(
    raw: RawInstrument,
    span: Range<usize>,
    err_at: &dyn Fn(Option<Range<usize>>, String) -> BenchError,
) -> Result<InstrumentConfig, BenchError> {
    let name = raw.name.get_ref().trim().to_string();
    if name.is_empty() || name.chars().any(|c| c.is_control()) {
        return Err(err_at(
            Some(raw.name.span()),
            "instrument name must be non-empty printable text".into(),
        ));
    }
    let ctx = |m: String| format!("instrument '{name}': {m}");

    let roles_span = raw.roles.span();
    let mut roles: Vec<Role> = Vec::new();
    for r in raw.roles.into_inner() {
        if !roles.contains(&r) {
            roles.push(r);
        }
    }
    if roles.is_empty() {
        return Err(err_at(
            Some(roles_span),
            ctx(format!(
                "roles is empty; list what it does, e.g. roles = [\"output_voltmeter\"] (one of {})",
                Role::ALL.map(|r| r.as_str()).join(", ")
            )),
        ));
    }

    let preset = match &raw.preset {
        None => None,
        Some(p) => Some(preset(p.get_ref()).ok_or_else(|| {
            err_at(
                Some(p.span()),
                ctx(format!(
                    "unknown preset '{}'; use one of {} or leave preset out and write the commands",
                    p.get_ref(),
                    PRESET_NAMES.join(", ")
                )),
            )
        })?),
    };

    // Link: exactly one of serial / tcp.
    let link = match (raw.serial, raw.tcp) {
        (Some(_), Some(t)) => {
            return Err(err_at(
                Some(t.span()),
                ctx("give either a serial table or a tcp table, not both".into()),
            ))
        }
        (None, None) => {
            return Err(err_at(
                Some(span),
                ctx("no link: add serial = { port = \"/dev/ttyUSB0\", baud = 9600 } or tcp = { host = \"192.168.0.20\", port = 5025 }".into()),
            ))
        }
        (Some(s), None) => {
            let sp = s.span();
            let s = s.into_inner();
            let settings = SerialSettings {
                port: s.port,
                baud: s.baud.unwrap_or(9600),
                data_bits: s.data_bits.unwrap_or(8),
                parity: s.parity.unwrap_or(Parity::None),
                stop_bits: s.stop_bits.unwrap_or(1),
                flow_control: s.flow_control.unwrap_or(FlowControl::None),
            };
            if settings.port.trim().is_empty() {
                return Err(err_at(Some(sp), ctx("serial port is empty; give its path, e.g. /dev/ttyUSB0".into())));
            }
            if settings.baud == 0 {
                return Err(err_at(Some(sp), ctx("baud must be positive, e.g. 9600".into())));
            }
            if !(5..=8).contains(&settings.data_bits) {
                return Err(err_at(Some(sp), ctx("data_bits must be 5, 6, 7 or 8".into())));
            }
            if !(1..=2).contains(&settings.stop_bits) {
                return Err(err_at(Some(sp), ctx("stop_bits must be 1 or 2".into())));
            }
            LinkConfig::Serial(settings)
        }
        (None, Some(t)) => {
            let sp = t.span();
            let t = t.into_inner();
            if t.host.trim().is_empty() {
                return Err(err_at(Some(sp), ctx("tcp host is empty; give a name or address".into())));
            }
            let port = t.port.unwrap_or(5025);
            if port == 0 {
                return Err(err_at(Some(sp), ctx("tcp port must be 1-65535 (LAN instruments commonly listen on 5025)".into())));
            }
            LinkConfig::Tcp {
                host: t.host,
                port,
                connect_timeout: Duration::from_millis(t.connect_timeout_ms.unwrap_or(3000).max(1)),
            }
        }
    };

    let write_terminator = raw
        .write_terminator
        .map(|s| s.into_inner())
        .unwrap_or_else(|| "\n".into());
    let read_terminator = match raw.read_terminator {
        Some(s) if s.get_ref().is_empty() => {
            return Err(err_at(
                Some(s.span()),
                ctx("read_terminator must not be empty; most instruments end replies with \"\\n\" or \"\\r\\n\"".into()),
            ))
        }
        Some(s) => s.into_inner(),
        None => "\n".into(),
    };
    let reply_timeout = match raw.reply_timeout_ms {
        Some(t) if *t.get_ref() == 0 => {
            return Err(err_at(
                Some(t.span()),
                ctx("reply_timeout_ms must be positive, e.g. 1000".into()),
            ))
        }
        Some(t) => Duration::from_millis(*t.get_ref()),
        None => Duration::from_millis(1000),
    };
    let retries = match raw.retries {
        Some(r) if *r.get_ref() > 10 => {
            return Err(err_at(
                Some(r.span()),
                ctx("retries above 10 only hide a broken link; use 0-10".into()),
            ))
        }
        Some(r) => r.into_inner(),
        None => 1,
    };

    // Commands: user keys over preset keys, each template checked for its arity.
    let pc = preset
        .as_ref()
        .map(|p| p.commands.clone())
        .unwrap_or_default();
    let uc = raw.commands.unwrap_or_default();
    let tpl = |user: Option<Spanned<String>>,
               pre: Option<Spanned<String>>,
               key: &str,
               arity: Arity|
     -> Result<Option<Template>, BenchError> {
        let Some(s) = pick(user, pre) else {
            return Ok(None);
        };
        Template::parse(s.get_ref(), arity).map(Some).map_err(|e| {
            err_at(
                Some(s.span()),
                ctx(format!("command {key} = \"{}\": {e}", s.get_ref())),
            )
        })
    };
    use Arity::{NoValue, OneValue};
    let mut commands = CommandSet {
        load_mode_cc: tpl(uc.load_mode_cc, pc.load_mode_cc, "load_mode_cc", NoValue)?,
        load_mode_cv: tpl(uc.load_mode_cv, pc.load_mode_cv, "load_mode_cv", NoValue)?,
        load_mode_cr: tpl(uc.load_mode_cr, pc.load_mode_cr, "load_mode_cr", NoValue)?,
        load_set_current: tpl(
            uc.load_set_current,
            pc.load_set_current,
            "load_set_current",
            OneValue,
        )?,
        load_set_voltage: tpl(
            uc.load_set_voltage,
            pc.load_set_voltage,
            "load_set_voltage",
            OneValue,
        )?,
        load_set_resistance: tpl(
            uc.load_set_resistance,
            pc.load_set_resistance,
            "load_set_resistance",
            OneValue,
        )?,
        load_input_on: tpl(uc.load_input_on, pc.load_input_on, "load_input_on", NoValue)?,
        load_input_off: tpl(
            uc.load_input_off,
            pc.load_input_off,
            "load_input_off",
            NoValue,
        )?,
        source_set_voltage: tpl(
            uc.source_set_voltage,
            pc.source_set_voltage,
            "source_set_voltage",
            OneValue,
        )?,
        source_output_on: tpl(
            uc.source_output_on,
            pc.source_output_on,
            "source_output_on",
            NoValue,
        )?,
        source_output_off: tpl(
            uc.source_output_off,
            pc.source_output_off,
            "source_output_off",
            NoValue,
        )?,
        measure: BTreeMap::new(),
    };
    let measure_voltage = tpl(
        uc.measure_voltage,
        pc.measure_voltage,
        "measure_voltage",
        NoValue,
    )?;
    let measure_current = tpl(
        uc.measure_current,
        pc.measure_current,
        "measure_current",
        NoValue,
    )?;
    let measure_temperature = tpl(
        uc.measure_temperature,
        pc.measure_temperature,
        "measure_temperature",
        NoValue,
    )?;

    // Reading style.
    let (reading, reading_span) = {
        let (r, sp) = match raw.reading {
            Some(r) => {
                let sp = r.span();
                (r.into_inner(), Some(sp))
            }
            None => (RawReading::default(), None),
        };
        let preset_stream = preset.as_ref().is_some_and(|p| p.stream);
        let style = r.style.unwrap_or(if preset_stream {
            ReadStyleName::Stream
        } else {
            ReadStyleName::Query
        });
        let style = match style {
            ReadStyleName::Query => {
                if r.pick.is_some()
                    || r.window_ms.is_some()
                    || r.max_age_ms.is_some()
                    || r.tags.is_some()
                {
                    return Err(err_at(
                        sp,
                        ctx(
                            "pick, window_ms, max_age_ms and tags apply to style = \"stream\" only"
                                .into(),
                        ),
                    ));
                }
                ReadingStyle::Query
            }
            ReadStyleName::Stream => {
                let max_age = Duration::from_millis(r.max_age_ms.unwrap_or(2000));
                let window = Duration::from_millis(r.window_ms.unwrap_or(500));
                if max_age.is_zero() {
                    return Err(err_at(
                        sp,
                        ctx("max_age_ms must be positive, e.g. 2000".into()),
                    ));
                }
                ReadingStyle::Stream {
                    pick: r.pick.unwrap_or(StreamPick::Newest),
                    window,
                    max_age,
                    tags: r.tags.unwrap_or_default(),
                }
            }
        };
        (style, sp)
    };

    // Measuring command per measuring role.
    let role_queries = raw.role_queries.unwrap_or_default();
    for (role, q) in &role_queries {
        if !roles.contains(role) || role.quantity().is_none() {
            return Err(err_at(
                Some(q.span()),
                ctx(format!("role_queries names '{role}', which is not one of this instrument's measuring roles")),
            ));
        }
    }
    for role in roles.iter().copied().filter(|r| r.quantity().is_some()) {
        if let Some(q) = role_queries.get(&role) {
            let t = Template::parse(q.get_ref(), NoValue).map_err(|e| {
                err_at(
                    Some(q.span()),
                    ctx(format!("role_queries.{role} = \"{}\": {e}", q.get_ref())),
                )
            })?;
            commands.measure.insert(role, t);
            continue;
        }
        let (key, t) = match role.quantity() {
            Some(Quantity::OutputVoltage | Quantity::InputVoltage) => {
                ("measure_voltage", &measure_voltage)
            }
            Some(Quantity::OutputCurrent | Quantity::InputCurrent) => {
                ("measure_current", &measure_current)
            }
            _ => ("measure_temperature", &measure_temperature),
        };
        match (t, &reading) {
            (Some(t), _) => {
                commands.measure.insert(role, t.clone());
            }
            (None, ReadingStyle::Stream { .. }) => {}
            (None, ReadingStyle::Query) => {
                return Err(err_at(
                    Some(roles_span.clone()),
                    ctx(format!("role '{role}' needs a measuring command: add {key} under [instrument.commands], a preset, or style = \"stream\" under [instrument.reading]")),
                ))
            }
        }
    }
    if let ReadingStyle::Stream { tags, .. } = &reading {
        let measuring: Vec<Role> = roles
            .iter()
            .copied()
            .filter(|r| r.quantity().is_some())
            .collect();
        for r in tags.keys() {
            if !measuring.contains(r) {
                return Err(err_at(
                    reading_span.clone(),
                    ctx(format!(
                        "tags names '{r}', which is not one of this instrument's measuring roles"
                    )),
                ));
            }
        }
        if measuring.len() > 1 && measuring.iter().any(|r| !tags.contains_key(r)) {
            return Err(err_at(reading_span.clone().or(Some(roles_span.clone())), ctx("a streaming instrument with several measuring roles needs tags = { <role> = \"<tag>\", ... } for each, matched against the pattern's tag capture".into())));
        }
    }

    // Required commands for acting roles.
    if roles.contains(&Role::Load) {
        let c = &commands;
        if c.load_set_current.is_none()
            && c.load_set_voltage.is_none()
            && c.load_set_resistance.is_none()
        {
            return Err(err_at(Some(roles_span.clone()), ctx("role 'load' needs at least one of load_set_current, load_set_voltage, load_set_resistance (or preset = \"scpi_load\")".into())));
        }
        if c.load_input_on.is_none() || c.load_input_off.is_none() {
            return Err(err_at(
                Some(roles_span.clone()),
                ctx("role 'load' needs load_input_on and load_input_off".into()),
            ));
        }
    }
    if roles.contains(&Role::InputSource) && commands.source_set_voltage.is_none() {
        return Err(err_at(
            Some(roles_span.clone()),
            ctx(
                "role 'input_source' needs source_set_voltage (or preset = \"scpi_source\")".into(),
            ),
        ));
    }

    // Reply parser.
    let mut spec = preset.as_ref().map(|p| p.reply.clone()).unwrap_or_default();
    let rr = raw.reply.unwrap_or_default();
    let pattern_span = rr.pattern.as_ref().map(|p| p.span());
    let scale_span = rr.scale.as_ref().map(|p| p.span());
    if let Some(p) = rr.pattern {
        spec.pattern = Some(p.into_inner());
    }
    if let Some(s) = rr.scale {
        spec.scale = s.into_inner();
    }
    if let Some(u) = rr.unit_prefixes {
        spec.unit_prefixes = u;
    }
    if let Some(t) = rr.overrange_tokens {
        spec.overrange_tokens = t;
    }
    if let Some(t) = rr.overrange_status {
        spec.overrange_status = t;
    }
    if let Some(t) = rr.ok_status {
        spec.ok_status = t;
    }
    let reply = ReplyParser::new(spec).map_err(|e| {
        let sp = match e {
            crate::protocol::PatternError::BadScale => scale_span.clone(),
            _ => pattern_span.clone(),
        };
        err_at(sp.or(Some(span.clone())), ctx(e.to_string()))
    })?;
    if let ReadingStyle::Stream { tags, .. } = &reading {
        if !tags.is_empty() && !reply.has_tag_group() {
            return Err(err_at(
                pattern_span.or(Some(span.clone())),
                ctx(
                    "tags need a named capture 'tag' in the reply pattern, e.g. (?P<tag>[A-Z]+)"
                        .into(),
                ),
            ));
        }
    }

    // Identity, init, safe state.
    let identity_query = match raw.identity_query {
        Some(q) if q.trim().is_empty() => None,
        Some(q) => Some(q),
        None => preset
            .as_ref()
            .and_then(|p| p.identity_query.map(str::to_string)),
    };
    let confirm_query = match raw.confirm_query {
        Some(q) if q.trim().is_empty() => None,
        Some(q) => Some(q),
        None => preset
            .as_ref()
            .and_then(|p| p.confirm_query.map(str::to_string)),
    };
    let safe_state = match raw.safe_state {
        Some(s) => s,
        None => {
            // Default: the acting roles' off commands (load input off first).
            let mut s = Vec::new();
            if roles.contains(&Role::Load) {
                if let Some(t) = &commands.load_input_off {
                    s.push(t.source().to_string());
                }
            }
            if roles.contains(&Role::InputSource) {
                if let Some(t) = &commands.source_output_off {
                    s.push(t.source().to_string());
                }
            }
            s
        }
    };

    Ok(InstrumentConfig {
        name,
        roles,
        preset: raw.preset.map(|p| p.into_inner()),
        link,
        write_terminator,
        read_terminator,
        reply_timeout,
        command_gap: Duration::from_millis(raw.command_gap_ms.unwrap_or(0)),
        retries,
        init: raw.init.unwrap_or_default(),
        identity_query,
        confirm_query,
        safe_state,
        traffic_log: raw.traffic_log,
        commands,
        reply,
        reading,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    fn parse(t: &str) -> Result<BenchConfig, BenchError> {
        BenchConfig::parse(t, "bench.toml")
    }

    fn config_err(t: &str) -> (usize, usize, String) {
        match parse(t) {
            Err(BenchError::Config {
                line,
                column,
                message,
                ..
            }) => (line, column, message),
            other => panic!("expected a config error, got {other:?}"),
        }
    }

    const MIN: &str = r#"
[[instrument]]
name = "dmm"
roles = ["output_voltmeter", "output_ammeter"]
preset = "scpi_meter"
tcp = { host = "127.0.0.1" }
"#;

    #[test]
    fn preset_fills_commands_and_defaults() {
        let c = parse(MIN).unwrap();
        let i = &c.instruments[0];
        assert_eq!(i.link.describe(), "tcp 127.0.0.1:5025");
        assert_eq!(
            i.commands.measure[&Role::OutputVoltmeter].source(),
            "MEAS:VOLT:DC?"
        );
        assert_eq!(
            i.commands.measure[&Role::OutputAmmeter].source(),
            "MEAS:CURR:DC?"
        );
        assert_eq!(i.identity_query.as_deref(), Some("*IDN?"));
        assert_eq!(i.read_terminator, "\n");
        assert_eq!(i.reply_timeout, Duration::from_millis(1000));
        assert_eq!(i.reading, ReadingStyle::Query);
        assert!(i.safe_state.is_empty());
    }

    #[test]
    fn load_safe_state_defaults_to_input_off() {
        let c = parse(
            r#"
[[instrument]]
name = "eload"
roles = ["load", "output_ammeter"]
preset = "scpi_load"
serial = { port = "/dev/ttyUSB1", baud = 115200, parity = "even", stop_bits = 2 }
"#,
        )
        .unwrap();
        let i = &c.instruments[0];
        assert_eq!(i.safe_state, vec!["INP OFF".to_string()]);
        assert_eq!(i.link.describe(), "serial /dev/ttyUSB1 @ 115200 8E2");
        assert_eq!(
            i.commands
                .load_set_current
                .as_ref()
                .unwrap()
                .render(0.5)
                .unwrap(),
            "CURR 0.5000"
        );
    }

    #[test]
    fn unknown_key_names_line_and_column() {
        let (line, col, msg) = config_err(
            "[[instrument]]\nname = \"dmm\"\nroles = [\"thermometer\"]\npreset = \"scpi_meter\"\ntcp = { host = \"h\" }\nbaud_rate = 9600\n",
        );
        assert_eq!((line, col), (6, 1));
        assert!(msg.contains("unknown field `baud_rate`"), "{msg}");
    }

    #[test]
    fn bad_template_points_at_the_string() {
        let (line, col, msg) = config_err(
            "[[instrument]]\nname = \"ld\"\nroles = [\"load\"]\npreset = \"scpi_load\"\ntcp = { host = \"h\" }\n[instrument.commands]\nload_set_current = \"CURR {amps}\"\n",
        );
        assert_eq!((line, col), (7, 20));
        assert!(
            msg.contains("instrument 'ld'") && msg.contains("{value}"),
            "{msg}"
        );
    }

    #[test]
    fn unknown_role_and_preset_are_explained() {
        let (line, _, msg) = config_err(
            "[[instrument]]\nname = \"x\"\nroles = [\"voltmeter\"]\ntcp = { host = \"h\" }\n",
        );
        assert_eq!(line, 3);
        assert!(msg.contains("output_voltmeter"), "{msg}");
        let (line, _, msg) = config_err(
            "[[instrument]]\nname = \"x\"\nroles = [\"thermometer\"]\npreset = \"fancy\"\ntcp = { host = \"h\" }\n",
        );
        assert_eq!(line, 4);
        assert!(msg.contains("scpi_thermometer"), "{msg}");
    }

    #[test]
    fn missing_measuring_command_is_named() {
        let (_, _, msg) = config_err(
            "[[instrument]]\nname = \"x\"\nroles = [\"thermometer\"]\ntcp = { host = \"h\" }\n",
        );
        assert!(msg.contains("measure_temperature"), "{msg}");
    }

    #[test]
    fn role_on_two_instruments_is_refused() {
        let t = format!("{MIN}{}", MIN.replace("\"dmm\"", "\"dmm2\""));
        let (_, _, msg) = config_err(&t);
        assert!(msg.contains("held by both 'dmm' and 'dmm2'"), "{msg}");
    }

    #[test]
    fn link_must_be_given_once() {
        let (_, _, msg) = config_err(
            "[[instrument]]\nname = \"x\"\nroles = [\"thermometer\"]\npreset = \"scpi_thermometer\"\n",
        );
        assert!(msg.contains("no link"), "{msg}");
    }

    #[test]
    fn stream_preset_with_tags() {
        let c = parse(
            r#"
[[instrument]]
name = "strm"
roles = ["output_voltmeter", "output_ammeter"]
preset = "tagged_stream_meter"
serial = { port = "/dev/pts/9" }
[instrument.reading]
pick = "average"
window_ms = 300
tags = { output_voltmeter = "DCV", output_ammeter = "DCI" }
"#,
        )
        .unwrap();
        match &c.instruments[0].reading {
            ReadingStyle::Stream {
                pick, window, tags, ..
            } => {
                assert_eq!(*pick, StreamPick::Average);
                assert_eq!(*window, Duration::from_millis(300));
                assert_eq!(tags[&Role::OutputAmmeter], "DCI");
            }
            other => panic!("{other:?}"),
        }
        // Two measuring roles without tags is ambiguous.
        let (_, _, msg) = config_err(
            "[[instrument]]\nname = \"s\"\nroles = [\"output_voltmeter\", \"output_ammeter\"]\npreset = \"tagged_stream_meter\"\nserial = { port = \"/dev/pts/9\" }\n",
        );
        assert!(msg.contains("tags"), "{msg}");
    }

    #[test]
    fn bad_pattern_is_reported_at_its_line() {
        let (line, _, msg) = config_err(
            "[[instrument]]\nname = \"x\"\nroles = [\"thermometer\"]\npreset = \"scpi_thermometer\"\ntcp = { host = \"h\" }\n[instrument.reply]\npattern = '(\\d+)'\n",
        );
        assert_eq!(line, 7);
        assert!(msg.contains("named capture 'value'"), "{msg}");
    }

    // The streamed line format of docs/ARCHITECTURE.md ("DCV +12.0341 V OK", status OL =
    // overrange), read with the shipped example file and with the preset.
    #[test]
    fn shipped_stream_example_reads_the_documented_line_format() {
        use crate::measure::Reading;
        let path = Path::new(env!("CARGO_MANIFEST_DIR")).join("config/bench-stream-meter.toml");
        let example = BenchConfig::load(&path).unwrap();
        let preset = parse(
            "[[instrument]]\nname = \"s\"\nroles = [\"output_voltmeter\"]\npreset = \"tagged_stream_meter\"\nserial = { port = \"/dev/pts/9\" }\n",
        )
        .unwrap();
        for cfg in [example, preset] {
            let p = &cfg.instruments[0].reply;
            assert_eq!(p.parse("DCV +12.0341 V OK"), Ok(Reading::Value(12.0341)));
            assert_eq!(p.parse("DCV -0.5000 mV OK"), Ok(Reading::Value(-0.0005)));
            assert_eq!(p.parse("DCV +99.9999 V OL"), Ok(Reading::Overrange));
            assert!(p.parse("DCV +12.03").is_err());
            assert_eq!(p.parse_tagged("DCV +1.0 V OK").unwrap().0, Some("DCV"));
        }
    }

    #[test]
    fn line_column_counts_characters() {
        assert_eq!(line_column("ab\ncd", 4), (2, 2));
        assert_eq!(line_column("\u{b5}x", 2), (1, 2));
        assert_eq!(line_column("", 10), (1, 1));
    }

    #[test]
    fn the_shipped_bench_files_parse() {
        for f in [
            "bench-template.toml",
            "bench-stream-meter.toml",
            "bench-loopback-example.toml",
        ] {
            let path = Path::new(env!("CARGO_MANIFEST_DIR")).join("config").join(f);
            if let Err(e) = BenchConfig::load(&path) {
                panic!("{f}: {e}");
            }
        }
    }
}
