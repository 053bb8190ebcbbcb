//! The rules of an `[instrument.modbus]` table: the register map of a Modbus instrument (RTU on
//! the instrument's serial line, or Modbus TCP on its tcp link), checked into a
//! [`ModbusMap`] with every mistake at its file:line:column. The map's keys are the command
//! keys of `[instrument.commands]`; the rules then hand the generic checks one command text
//! per mapped key, so the role rules (what a load or a source needs) and the default safe
//! state are the same as for text instruments. Pure.

use super::keys::{CommandKey, KEY_NAMES};
use super::modbus_map::{
    Confirm as ModbusConfirm, Fixed, Framing, IdentityBlock, ModbusMap, Payload, RegisterAction,
};
use super::modbus_raw::{ConfirmName, RawIdentity, RawRegister};
use super::raw::{RawCommands, RawInstrument};
use crate::bench::BenchError;
use crate::protocol::modbus::{DataType, Encoding, ObjectKind};
use crate::protocol::Arity;
use std::collections::BTreeMap;
use std::ops::Range;
use std::time::Duration;
use toml::Spanned;

type Checked<T> = Result<T, BenchError>;

struct Cx<'a> {
    file: &'a str,
    src: &'a str,
    name: &'a str,
}

impl Cx<'_> {
    fn err(&self, span: Option<Range<usize>>, message: impl std::fmt::Display) -> BenchError {
        BenchError::Config(crate::config::at_span(
            self.file,
            self.src,
            Some(span.unwrap_or(0..0)),
            format!("instrument '{}': modbus: {message}", self.name),
        ))
    }
}

/// Check the instrument's `modbus` table, if it has one: refuse the settings that apply to
/// text instruments only, and give the generic checks a command text per mapped key (and the
/// identity query when the map has an identity block). A Modbus TCP link without a port gets
/// 502, the port registered for Modbus TCP.
pub(super) fn check_modbus(
    (file, src): (&str, &str),
    name: &str,
    raw: &mut RawInstrument,
    span: Range<usize>,
) -> Checked<Option<ModbusMap>> {
    let Some(m) = raw.modbus.take() else {
        return Ok(None);
    };
    let cx = Cx { file, src, name };
    let m_span = m.span();
    let m = m.into_inner();
    check_text_only_settings(&cx, raw, m_span.clone())?;
    if raw.usbtmc.is_some() {
        return Err(cx.err(
            Some(m_span),
            "Modbus runs on a serial line (RTU) or TCP, not over USB-TMC",
        ));
    }
    let framing = match (&raw.serial, &mut raw.tcp) {
        (Some(_), None) => Framing::Rtu,
        (None, Some(t)) => {
            if t.get_ref().port.is_none() {
                t.get_mut().port = Some(502);
            }
            Framing::Tcp
        }
        // Both or neither: the link rule says what to do.
        _ => Framing::Tcp,
    };
    let unit = check_unit(&cx, m.unit.as_ref(), framing)?;
    let baud = raw
        .serial
        .as_ref()
        .and_then(|s| s.get_ref().baud)
        .unwrap_or(9600);
    let frame_gap = check_frame_gap(&cx, m.frame_gap_ms.as_ref(), framing, baud)?;
    let identity = m.identity.map(|i| check_identity(&cx, i)).transpose()?;
    let Some(registers) = m.registers else {
        return Err(cx.err(
            Some(m_span),
            "no registers: add [instrument.modbus.registers] with an entry per command, e.g. load_input_on = { object = \"coil\", address = 0, value = true }",
        ));
    };
    let mut actions = BTreeMap::new();
    let mut commands = BTreeMap::new();
    for (key, reg) in registers.into_inner() {
        let k = CommandKey::from_name(key.get_ref()).ok_or_else(|| {
            cx.err(
                Some(key.span()),
                format!(
                    "unknown register entry '{}'; the entries are the command keys: {}",
                    key.get_ref(),
                    KEY_NAMES.join(", ")
                ),
            )
        })?;
        let reg_span = reg.span();
        let action = check_register(&cx, k, reg)?;
        commands.insert(k, Spanned::new(reg_span, ModbusMap::command_text(k)));
        actions.insert(k, action);
    }
    let map = ModbusMap {
        framing,
        unit,
        frame_gap,
        confirm: match m.confirm.unwrap_or(ConfirmName::Readback) {
            ConfirmName::Readback => ModbusConfirm::Readback,
            ConfirmName::WriteResponse => ModbusConfirm::WriteResponse,
        },
        identity,
        actions,
    };
    check_sequences(&cx, raw, &map, span)?;
    raw.commands = Some(RawCommands(commands));
    if map.identity.is_some() {
        raw.identity_query = Some(ModbusMap::IDENTITY_QUERY.to_string());
    }
    Ok(Some(map))
}

