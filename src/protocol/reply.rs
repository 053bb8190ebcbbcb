//! Reply parsing: a user pattern with named captures (`value`, optional `unit`, `status`,
//! `tag`) or the built-in bare number form, unit scaling and overrange detection, giving a
//! [`Reading`] in SI units. Pure logic: lines in, readings out.

use super::number::{parse_number, si_prefix, unit_prefix_multiplier, SCPI_OVERRANGE};
use crate::measure::{Quantity, Reading};
use regex::Regex;

/// Zero degrees Celsius in kelvin (SI Brochure, 9th edition, 2.3.1: T/degC = T/K - 273.15).
const ZERO_CELSIUS_K: f64 = 273.15;

/// The unit a reply must carry for the role it is read for.
#[derive(Debug, Clone, PartialEq)]
pub enum ExpectedUnit {
    /// No check (identity replies, readbacks of settings).
    Any,
    /// The quantity's SI unit, with an optional SI prefix (`mV`, `kV`, `uA`); temperature in
    /// degC (`degC`, `\u{b0}C`, `C`, `CEL`) or kelvin (`K`, converted to degC).
    Of(Quantity),
    /// Exactly this unit text (compared without case), as the bench file configures it; no
    /// prefix scaling.
    Text(String),
}

impl ExpectedUnit {
    /// What the message says was expected.
    pub fn describe(&self) -> String {
        match self {
            ExpectedUnit::Any => "any unit".into(),
            ExpectedUnit::Of(q) => match q {
                Quantity::Temperature => "degC or K".into(),
                q => q.unit().to_string(),
            },
            ExpectedUnit::Text(t) => format!("'{t}'"),
        }
    }
}

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
    #[error("the reply's unit '{found}' is not the role's unit (expected {expected})")]
    WrongUnit { found: String, expected: String },
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
        self.parse_expecting(line, &ExpectedUnit::Any)
    }

    /// Parse one reply line for a role: the reply's unit, when it carries one, must be
    /// `expect` (a voltmeter reply of `0.5 A` or `12 furlongs` is refused).
    pub fn parse_expecting<'a>(
        &self,
        line: &'a str,
        expect: &ExpectedUnit,
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
        self.interpret(value, unit, status, expect)
            .map(|r| (tag, r))
    }

    fn interpret(
        &self,
        value: &str,
        unit: Option<&str>,
        status: Option<&str>,
        expect: &ExpectedUnit,
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
        let mut offset = 0.0;
        let u = unit.map(str::trim).filter(|u| !u.is_empty());
        match (expect, u) {
            (_, None) => {}
            (ExpectedUnit::Any, Some(u)) => {
                if self.spec.unit_prefixes {
                    mult *=
                        unit_prefix_multiplier(u).ok_or_else(|| ReplyError::BadUnit(clip(u)))?;
                }
            }
            (ExpectedUnit::Text(t), Some(u)) => {
                if !u.eq_ignore_ascii_case(t) {
                    return Err(wrong_unit(u, expect));
                }
            }
            (ExpectedUnit::Of(q), Some(u)) => {
                let (prefix, kelvin) = si_unit_of(u, *q).ok_or_else(|| wrong_unit(u, expect))?;
                if self.spec.unit_prefixes {
                    mult *= prefix;
                }
                if kelvin {
                    offset = -ZERO_CELSIUS_K;
                }
            }
        }
        let out = n * mult + offset;
        if !out.is_finite() {
            return Err(ReplyError::BadNumber(clip(v)));
        }
        Ok(Reading::Value(out))
    }
}

fn wrong_unit(found: &str, expect: &ExpectedUnit) -> ReplyError {
    ReplyError::WrongUnit {
        found: clip(found),
        expected: expect.describe(),
    }
}

/// The prefix multiplier of a unit text that names `q`'s unit, and whether it is kelvin;
/// `None` when the text names another unit.
fn si_unit_of(u: &str, q: Quantity) -> Option<(f64, bool)> {
    // Returns Some(kelvin) when `base` is the quantity's unit.
    let base_is = |base: &str| -> Option<bool> {
        match q {
            Quantity::OutputVoltage | Quantity::InputVoltage => (base == "V").then_some(false),
            Quantity::OutputCurrent | Quantity::InputCurrent => (base == "A").then_some(false),
            Quantity::Temperature => {
                if base == "K" {
                    Some(true)
                } else if ["degC", "\u{b0}C", "C"].contains(&base)
                    || base.eq_ignore_ascii_case("degc")
                    || base.eq_ignore_ascii_case("cel")
                {
                    Some(false)
                } else {
                    None
                }
            }
        }
    };
    if let Some(k) = base_is(u) {
        return Some((1.0, k));
    }
    let mut cs = u.chars();
    let first = cs.next()?;
    let rest = cs.as_str();
    let p = si_prefix(first)?;
    base_is(rest).map(|k| (p, k))
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

    // SI Brochure (9th edition, table 7 prefixes; 2.3.1 for kelvin and degC): a reply must
    // carry its role's unit; a prefixed form scales, anything else is refused.
    #[test]
    fn replies_must_carry_the_roles_unit() {
        let p = bare();
        let volts = ExpectedUnit::Of(Quantity::OutputVoltage);
        let amps = ExpectedUnit::Of(Quantity::InputCurrent);
        let temp = ExpectedUnit::Of(Quantity::Temperature);
        let v = |line: &str, e: &ExpectedUnit| p.parse_expecting(line, e).map(|(_, r)| r);
        assert_eq!(v("12.5 V", &volts), Ok(Reading::Value(12.5)));
        assert_eq!(v("12.5mV", &volts), Ok(Reading::Value(0.0125)));
        assert_eq!(v("+1.20034E+01", &volts), Ok(Reading::Value(12.0034)));
        for bad in ["0.5 A", "4.7 kohm", "12 furlongs", "3 degC"] {
            match v(bad, &volts) {
                Err(ReplyError::WrongUnit { expected, .. }) => assert_eq!(expected, "V"),
                other => panic!("{bad}: {other:?}"),
            }
        }
        assert_eq!(v("250 mA", &amps), Ok(Reading::Value(0.25)));
        assert!(matches!(
            v("250 mV", &amps),
            Err(ReplyError::WrongUnit { .. })
        ));
        assert_eq!(v("25.5 degC", &temp), Ok(Reading::Value(25.5)));
        assert_eq!(v("25.5 \u{b0}C", &temp), Ok(Reading::Value(25.5)));
        // 300 K is 26.85 degC.
        match v("300 K", &temp) {
            Ok(Reading::Value(t)) => assert!((t - 26.85).abs() < 1e-9, "{t}"),
            other => panic!("{other:?}"),
        }
        assert!(matches!(v("3 V", &temp), Err(ReplyError::WrongUnit { .. })));
        let text = ExpectedUnit::Text("VDC".into());
        assert_eq!(v("12.0 VDC", &text), Ok(Reading::Value(12.0)));
        assert!(matches!(
            v("12.0 V", &text),
            Err(ReplyError::WrongUnit { .. })
        ));
        // Overrange stays overrange whatever the unit.
        assert_eq!(v("9.9E37 V", &volts), Ok(Reading::Overrange));
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
