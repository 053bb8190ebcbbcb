//! The rules of one `[[instrument]]` table, one small named function per rule, chained by
//! [`check_instrument`] in a fixed order (the first broken rule is the one reported). Each rule
//! turns raw values into checked ones or says, at a file:line:column, what to fix. Pure.

use super::checked::{CommandSet, InstrumentConfig, Limits, Lockstep, ReadingStyle, StreamPick};
use super::context::{Checked, Ctx, FileCtx};
use super::keys::{CommandKey, Need, ROLE_NEEDS, SAFE_STATE_KEYS};
use super::lockstep_checks::{
    check_acknowledge, check_confirm, check_error_query, check_readback, check_sequence,
    check_units,
};
use super::presets::{preset, Preset, PRESET_NAMES};
use super::raw::{
    RawCommands, RawInstrument, RawReading, RawReply, RawSerial, RawTcp, ReadStyleName,
};
use crate::measure::Role;
use crate::protocol::{Arity, PatternError, ReplyParser, Template};
use crate::transport::{
    DataBits, FlowControl, LinkConfig, Parity, SerialSettings, StopBits, TcpSettings,
};
use std::collections::{BTreeMap, BTreeSet};
use std::num::{NonZeroU16, NonZeroU32};
use std::ops::Range;
use std::time::Duration;
use toml::Spanned;

/// Check one `[[instrument]]` table (`span`: the whole table), rule by rule.
pub(super) fn check_instrument(
    file: FileCtx<'_>,
    mut raw: RawInstrument,
    span: Range<usize>,
) -> Checked<InstrumentConfig> {
    let name = check_name(file, &raw.name)?;
    // Modbus instruments: their register map (see `modbus_checks`).
    let modbus =
        super::modbus_checks::check_modbus((file.file, file.src), &name, &mut raw, span.clone())?;
    // USB-TMC links (see `usbtmc_checks`).
    let usbtmc = super::usbtmc_checks::check_usbtmc_link((file.file, file.src), &name, &mut raw)?;
    let cx = Ctx { file, name: &name };
    let roles_span = raw.roles.span();
    let roles = check_roles(&cx, raw.roles)?;
    let preset = check_preset(&cx, raw.preset.as_ref())?;
    let link = match usbtmc {
        Some(usbtmc) => usbtmc,
        None => check_link(&cx, raw.serial, raw.tcp, &span)?,
    };
    let write_terminator = raw
        .write_terminator
        .map(Spanned::into_inner)
        .unwrap_or_else(|| "\n".into());
    let read_terminator = check_read_terminator(&cx, raw.read_terminator)?;
    let reply_timeout = check_reply_timeout(&cx, raw.reply_timeout_ms)?;
    let retries = check_retries(&cx, raw.retries)?;
    let commands = raw.commands.unwrap_or_default();
    let user_keys: BTreeSet<CommandKey> = commands.0.keys().copied().collect();
    let templates = check_templates(&cx, commands, preset.as_ref())?;
    let (reading, reading_span) = check_reading(&cx, raw.reading, preset.as_ref())?;
    let role_queries = raw.role_queries.unwrap_or_default();
    check_role_query_roles(&cx, &role_queries, &roles)?;
    let measure =
        check_measuring_commands(&cx, &roles, &roles_span, role_queries, &templates, &reading)?;
    check_stream_tags(&cx, &reading, reading_span.clone(), &roles, &roles_span)?;
    check_role_needs(&cx, &roles, &roles_span, &templates)?;
    let mut raw_reply = raw.reply.unwrap_or_default();
    let units = check_units(&cx, raw_reply.units.take(), &roles, &span)?;
    let (reply, pattern_span) = check_reply(&cx, raw_reply, preset.as_ref(), &span)?;
    check_tags_have_a_capture(&cx, &reading, &reply, pattern_span.unwrap_or(span.clone()))?;
    let identity_query = query_or_preset(raw.identity_query, || {
        preset.as_ref().and_then(|p| p.identity_query)
    });
    let confirm_query = query_or_preset(raw.confirm_query, || {
        preset.as_ref().and_then(|p| p.confirm_query)
    });
    let lockstep = Lockstep {
        acknowledge: check_acknowledge(&cx, raw.acknowledge)?,
        confirm: check_confirm(&cx, confirm_query, raw.confirm_reply, &span)?,
        readback: check_readback(&cx, raw.readback, preset.as_ref(), &user_keys, &templates)?,
        error_query: check_error_query(&cx, raw.error_query, raw.no_error, preset.as_ref())?,
    };
    let init = check_sequence(&cx, "init", raw.init)?.unwrap_or_default();
    let safe_state = check_sequence(&cx, "safe_state", raw.safe_state)?
        .unwrap_or_else(|| default_safe_state(&roles, &templates));
    let limits = Limits {
        arm: check_sequence(&cx, "arm_limits", raw.arm_limits)?.unwrap_or_default(),
        disarm: check_sequence(&cx, "disarm_limits", raw.disarm_limits)?.unwrap_or_default(),
    };
    Ok(InstrumentConfig {
        place: Some(crate::config::line_col(file.src, span.start)),
        name,
        roles,
        preset: raw.preset.map(Spanned::into_inner),
        link,
        write_terminator,
        read_terminator,
        reply_timeout,
        command_gap: Duration::from_millis(raw.command_gap_ms.unwrap_or(0)),
        retries,
        init,
        identity_query,
        lockstep,
        safe_state,
        limits,
        units,
        traffic_log: raw.traffic_log,
        commands: CommandSet { templates, measure },
        reply,
        reading,
        modbus,
    })
}