/// Rule: the settings of text instruments (preset, commands, replies, streams, terminators,
/// text queries) are not mixed with a register map.
fn check_text_only_settings(cx: &Cx<'_>, raw: &RawInstrument, m_span: Range<usize>) -> Checked<()> {
    let given: [(&str, Option<Range<usize>>, bool); 10] = [
        (
            "preset",
            raw.preset.as_ref().map(|p| p.span()),
            raw.preset.is_some(),
        ),
        ("commands", None, raw.commands.is_some()),
        ("role_queries", None, raw.role_queries.is_some()),
        ("reply", None, raw.reply.is_some()),
        (
            "reading",
            raw.reading.as_ref().map(|r| r.span()),
            raw.reading.is_some(),
        ),
        (
            "write_terminator",
            raw.write_terminator.as_ref().map(|t| t.span()),
            raw.write_terminator.is_some(),
        ),
        (
            "read_terminator",
            raw.read_terminator.as_ref().map(|t| t.span()),
            raw.read_terminator.is_some(),
        ),
        ("identity_query", None, raw.identity_query.is_some()),
        ("confirm_query", None, raw.confirm_query.is_some()),
        ("command_gap_ms", None, raw.command_gap_ms.is_some()),
    ];
    for (key, sp, present) in given {
        if present {
            let hint = match key {
                "reading" => "; a Modbus instrument is read by request (a stream cannot be described by registers)",
                "command_gap_ms" => "; use frame_gap_ms in [instrument.modbus]",
                "commands" | "role_queries" => "; map each command under [instrument.modbus.registers]",
                "identity_query" => "; give identity = { object, address, words } in [instrument.modbus]",
                "confirm_query" => "; settings are read back (confirm = \"readback\") unless [instrument.modbus] says confirm = \"write_response\"",
                _ => "",
            };
            return Err(cx.err(
                sp.or(Some(m_span.clone())),
                format!("{key} applies to text instruments, not to a register map{hint}"),
            ));
        }
    }
    Ok(())
}

/// Rule: the unit id is 1-247 on a serial line (0 is broadcast, 248-255 reserved: Modbus over
/// Serial Line V1.02 section 2.2), 0-255 over TCP; default 1.
fn check_unit(cx: &Cx<'_>, raw: Option<&Spanned<i64>>, framing: Framing) -> Checked<u8> {
    let Some(u) = raw else { return Ok(1) };
    let v = *u.get_ref();
    let ok = match framing {
        Framing::Rtu => (1..=247).contains(&v),
        Framing::Tcp => (0..=255).contains(&v),
    };
    if !ok {
        return Err(cx.err(
            Some(u.span()),
            match framing {
                Framing::Rtu => format!("unit = {v}: a serial-line unit address is 1-247 (0 is broadcast, which gets no reply)"),
                Framing::Tcp => format!("unit = {v}: a unit identifier is 0-255"),
            },
        ));
    }
    Ok(v as u8)
}

/// Rule: the gap between frames is 0-10000 ms. Default on a serial line: 3.5 character times
/// of 11 bits, and 1.75 ms above 19200 baud (Modbus over Serial Line V1.02 section 2.5.1.1);
/// over TCP none.
fn check_frame_gap(
    cx: &Cx<'_>,
    raw: Option<&Spanned<f64>>,
    framing: Framing,
    baud: u32,
) -> Checked<Duration> {
    if let Some(g) = raw {
        let v = *g.get_ref();
        if !(0.0..=10_000.0).contains(&v) {
            return Err(cx.err(
                Some(g.span()),
                format!("frame_gap_ms = {v}: give 0-10000 ms"),
            ));
        }
        return Ok(Duration::from_secs_f64(v / 1000.0));
    }
    Ok(match framing {
        Framing::Tcp => Duration::ZERO,
        Framing::Rtu => rtu_silence(baud),
    })
}

