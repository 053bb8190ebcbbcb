//! Reply parsing: a user pattern with named captures (`value`, optional `unit`, `status`,
//! `tag`) or the built-in bare number form, unit scaling and overrange detection, giving a
//! [`Reading`] in SI units. Pure logic: lines in, readings out.

use super::number::{parse_number, si_prefix, unit_prefix_multiplier, SCPI_OVERRANGE};
use crate::measure::Reading;
use regex::Regex;

/// Why a reply line did not give a reading.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
pub enum ReplyError {
    #[error("the reply does not match the pattern")]
    NoMatch,
    #[error("'{0}' is not a number (plain, NR1/NR2/NR3 or with an m/u/k suffix)")]
    BadNumber(String),
    #[error("unknown unit '{0}' in the reply")]
    BadUnit(String),
    #[error("the instrument reported status '{0}'")]
    Status(String),
}

/// Why a reply pattern or its settings were rejected.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum PatternError {
    #[error("the reply pattern is not a valid regular expression: {0}")]
    Regex(regex::Error),
    #[error("the reply pattern needs a named capture 'value', e.g. (?P<value>\\S+)")]
    NoValueGroup,
    #[error("scale must be a finite, non-zero number")]
    BadScale,
}

/// The settings a reply parser is built from (the `[instrument.reply]` table).
#[derive(Debug, Clone, PartialEq)]
pub struct ReplySpec {
    /// Regular expression with a named capture `value` and optional `unit`, `status`;
    /// `None` means "the whole line is one number, optionally followed by a unit".
    pub pattern: Option<String>,
    /// Multiplier applied to every number (a meter that reports mA with no unit: 0.001).
    pub scale: f64,
    /// Scale by an SI prefix found at the start of the `unit` capture (`mA` -> 0.001).
    pub unit_prefixes: bool,
    /// Words in the value position meaning overrange (compared without case), e.g. `OL`.
    pub overrange_tokens: Vec<String>,
    /// Status words meaning overrange, e.g. `OL`.
    pub overrange_status: Vec<String>,
    /// When not empty, any other status word is an error.
    pub ok_status: Vec<String>,
}

impl Default for ReplySpec {
    fn default() -> ReplySpec {
        ReplySpec {
            pattern: None,
            scale: 1.0,
            unit_prefixes: true,
            overrange_tokens: vec!["OL".into(), "OVLD".into(), "OVER".into()],
            overrange_status: vec![],
            ok_status: vec![],
        }
    }
}

/// A compiled reply parser.
#[derive(Debug, Clone)]
pub struct ReplyParser {
    spec: ReplySpec,
    regex: Option<Regex>,
    unit_group: bool,
    status_group: bool,
    tag_group: bool,
}

/// Text shown for the built-in "bare number" pattern in messages.
pub const BARE_NUMBER_PATTERN: &str = "<number> [unit]";

impl ReplyParser {
    pub fn new(spec: ReplySpec) -> Result<ReplyParser, PatternError> {
        if !(spec.scale.is_finite() && spec.scale != 0.0) {
            return Err(PatternError::BadScale);
        }
        let (regex, unit_group, status_group, tag_group) = match &spec.pattern {
            None => (None, true, false, false),
            Some(p) => {
                let re = Regex::new(p).map_err(PatternError::Regex)?;
                let names: Vec<&str> = re.capture_names().flatten().collect();
                if !names.contains(&"value") {
                    return Err(PatternError::NoValueGroup);
                }
                let u = names.contains(&"unit");
                let s = names.contains(&"status");
                let t = names.contains(&"tag");
                (Some(re), u, s, t)
            }
        };
        Ok(ReplyParser {
            spec,
            regex,
            unit_group,
            status_group,
            tag_group,
        })
    }

    /// True when the pattern has a named capture `tag` (used to route streamed lines).
    pub fn has_tag_group(&self) -> bool {
        self.tag_group
    }

    pub fn spec(&self) -> &ReplySpec {
        &self.spec
    }

    /// The pattern as shown to the user in error messages.
    pub fn pattern_text(&self) -> &str {
        self.spec.pattern.as_deref().unwrap_or(BARE_NUMBER_PATTERN)
    }

    /// Parse one reply line (terminator already removed) into a reading in SI units.
    pub fn parse(&self, line: &str) -> Result<Reading, ReplyError> {
        self.parse_tagged(line).map(|(_, r)| r)
    }

