//! The lockstep rules of one `[[instrument]]` table: acknowledgements, the confirm query and
//! its expected reply, readbacks, the error queue, command sequences without blanks, and unit
//! texts per role. One small named function per rule. Pure.

use super::checked::{Acknowledge, Confirm, ErrorQuery, Readback};
use super::context::{Checked, Ctx};
use super::keys::CommandKey;
use super::presets::{Preset, PresetReadback, OPC_REPLY};
use super::raw::{RawAcknowledge, RawReadback};
use crate::measure::Role;
use crate::protocol::{Arity, ReplyParser, ReplySpec, Template};
use regex::Regex;
use std::collections::{BTreeMap, BTreeSet};
use std::ops::Range;
use toml::Spanned;

/// Rule: a command sequence (init, safe state, limits) has no blank command.
pub(super) fn check_sequence(
    cx: &Ctx<'_>,
    what: &str,
    raw: Option<Spanned<Vec<String>>>,
) -> Checked<Option<Vec<String>>> {
    let Some(seq) = raw else { return Ok(None) };
    let span = seq.span();
    let list = seq.into_inner();
    if let Some(i) = list.iter().position(|c| c.trim().is_empty()) {
        return Err(cx.err(
            Some(span),
            format!(
                "{what} entry {} is blank; remove it or write the command",
                i + 1
            ),
        ));
    }
    Ok(Some(list))
}

/// A regular expression from the bench file, or the place and what is wrong.
fn regex_at(cx: &Ctx<'_>, span: Option<Range<usize>>, what: &str, text: &str) -> Checked<Regex> {
    Regex::new(text).map_err(|e| {
        cx.err(
            span,
            format!("{what} \"{text}\" is not a valid regular expression: {e}"),
        )
    })
}

/// Rule: acknowledgement patterns are valid regular expressions and not blank.
pub(super) fn check_acknowledge(
    cx: &Ctx<'_>,
    raw: Option<Spanned<RawAcknowledge>>,
) -> Checked<Option<Acknowledge>> {
    let Some(a) = raw else { return Ok(None) };
    let sp = a.span();
    let a = a.into_inner();
    if a.success.trim().is_empty() || a.error.trim().is_empty() {
        return Err(cx.err(
            Some(sp),
            "acknowledge needs both success and error patterns, e.g. { success = \"^ACK$\", error = \"^NAK\" }",
        ));
    }
    Ok(Some(Acknowledge {
        success: regex_at(cx, Some(sp.clone()), "acknowledge.success", &a.success)?,
        error: regex_at(cx, Some(sp), "acknowledge.error", &a.error)?,
    }))
}

/// Rule: a confirm query has an expected reply: `confirm_reply`, or `1` for `*OPC?`.
pub(super) fn check_confirm(
    cx: &Ctx<'_>,
    query: Option<String>,
    reply: Option<Spanned<String>>,
    span: &Range<usize>,
) -> Checked<Option<Confirm>> {
    let Some(query) = query else {
        if let Some(r) = reply {
            return Err(cx.err(
                Some(r.span()),
                "confirm_reply without a confirm_query; add confirm_query (e.g. \"*OPC?\")",
            ));
        }
        return Ok(None);
    };
    let expect = match reply {
        Some(r) if r.get_ref().trim().is_empty() => {
            return Err(cx.err(Some(r.span()), "confirm_reply is blank; give the reply that means \"applied\", e.g. \"^1$\""))
        }
        Some(r) => regex_at(cx, Some(r.span()), "confirm_reply", r.get_ref())?,
        None if query.trim().eq_ignore_ascii_case("*OPC?") => {
            regex_at(cx, None, "confirm_reply", OPC_REPLY)?
        }
        None => {
            return Err(cx.err(
                Some(span.clone()),
                format!("confirm_query \"{query}\" needs confirm_reply, the reply that means the settings are applied (a pattern, e.g. \"^1$\"), so that no other line can confirm them"),
            ))
        }
    };
    Ok(Some(Confirm { query, expect }))
}