/// Rule: an instrument's name is non-empty printable text.
fn check_name(file: FileCtx<'_>, raw: &Spanned<String>) -> Checked<String> {
    let name = raw.get_ref().trim().to_string();
    if name.is_empty() || name.chars().any(|c| c.is_control()) {
        return Err(file.at(
            Some(raw.span()),
            "instrument name must be non-empty printable text",
        ));
    }
    Ok(name)
}

/// Rule: at least one role (a role listed twice counts once).
fn check_roles(cx: &Ctx<'_>, raw: Spanned<Vec<Role>>) -> Checked<Vec<Role>> {
    let span = raw.span();
    let mut roles: Vec<Role> = Vec::new();
    for r in raw.into_inner() {
        if !roles.contains(&r) {
            roles.push(r);
        }
    }
    if roles.is_empty() {
        return Err(cx.err(
            Some(span),
            format!(
                "roles is empty; list what it does, e.g. roles = [\"output_voltmeter\"] (one of {})",
                Role::ALL.map(|r| r.as_str()).join(", ")
            ),
        ));
    }
    Ok(roles)
}

/// Rule: a preset, when given, is one of the built-in ones.
fn check_preset(cx: &Ctx<'_>, raw: Option<&Spanned<String>>) -> Checked<Option<Preset>> {
    let Some(p) = raw else { return Ok(None) };
    preset(p.get_ref()).map(Some).ok_or_else(|| {
        cx.err(
            Some(p.span()),
            format!(
                "unknown preset '{}'; use one of {} or leave preset out and write the commands",
                p.get_ref(),
                PRESET_NAMES.join(", ")
            ),
        )
    })
}

/// Rule: exactly one link, serial or tcp.
fn check_link(
    cx: &Ctx<'_>,
    serial: Option<Spanned<RawSerial>>,
    tcp: Option<Spanned<RawTcp>>,
    span: &Range<usize>,
) -> Checked<LinkConfig> {
    match (serial, tcp) {
        (Some(_), Some(t)) => Err(cx.err(
            Some(t.span()),
            "give either a serial table or a tcp table, not both",
        )),
        (None, None) => Err(cx.err(
            Some(span.clone()),
            "no link: add serial = { port = \"/dev/ttyUSB0\", baud = 9600 } or tcp = { host = \"192.168.0.20\", port = 5025 }",
        )),
        (Some(s), None) => check_serial(cx, s).map(LinkConfig::Serial),
        (None, Some(t)) => check_tcp(cx, t).map(LinkConfig::Tcp),
    }
}