    /// Like [`ReplyParser::parse`], also returning the `tag` capture when the pattern has one.
    pub fn parse_tagged<'a>(
        &self,
        line: &'a str,
    ) -> Result<(Option<&'a str>, Reading), ReplyError> {
        let (value, unit, status, tag) = match &self.regex {
            None => {
                let (v, u, s) = split_bare(line).ok_or(ReplyError::NoMatch)?;
                (v, u, s, None)
            }
            Some(re) => {
                let caps = re.captures(line).ok_or(ReplyError::NoMatch)?;
                let value = caps.name("value").map(|m| m.as_str()).unwrap_or("");
                let unit = if self.unit_group {
                    caps.name("unit").map(|m| m.as_str())
                } else {
                    None
                };
                let status = if self.status_group {
                    caps.name("status").map(|m| m.as_str())
                } else {
                    None
                };
                let tag = if self.tag_group {
                    caps.name("tag").map(|m| m.as_str())
                } else {
                    None
                };
                (value, unit, status, tag)
            }
        };
        self.interpret(value, unit, status).map(|r| (tag, r))
    }

    fn interpret(
        &self,
        value: &str,
        unit: Option<&str>,
        status: Option<&str>,
    ) -> Result<Reading, ReplyError> {
        if let Some(st) = status.map(str::trim).filter(|s| !s.is_empty()) {
            if eq_any(&self.spec.overrange_status, st) {
                return Ok(Reading::Overrange);
            }
            if !self.spec.ok_status.is_empty() && !eq_any(&self.spec.ok_status, st) {
                return Err(ReplyError::Status(st.to_string()));
            }
        }
        let v = value.trim();
        if eq_any(&self.spec.overrange_tokens, v) {
            return Ok(Reading::Overrange);
        }
        let n = parse_number(v).ok_or_else(|| ReplyError::BadNumber(clip(v)))?;
        if n.abs() >= SCPI_OVERRANGE {
            return Ok(Reading::Overrange);
        }
        let mut mult = self.spec.scale;
        if self.spec.unit_prefixes {
            if let Some(u) = unit.map(str::trim).filter(|u| !u.is_empty()) {
                mult *= unit_prefix_multiplier(u).ok_or_else(|| ReplyError::BadUnit(clip(u)))?;
            }
        }
        let out = n * mult;
        if !out.is_finite() {
            return Err(ReplyError::BadNumber(clip(v)));
        }
        Ok(Reading::Value(out))
    }
}

fn eq_any(list: &[String], s: &str) -> bool {
    list.iter().any(|t| t.eq_ignore_ascii_case(s))
}

/// Keep error messages short when a line is long garbage.
fn clip(s: &str) -> String {
    const MAX: usize = 80;
    if s.len() <= MAX {
        return s.to_string();
    }
    let mut end = MAX;
    while !s.is_char_boundary(end) {
        end -= 1;
    }
    format!("{}...", &s[..end])
}

/// The built-in "bare number" reply form: `<number>[suffix] [unit]`, e.g. `+1.20034E+01`,
/// `12.5 mA`, `4.7kohm`, `OL`. Returns (number text, unit text).
fn split_bare(line: &str) -> Option<(&str, Option<&str>, Option<&str>)> {
    let t = line.trim();
    if t.is_empty() {
        return None;
    }
    // Number characters run first; the unit (if any) follows, with or without a space.
    if let Some((num, unit)) = t.split_once([' ', '\t']) {
        let unit = unit.trim();
        if unit.contains([' ', '\t']) {
            return None;
        }
        return Some((num, Some(unit), None));
    }
    // No blank: split where the number ends (digits, sign, point, exponent).
    let b = t.as_bytes();
    let mut i = 0;
    while i < b.len() {
        let c = b[i];
        let exp_here = (c == b'e' || c == b'E')
            && i + 1 < b.len()
            && (b[i + 1].is_ascii_digit()
                || ((b[i + 1] == b'+' || b[i + 1] == b'-')
                    && i + 2 < b.len()
                    && b[i + 2].is_ascii_digit()));
        if c.is_ascii_digit() || c == b'.' || c == b'+' || c == b'-' || exp_here {
            i += if exp_here { 2 } else { 1 };
        } else {
            break;
        }
    }
    if i == 0 || i == b.len() {
        return Some((t, None, None));
    }
    let (num, unit) = t.split_at(i);
    // `12.5mA`: the unit text carries the prefix; `12.5m`: the number does.
    if unit.chars().count() == 1 && si_prefix(unit.chars().next()?).is_some() && unit != "K" {
        return Some((t, None, None));
    }
    Some((num, Some(unit), None))
}