/// Rule: readbacks name commands this instrument has; a value readback belongs to a command
/// that takes a value, an expected reply to one that does not. The preset's readbacks apply to
/// the preset's own commands only.
pub(super) fn check_readback(
    cx: &Ctx<'_>,
    raw: Option<BTreeMap<CommandKey, Spanned<RawReadback>>>,
    preset: Option<&Preset>,
    user_keys: &BTreeSet<CommandKey>,
    templates: &BTreeMap<CommandKey, Template>,
) -> Checked<BTreeMap<CommandKey, Readback>> {
    let mut out = BTreeMap::new();
    for (key, rb) in preset.map(|p| p.readback).unwrap_or(&[]) {
        if user_keys.contains(key) || !templates.contains_key(key) {
            continue;
        }
        let r = match *rb {
            PresetReadback::Value(q) => Readback::Value {
                query: q.to_string(),
                reply: bare_reply(),
            },
            PresetReadback::Text(q, pat) => Readback::Text {
                query: q.to_string(),
                expect: regex_at(cx, None, "readback", pat)?,
            },
        };
        out.insert(*key, r);
    }
    for (key, sp) in raw.unwrap_or_default() {
        let span = sp.span();
        if !templates.contains_key(&key) {
            return Err(cx.err(
                Some(span),
                format!("readback.{} reads back a command this instrument does not have; add {} under [instrument.commands]", key.name(), key.name()),
            ));
        }
        let takes_value = key.arity() == Arity::OneValue;
        // A blank query turns the preset's readback of this command off.
        if matches!(sp.get_ref(), RawReadback::Query(q) if q.trim().is_empty()) {
            out.remove(&key);
            continue;
        }
        let (query, pattern, expect) = match sp.into_inner() {
            RawReadback::Query(q) => (q, None, None),
            RawReadback::Table(t) => (t.query, t.pattern, t.expect),
        };
        if query.trim().is_empty() {
            return Err(cx.err(
                Some(span),
                format!("readback.{} has a blank query", key.name()),
            ));
        }
        let r = match (takes_value, pattern, expect) {
            (true, pattern, None) => {
                let spec = ReplySpec {
                    pattern,
                    ..ReplySpec::default()
                };
                let reply = ReplyParser::new(spec).map_err(|e| {
                    cx.err(Some(span.clone()), format!("readback.{}: {e}", key.name()))
                })?;
                Readback::Value { query, reply }
            }
            (false, None, Some(e)) => Readback::Text {
                query,
                expect: regex_at(cx, Some(span), "readback expect", &e)?,
            },
            (true, _, Some(_)) => {
                return Err(cx.err(Some(span), format!("readback.{} sets a value: it is compared with the value sent, so give query (and pattern for a status line), not expect", key.name())))
            }
            (false, _, _) => {
                return Err(cx.err(Some(span), format!("readback.{} takes no value: give {{ query = \"...\", expect = \"<pattern of the reply meaning it holds>\" }}", key.name())))
            }
        };
        out.insert(key, r);
    }
    Ok(out)
}

fn bare_reply() -> ReplyParser {
    // The default specification always builds (scale 1, no pattern).
    ReplyParser::new(ReplySpec::default()).unwrap_or_else(|_| unreachable!())
}

/// Rule: the error query (the file's over the preset's; `""` disables) comes with a valid
/// "no error" pattern.
pub(super) fn check_error_query(
    cx: &Ctx<'_>,
    query: Option<String>,
    none: Option<Spanned<String>>,
    preset: Option<&Preset>,
) -> Checked<Option<ErrorQuery>> {
    let preset_q = preset.and_then(|p| p.error_query);
    let query = match query {
        Some(q) if q.trim().is_empty() => return Ok(None),
        Some(q) => Some(q),
        None => preset_q.map(|(q, _)| q.to_string()),
    };
    let Some(query) = query else {
        if let Some(n) = none {
            return Err(cx.err(
                Some(n.span()),
                "no_error without an error_query; add error_query (e.g. \"SYST:ERR?\")",
            ));
        }
        return Ok(None);
    };
    let none = match (none, preset_q) {
        (Some(n), _) => regex_at(cx, Some(n.span()), "no_error", n.get_ref())?,
        (None, Some((_, pat))) => regex_at(cx, None, "no_error", pat)?,
        (None, None) => {
            return Err(cx.err(None, format!("error_query \"{query}\" needs no_error, the pattern of its reply when there is no error (SCPI: \"^[+-]?0,\")")))
        }
    };
    Ok(Some(ErrorQuery { query, none }))
}

/// Rule: configured unit texts name this instrument's measuring roles and are not blank.
pub(super) fn check_units(
    cx: &Ctx<'_>,
    raw: Option<BTreeMap<Role, String>>,
    roles: &[Role],
    span: &Range<usize>,
) -> Checked<BTreeMap<Role, String>> {
    let units = raw.unwrap_or_default();
    for (role, text) in &units {
        if !roles.contains(role) || role.quantity().is_none() {
            return Err(cx.err(
                Some(span.clone()),
                format!("reply.units names '{role}', which is not one of this instrument's measuring roles"),
            ));
        }
        if text.trim().is_empty() {
            return Err(cx.err(
                Some(span.clone()),
                format!("reply.units.{role} is blank; give the unit text the instrument writes"),
            ));
        }
    }
    Ok(units)
}