/// Rule: a serial link names a port and uses a real framing (defaults 9600 8N1, no flow
/// control).
fn check_serial(cx: &Ctx<'_>, raw: Spanned<RawSerial>) -> Checked<SerialSettings> {
    let sp = raw.span();
    let s = raw.into_inner();
    if s.port.trim().is_empty() {
        return Err(cx.err(
            Some(sp),
            "serial port is empty; give its path, e.g. /dev/ttyUSB0",
        ));
    }
    let baud = NonZeroU32::new(s.baud.unwrap_or(9600))
        .ok_or_else(|| cx.err(Some(sp.clone()), "baud must be positive, e.g. 9600"))?;
    let data_bits = DataBits::from_bits(s.data_bits.unwrap_or(8))
        .ok_or_else(|| cx.err(Some(sp.clone()), "data_bits must be 5, 6, 7 or 8"))?;
    let stop_bits = StopBits::from_bits(s.stop_bits.unwrap_or(1))
        .ok_or_else(|| cx.err(Some(sp.clone()), "stop_bits must be 1 or 2"))?;
    Ok(SerialSettings {
        port: s.port,
        baud,
        data_bits,
        parity: s.parity.unwrap_or(Parity::None),
        stop_bits,
        flow_control: s.flow_control.unwrap_or(FlowControl::None),
    })
}

/// Rule: a TCP link names a host and a non-zero port (default 5025, the usual raw-socket port
/// of LAN instruments); the connect timeout is at least 1 ms (default 3000).
fn check_tcp(cx: &Ctx<'_>, raw: Spanned<RawTcp>) -> Checked<TcpSettings> {
    let sp = raw.span();
    let t = raw.into_inner();
    if t.host.trim().is_empty() {
        return Err(cx.err(Some(sp), "tcp host is empty; give a name or address"));
    }
    let port = NonZeroU16::new(t.port.unwrap_or(5025)).ok_or_else(|| {
        cx.err(
            Some(sp),
            "tcp port must be 1-65535 (LAN instruments commonly listen on 5025)",
        )
    })?;
    Ok(TcpSettings {
        host: t.host,
        port,
        connect_timeout: Duration::from_millis(t.connect_timeout_ms.unwrap_or(3000).max(1)),
    })
}

/// Rule: the read terminator is not empty (default `\n`).
fn check_read_terminator(cx: &Ctx<'_>, raw: Option<Spanned<String>>) -> Checked<String> {
    match raw {
        Some(s) if s.get_ref().is_empty() => Err(cx.err(
            Some(s.span()),
            "read_terminator must not be empty; most instruments end replies with \"\\n\" or \"\\r\\n\"",
        )),
        Some(s) => Ok(s.into_inner()),
        None => Ok("\n".into()),
    }
}

/// Rule: the reply timeout is positive (default 1000 ms).
fn check_reply_timeout(cx: &Ctx<'_>, raw: Option<Spanned<u64>>) -> Checked<Duration> {
    match raw {
        Some(t) if *t.get_ref() == 0 => Err(cx.err(
            Some(t.span()),
            "reply_timeout_ms must be positive, e.g. 1000",
        )),
        Some(t) => Ok(Duration::from_millis(*t.get_ref())),
        None => Ok(Duration::from_millis(1000)),
    }
}

/// Rule: at most 10 retries (default 1).
fn check_retries(cx: &Ctx<'_>, raw: Option<Spanned<u32>>) -> Checked<u32> {
    match raw {
        Some(r) if *r.get_ref() > 10 => Err(cx.err(
            Some(r.span()),
            "retries above 10 only hide a broken link; use 0-10",
        )),
        Some(r) => Ok(r.into_inner()),
        None => Ok(1),
    }
}

/// Rule: every command template (the file's over the preset's) parses and takes a value
/// exactly when its key says so. Keys are checked in table order.
fn check_templates(
    cx: &Ctx<'_>,
    user: RawCommands,
    preset: Option<&Preset>,
) -> Checked<BTreeMap<CommandKey, Template>> {
    let mut texts = user.0;
    for (key, text) in preset.map(|p| p.commands).unwrap_or(&[]) {
        texts
            .entry(*key)
            .or_insert_with(|| Spanned::new(0..0, text.to_string()));
    }
    let mut out = BTreeMap::new();
    for (key, s) in texts {
        if s.get_ref().trim().is_empty() {
            return Err(cx.err(
                Some(s.span()),
                format!(
                    "command {} is blank: an empty command does nothing, so the instrument would \
                     never {}; write the instrument's command or leave the key out",
                    key.name(),
                    key.info().does
                ),
            ));
        }
        let t = Template::parse(s.get_ref(), key.arity()).map_err(|e| {
            cx.err(
                Some(s.span()),
                format!("command {} = \"{}\": {e}", key.name(), s.get_ref()),
            )
        })?;
        out.insert(key, t);
    }
    Ok(out)
}