/// The RTU inter-frame silence at a baud rate: 3.5 characters of 11 bits, fixed at 1.75 ms
/// above 19200 baud (Modbus over Serial Line V1.02 section 2.5.1.1).
pub fn rtu_silence(baud: u32) -> Duration {
    if baud > 19_200 || baud == 0 {
        Duration::from_micros(1750)
    } else {
        Duration::from_secs_f64(3.5 * 11.0 / baud as f64)
    }
}

/// Rule: an identity block is 1-125 registers (one read) inside the address space.
fn check_identity(cx: &Cx<'_>, raw: Spanned<RawIdentity>) -> Checked<IdentityBlock> {
    let sp = raw.span();
    let i = raw.into_inner();
    if i.object.is_bit() {
        return Err(cx.err(
            Some(sp),
            "identity is text in registers: use object = \"input\" or \"holding\"",
        ));
    }
    if !(1..=125).contains(&i.words)
        || !(0..=65535).contains(&i.address)
        || i.address + i.words > 65536
    {
        return Err(cx.err(
            Some(sp),
            "identity: address 0-65535 and words 1-125 (one read), inside the address space",
        ));
    }
    Ok(IdentityBlock {
        object: i.object,
        address: i.address as u16,
        words: i.words as u16,
    })
}

/// The SI unit a key's number is in.
fn base_unit(key: CommandKey) -> &'static str {
    use CommandKey::*;
    match key {
        LoadSetCurrent | MeasureCurrent => "A",
        LoadSetVoltage | SourceSetVoltage | MeasureVoltage => "V",
        LoadSetResistance => "ohm",
        MeasureTemperature => "degC",
        _ => "",
    }
}

/// The multiplier of a unit as written (`mA` = 0.001 A), if it is the key's unit with an
/// optional SI prefix (none for degC).
fn unit_multiplier(written: &str, base: &str) -> Option<f64> {
    let prefix = written.strip_suffix(base)?;
    if prefix.is_empty() {
        return Some(1.0);
    }
    if base == "degC" {
        return None;
    }
    let mut chars = prefix.chars();
    let c = chars.next()?;
    if chars.next().is_some() {
        return None;
    }
    crate::quantity::prefix_multiplier(c)
}