#[cfg(test)]
mod tests {
    use super::*;

    fn bare() -> ReplyParser {
        ReplyParser::new(ReplySpec::default()).unwrap()
    }

    // SCPI 1999, vol. 1, 7.2.1.5 (section from memory): 9.9E37 is returned for an overrange / infinity.
    #[test]
    fn scpi_overrange_is_never_a_number() {
        let p = bare();
        assert_eq!(p.parse("9.9E37"), Ok(Reading::Overrange));
        assert_eq!(p.parse("+9.90000000E+37"), Ok(Reading::Overrange));
        assert_eq!(p.parse("-9.9E37"), Ok(Reading::Overrange));
        assert_eq!(p.parse("9.91E37"), Ok(Reading::Overrange));
        assert_eq!(p.parse("OL"), Ok(Reading::Overrange));
        assert_eq!(p.parse("9.8E37"), Ok(Reading::Value(9.8e37)));
    }

    #[test]
    fn bare_replies_with_units() {
        let p = bare();
        assert_eq!(p.parse("+1.20034E+01"), Ok(Reading::Value(12.0034)));
        assert_eq!(p.parse("+1.20034E+01\r"), Ok(Reading::Value(12.0034)));
        assert_eq!(p.parse("12.5 mA"), Ok(Reading::Value(0.0125)));
        assert_eq!(p.parse("12.5mA"), Ok(Reading::Value(0.0125)));
        assert_eq!(p.parse("12.5m"), Ok(Reading::Value(0.0125)));
        assert_eq!(p.parse("4.7kohm"), Ok(Reading::Value(4700.0)));
        assert_eq!(p.parse("25.3 degC"), Ok(Reading::Value(25.3)));
        assert_eq!(p.parse("300 K"), Ok(Reading::Value(300.0)));
        assert_eq!(p.parse("1e3V"), Ok(Reading::Value(1000.0)));
        assert_eq!(p.parse(""), Err(ReplyError::NoMatch));
        assert_eq!(p.parse("hello"), Err(ReplyError::BadNumber("hello".into())));
        assert_eq!(p.parse("1 2 3"), Err(ReplyError::NoMatch));
        assert_eq!(p.parse("12 V!"), Err(ReplyError::BadUnit("V!".into())));
    }

    #[test]
    fn scale_for_a_meter_reporting_milliamperes() {
        let p = ReplyParser::new(ReplySpec {
            scale: 0.001,
            ..ReplySpec::default()
        })
        .unwrap();
        assert_eq!(p.parse("250"), Ok(Reading::Value(0.25)));
    }

    #[test]
    fn fixed_format_stream_line() {
        let p = ReplyParser::new(ReplySpec {
            pattern: Some(
                r"^(?P<tag>[A-Z]+)\s+(?P<value>[-+]?[0-9.]+)\s+(?P<unit>\S+)\s+(?P<status>\S+)$"
                    .into(),
            ),
            overrange_status: vec!["OL".into()],
            ok_status: vec!["OK".into()],
            ..ReplySpec::default()
        })
        .unwrap();
        assert_eq!(p.parse("DCV +12.0341 V OK"), Ok(Reading::Value(12.0341)));
        assert_eq!(p.parse("DCI +583.2 mA OK"), Ok(Reading::Value(0.5832)));
        assert_eq!(p.parse("DCV +99.9999 V OL"), Ok(Reading::Overrange));
        assert_eq!(
            p.parse("DCV +1.0 V ERR"),
            Err(ReplyError::Status("ERR".into()))
        );
        assert_eq!(p.parse("garbage"), Err(ReplyError::NoMatch));
    }

    #[test]
    fn patterns_are_checked() {
        let spec = |p: &str| ReplySpec {
            pattern: Some(p.into()),
            ..ReplySpec::default()
        };
        assert_eq!(
            ReplyParser::new(spec(r"(\d+)")).err(),
            Some(PatternError::NoValueGroup)
        );
        assert!(matches!(
            ReplyParser::new(spec(r"(?P<value>")).err(),
            Some(PatternError::Regex(_))
        ));
        assert_eq!(
            ReplyParser::new(ReplySpec {
                scale: 0.0,
                ..ReplySpec::default()
            })
            .err(),
            Some(PatternError::BadScale)
        );
    }
}