/// Rule: the reading style is `query` or `stream` (default: stream for a streaming preset);
/// the stream settings apply to `stream` only, and its `max_age_ms` is positive.
fn check_reading(
    cx: &Ctx<'_>,
    raw: Option<Spanned<RawReading>>,
    preset: Option<&Preset>,
) -> Checked<(ReadingStyle, Option<Range<usize>>)> {
    let (r, sp) = match raw {
        Some(r) => {
            let sp = r.span();
            (r.into_inner(), Some(sp))
        }
        None => (RawReading::default(), None),
    };
    let preset_stream = preset.is_some_and(|p| p.stream);
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
                return Err(cx.err(
                    sp,
                    "pick, window_ms, max_age_ms and tags apply to style = \"stream\" only",
                ));
            }
            ReadingStyle::Query
        }
        ReadStyleName::Stream => {
            let max_age = Duration::from_millis(r.max_age_ms.unwrap_or(2000));
            let window = Duration::from_millis(r.window_ms.unwrap_or(500));
            if max_age.is_zero() {
                return Err(cx.err(sp, "max_age_ms must be positive, e.g. 2000"));
            }
            ReadingStyle::Stream {
                pick: r.pick.unwrap_or(StreamPick::Newest),
                window,
                max_age,
                tags: r.tags.unwrap_or_default(),
            }
        }
    };
    Ok((style, sp))
}

/// Rule: `role_queries` names only this instrument's measuring roles.
fn check_role_query_roles(
    cx: &Ctx<'_>,
    role_queries: &BTreeMap<Role, Spanned<String>>,
    roles: &[Role],
) -> Checked<()> {
    for (role, q) in role_queries {
        if !roles.contains(role) || role.quantity().is_none() {
            return Err(cx.err(
                Some(q.span()),
                format!("role_queries names '{role}', which is not one of this instrument's measuring roles"),
            ));
        }
    }
    Ok(())
}

/// Rule: every measuring role of a query instrument has a measuring command: its
/// `role_queries` entry, else the `measure_*` key that serves it.
fn check_measuring_commands(
    cx: &Ctx<'_>,
    roles: &[Role],
    roles_span: &Range<usize>,
    role_queries: BTreeMap<Role, Spanned<String>>,
    templates: &BTreeMap<CommandKey, Template>,
    reading: &ReadingStyle,
) -> Checked<BTreeMap<Role, Template>> {
    let mut measure = BTreeMap::new();
    for role in roles.iter().copied() {
        let Some(key) = CommandKey::measuring(role) else {
            continue;
        };
        if let Some(q) = role_queries.get(&role) {
            let t = Template::parse(q.get_ref(), Arity::NoValue).map_err(|e| {
                cx.err(
                    Some(q.span()),
                    format!("role_queries.{role} = \"{}\": {e}", q.get_ref()),
                )
            })?;
            measure.insert(role, t);
            continue;
        }
        match (templates.get(&key), reading) {
            (Some(t), _) => {
                measure.insert(role, t.clone());
            }
            (None, ReadingStyle::Stream { .. }) => {}
            (None, ReadingStyle::Query) => {
                return Err(cx.err(
                    Some(roles_span.clone()),
                    format!("role '{role}' needs a measuring command: add {} under [instrument.commands], a preset, or style = \"stream\" under [instrument.reading]", key.name()),
                ))
            }
        }
    }
    Ok(measure)
}