/// Rule: one register entry. Commands with a setpoint write a number (holding registers,
/// with type, word order, scale and unit); the other commands write a fixed value (a coil's
/// true/false, a holding register's 0-65535); measurements read a number from an input or
/// holding register. The entry fits in the address space.
fn check_register(
    cx: &Cx<'_>,
    key: CommandKey,
    raw: Spanned<RawRegister>,
) -> Checked<RegisterAction> {
    let sp = raw.span();
    let r = raw.into_inner();
    let object = *r.object.get_ref();
    let what = key.name();
    let measuring = matches!(
        key,
        CommandKey::MeasureVoltage | CommandKey::MeasureCurrent | CommandKey::MeasureTemperature
    );
    let addr = *r.address.get_ref();
    if !(0..=65535).contains(&addr) {
        return Err(cx.err(
            Some(r.address.span()),
            format!("{what}: address {addr} is outside 0-65535 (addresses count from 0, as on the wire)"),
        ));
    }
    let payload = match (key.arity(), measuring) {
        (Arity::NoValue, false) => {
            if let Some(o) = r.overrange_flag.as_ref() {
                return Err(cx.err(
                    Some(o.span()),
                    format!("{what}: overrange_flag belongs to a measurement's register"),
                ));
            }
            if let Some(o) = r.overrange.as_ref() {
                return Err(cx.err(
                    Some(o.span()),
                    format!("{what}: overrange belongs to a measurement's register"),
                ));
            }
            if let Some(t) = r.data_type.as_ref() {
                return Err(cx.err(
                    Some(t.span()),
                    format!("{what} writes a fixed value: give value, not type/scale/unit"),
                ));
            }
            if r.scale.is_some() || r.unit.is_some() || r.word_order.is_some() {
                return Err(cx.err(
                    Some(sp),
                    format!("{what} writes a fixed value: give value, not type/scale/unit"),
                ));
            }
            if !object.is_writable() {
                return Err(cx.err(
                    Some(r.object.span()),
                    format!(
                        "{what}: a {} cannot be written; use \"coil\" or \"holding\"",
                        object.name()
                    ),
                ));
            }
            let Some(v) = r.value.as_ref() else {
                return Err(cx.err(
                    Some(sp),
                    format!("{what} needs the value it writes, e.g. value = true (coil) or value = 1 (holding)"),
                ));
            };
            Payload::Fixed(fixed_value(cx, what, object, v)?)
        }
        (Arity::OneValue, _) | (_, true) => {
            if let Some(v) = r.value.as_ref() {
                return Err(cx.err(
                    Some(v.span()),
                    format!("{what} carries a number: give type, scale and unit, not value"),
                ));
            }
            let allowed = if measuring {
                matches!(object, ObjectKind::Input | ObjectKind::Holding)
            } else {
                object == ObjectKind::Holding
            };
            if !allowed {
                let use_ = if measuring {
                    "\"input\" or \"holding\""
                } else {
                    "\"holding\""
                };
                return Err(cx.err(
                    Some(r.object.span()),
                    format!(
                        "{what}: a number in a {} does not work here; use {use_}",
                        object.name()
                    ),
                ));
            }
            let base = base_unit(key);
            let Some(unit) = r.unit.as_ref() else {
                return Err(cx.err(
                    Some(sp),
                    format!("{what} needs unit = \"{base}\" (or with an SI prefix, e.g. \"m{base}\") for what one count times scale means"),
                ));
            };
            let mult = unit_multiplier(unit.get_ref(), base).ok_or_else(|| {
                cx.err(
                    Some(unit.span()),
                    format!("{what}: unit \"{}\" is not {base} (an SI prefix such as m or k may stand before it)", unit.get_ref()),
                )
            })?;
            let scale = match r.scale.as_ref() {
                None => 1.0,
                Some(s) if s.get_ref().is_finite() && *s.get_ref() != 0.0 => *s.get_ref(),
                Some(s) => return Err(cx.err(
                    Some(s.span()),
                    "scale must be a finite number other than 0 (value = raw x scale, in the unit)",
                )),
            };
            let data_type = r
                .data_type
                .map(Spanned::into_inner)
                .unwrap_or(DataType::U16);
            let overrange = match r.overrange.as_ref() {
                None => Vec::new(),
                Some(o) if measuring => overrange_values(cx, what, data_type, o)?,
                Some(o) => {
                    return Err(cx.err(
                        Some(o.span()),
                        format!("{what}: overrange belongs to a measurement's register"),
                    ))
                }
            };
            let overrange_flag = match r.overrange_flag.as_ref() {
                None => None,
                Some(f) if measuring => Some(overrange_flag(cx, what, f)?),
                Some(f) => {
                    return Err(cx.err(
                        Some(f.span()),
                        format!("{what}: overrange_flag belongs to a measurement's register"),
                    ))
                }
            };
            Payload::Number {
                encoding: Encoding::new(data_type, r.word_order.unwrap_or_default(), scale * mult),
                unit: unit.get_ref().clone(),
                overrange,
                overrange_flag,
            }
        }
    };
    let action = RegisterAction {
        key,
        object,
        address: addr as u16,
        payload,
    };
    if addr + action.count() as i64 > 65536 {
        return Err(cx.err(
            Some(r.address.span()),
            format!(
                "{what}: {} registers from {addr} run past 65535",
                action.count()
            ),
        ));
    }
    Ok(action)
}

/// Rule: `overrange` is a raw value or a list of them, each an integer that fits the data
/// type's width (0-0xFFFF for 16-bit types, 0-0xFFFFFFFF for 32-bit ones: the register bits
/// as sent, before scaling; negative numbers are not raw bits).
fn overrange_values(
    cx: &Cx<'_>,
    what: &str,
    data_type: DataType,
    o: &Spanned<toml::Value>,
) -> Checked<Vec<u32>> {
    let max: i64 = if data_type.words() == 1 {
        0xFFFF
    } else {
        0xFFFF_FFFF
    };
    let bad = || {
        cx.err(
            Some(o.span()),
            format!(
                "{what}: overrange takes the raw register value(s) that mean over range, each 0 to 0x{max:X} for {}, e.g. overrange = 0x7FFF or [0x7FFF, 0x8000]",
                data_type.name()
            ),
        )
    };
    let items: Vec<&toml::Value> = match o.get_ref() {
        toml::Value::Array(a) if !a.is_empty() => a.iter().collect(),
        v @ toml::Value::Integer(_) => vec![v],
        _ => return Err(bad()),
    };
    items
        .into_iter()
        .map(|v| match v.as_integer() {
            Some(i) if (0..=max).contains(&i) => Ok(i as u32),
            _ => Err(bad()),
        })
        .collect()
}