/// Rule: a stream's tags name only measuring roles of this instrument, and a stream with
/// several measuring roles tags each of them.
fn check_stream_tags(
    cx: &Ctx<'_>,
    reading: &ReadingStyle,
    reading_span: Option<Range<usize>>,
    roles: &[Role],
    roles_span: &Range<usize>,
) -> Checked<()> {
    let ReadingStyle::Stream { tags, .. } = reading else {
        return Ok(());
    };
    let measuring: Vec<Role> = roles
        .iter()
        .copied()
        .filter(|r| r.quantity().is_some())
        .collect();
    for r in tags.keys() {
        if !measuring.contains(r) {
            return Err(cx.err(
                reading_span,
                format!("tags names '{r}', which is not one of this instrument's measuring roles"),
            ));
        }
    }
    if measuring.len() > 1 && measuring.iter().any(|r| !tags.contains_key(r)) {
        return Err(cx.err(
            reading_span.or(Some(roles_span.clone())),
            "a streaming instrument with several measuring roles needs tags = { <role> = \"<tag>\", ... } for each, matched against the pattern's tag capture",
        ));
    }
    Ok(())
}

/// Rule: an acting role has the commands the key table says it needs.
fn check_role_needs(
    cx: &Ctx<'_>,
    roles: &[Role],
    roles_span: &Range<usize>,
    templates: &BTreeMap<CommandKey, Template>,
) -> Checked<()> {
    for (role, need, preset) in ROLE_NEEDS {
        if !roles.contains(&role) {
            continue;
        }
        let has = |k: &CommandKey| templates.contains_key(k);
        let (met, keys, joined) = match need {
            Need::AnyOf(keys) => (keys.iter().any(has), keys, "at least one of "),
            Need::AllOf(keys) => (keys.iter().all(has), keys, ""),
        };
        if met {
            continue;
        }
        let names: Vec<&str> = keys.iter().map(|k| k.name()).collect();
        let list = match need {
            Need::AnyOf(_) => names.join(", "),
            Need::AllOf(_) => names.join(" and "),
        };
        let hint = preset
            .map(|p| format!(" (or preset = \"{p}\")"))
            .unwrap_or_default();
        return Err(cx.err(
            Some(roles_span.clone()),
            format!("role '{role}' needs {joined}{list}{hint}"),
        ));
    }
    Ok(())
}

/// Rule: the reply settings (the file's over the preset's) make a valid reply parser.
fn check_reply(
    cx: &Ctx<'_>,
    rr: RawReply,
    preset: Option<&Preset>,
    span: &Range<usize>,
) -> Checked<(ReplyParser, Option<Range<usize>>)> {
    let mut spec = preset.map(|p| p.reply.clone()).unwrap_or_default();
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
            PatternError::BadScale => scale_span,
            _ => pattern_span.clone(),
        };
        cx.err(sp.or(Some(span.clone())), e)
    })?;
    Ok((reply, pattern_span))
}

/// Rule: stream tags need a `tag` capture in the reply pattern (`place`: the pattern when the
/// file gives one, else the instrument).
fn check_tags_have_a_capture(
    cx: &Ctx<'_>,
    reading: &ReadingStyle,
    reply: &ReplyParser,
    place: Range<usize>,
) -> Checked<()> {
    if let ReadingStyle::Stream { tags, .. } = reading {
        if !tags.is_empty() && !reply.has_tag_group() {
            return Err(cx.err(
                Some(place),
                "tags need a named capture 'tag' in the reply pattern, e.g. (?P<tag>[A-Z]+)",
            ));
        }
    }
    Ok(())
}

/// An identity or confirm query: the file's (an empty one disables the preset's), else the
/// preset's.
fn query_or_preset(
    raw: Option<String>,
    preset: impl FnOnce() -> Option<&'static str>,
) -> Option<String> {
    match raw {
        Some(q) if q.trim().is_empty() => None,
        Some(q) => Some(q),
        None => preset().map(str::to_string),
    }
}

/// The safe state when the file gives none: the acting roles' off commands, load first.
fn default_safe_state(roles: &[Role], templates: &BTreeMap<CommandKey, Template>) -> Vec<String> {
    SAFE_STATE_KEYS
        .iter()
        .filter(|(role, _)| roles.contains(role))
        .filter_map(|(_, key)| templates.get(key))
        .map(|t| t.source().to_string())
        .collect()
}