/// Rule: `overrange_flag` is a coil or discrete input (no bit), or a holding or input
/// register with the bit (0-15, 0 the least significant) that is set while over range.
fn overrange_flag(
    cx: &Cx<'_>,
    what: &str,
    f: &Spanned<super::modbus_raw::RawFlag>,
) -> Checked<super::modbus_map::OverrangeFlag> {
    let r = f.get_ref();
    let err = |m: String| cx.err(Some(f.span()), format!("{what}: overrange_flag: {m}"));
    if !(0..=65535).contains(&r.address) {
        return Err(err(format!("address {} is outside 0-65535", r.address)));
    }
    let bit = match (r.object, r.bit) {
        (ObjectKind::Coil | ObjectKind::DiscreteInput, None) => None,
        (ObjectKind::Coil | ObjectKind::DiscreteInput, Some(_)) => {
            return Err(err(format!(
                "a {} is one bit: give no bit",
                r.object.name()
            )))
        }
        (ObjectKind::Holding | ObjectKind::Input, Some(b)) if (0..=15).contains(&b) => {
            Some(b as u8)
        }
        (ObjectKind::Holding | ObjectKind::Input, _) => {
            return Err(err(format!(
                "the {} needs the bit that flags over range, bit = 0-15 (0 the least significant)",
                r.object.name()
            )))
        }
    };
    Ok(super::modbus_map::OverrangeFlag {
        object: r.object,
        address: r.address as u16,
        bit,
    })
}

/// A fixed value: true/false (or 1/0) for a coil, 0-65535 for a holding register.
fn fixed_value(
    cx: &Cx<'_>,
    what: &str,
    object: ObjectKind,
    v: &Spanned<toml::Value>,
) -> Checked<Fixed> {
    match (object, v.get_ref()) {
        (ObjectKind::Coil, toml::Value::Boolean(b)) => Ok(Fixed::Coil(*b)),
        (ObjectKind::Coil, toml::Value::Integer(i @ (0 | 1))) => Ok(Fixed::Coil(*i == 1)),
        (ObjectKind::Coil, _) => Err(cx.err(
            Some(v.span()),
            format!("{what}: a coil is written true or false"),
        )),
        (_, toml::Value::Integer(i)) if (0..=65535).contains(i) => Ok(Fixed::Word(*i as u16)),
        _ => Err(cx.err(
            Some(v.span()),
            format!("{what}: a holding register is written a whole number 0-65535"),
        )),
    }
}

/// Rule: `init` and `safe_state` lines of a Modbus instrument name commands of its map that
/// write a fixed value (e.g. safe_state = ["load_input_off"]).
fn check_sequences(
    cx: &Cx<'_>,
    raw: &RawInstrument,
    map: &ModbusMap,
    span: Range<usize>,
) -> Checked<()> {
    for (list, lines) in [("init", &raw.init), ("safe_state", &raw.safe_state)] {
        for line in lines.iter().flat_map(|l| l.get_ref().iter()) {
            let ok = map.action_for(line).is_some_and(|a| {
                matches!(a.payload, Payload::Fixed(_)) && line.trim() == a.key.name()
            });
            if !ok {
                let fixed: Vec<&str> = map
                    .actions
                    .values()
                    .filter(|a| matches!(a.payload, Payload::Fixed(_)))
                    .map(|a| a.key.name())
                    .collect();
                return Err(cx.err(
                    Some(span.clone()),
                    format!(
                        "{list} line \"{line}\" is not a fixed-value command of the register map; use one of: {}",
                        if fixed.is_empty() { "(none mapped)".to_string() } else { fixed.join(", ") }
                    ),
                ));
            }
        }
    }
    Ok(())
}
