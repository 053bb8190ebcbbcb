//! The user-defined line protocol, as pure logic: command templates with typed, formatted
//! placeholders (`CURR {value:.4}`), reply parsing by a user pattern with named captures
//! (`value`, optional `unit` and `status`), number forms (plain, SCPI NR1/NR2/NR3 per
//! IEEE 488.2, engineering suffixes), unit scaling and overrange detection. Nothing here touches
//! a port, a file or a clock: values in, values out, so it can be tested and fuzzed directly.
//!
//! Template syntax (our own):
//! - literal text is sent as written; `{{` and `}}` stand for `{` and `}`;
//! - `{value}` is the number in its shortest plain form (`0.5`, `12`);
//! - `{value:.N}` fixed point with N decimals (`{value:.4}` -> `0.5000`);
//! - `{value:eN}` / `{value:EN}` exponent form with N mantissa decimals and a signed two-digit
//!   exponent, as SCPI NR3 (`{value:E3}` -> `5.000E-01`);
//! - `{value:d}` rounded to a whole number (NR1);
//! - a `+` right after the colon always writes the sign (`{value:+.3}` -> `+0.500`);
//! - `{value*K}` multiplies by K before formatting, for instruments that take other units
//!   (`{value*1000:.1}` sends amperes as milliamperes).

use crate::measure::Reading;
use regex::Regex;
use std::fmt::Write as _;

/// Largest number of decimals a template may ask for.
const MAX_DECIMALS: usize = 15;

/// SCPI's overrange value (IEEE 488.2 / SCPI "9.9E37"); anything this large or larger is an
/// overrange, never a number. SCPI also uses 9.91E37 for "not a number": reported the same way.
pub const SCPI_OVERRANGE: f64 = 9.9e37;

/// Why a command template was rejected.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum TemplateError {
    #[error("unclosed '{{' at character {0}; write '{{{{' for a literal brace")]
    Unclosed(usize),
    #[error("stray '}}' at character {0}; write '}}}}' for a literal brace")]
    StrayClose(usize),
    #[error("unknown placeholder '{{{0}}}'; the only placeholder is {{value}}")]
    UnknownName(String),
    #[error("bad scale '{0}' in placeholder; write a positive number, e.g. {{value*1000:.1}}")]
    BadScale(String),
    #[error("bad format '{0}' in placeholder; use .N, eN, EN or d, optionally after '+' (e.g. {{value:.4}})")]
    BadFormat(String),
    #[error("this command takes a value: add a {{value}} placeholder, e.g. {{value:.4}}")]
    MissingValue,
    #[error("this command takes no value: remove the {{value}} placeholder")]
    UnexpectedValue,
    #[error("only one {{value}} placeholder is allowed")]
    RepeatedValue,
    #[error("value {0} is not a finite number")]
    NotFinite(f64),
}

/// How a number is written into a command.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum NumberStyle {
    /// Shortest plain form (`12`, `0.5`).
    Shortest,
    /// Fixed point with this many decimals.
    Fixed(usize),
    /// Exponent form with this many mantissa decimals; `upper` selects `E` over `e`.
    Exponent { decimals: usize, upper: bool },
    /// Rounded to a whole number.
    Whole,
}

/// One placeholder's formatting: scale, sign and number style.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ValueFormat {
    pub scale: f64,
    pub plus_sign: bool,
    pub style: NumberStyle,
}

impl ValueFormat {
    /// Write `value` (already checked finite) in this format.
    pub fn write(&self, out: &mut String, value: f64) {
        let v = value * self.scale;
        let start = out.len();
        let _ = match self.style {
            NumberStyle::Shortest => write!(out, "{v}"),
            NumberStyle::Fixed(n) => write!(out, "{v:.n$}"),
            NumberStyle::Whole => write!(out, "{:.0}", v.round()),
            NumberStyle::Exponent { decimals, upper } => {
                write_exponent(out, v, decimals, upper);
                Ok(())
            }
        };
        // Normalise a negative zero ("-0.000") to a plain zero.
        if out[start..].starts_with('-') && out[start + 1..].chars().all(|c| c == '0' || c == '.') {
            out.remove(start);
        }
        if self.plus_sign && !out[start..].starts_with('-') {
            out.insert(start, '+');
        }
    }
}

fn write_exponent(out: &mut String, v: f64, decimals: usize, upper: bool) {
    // Rust writes `1.2000e1`; SCPI NR3 habit is `1.2000E+01`.
    let s = format!("{v:.decimals$e}");
    let (mantissa, exp) = s.split_once('e').unwrap_or((s.as_str(), "0"));
    let exp: i32 = exp.parse().unwrap_or(0);
    out.push_str(mantissa);
    out.push(if upper { 'E' } else { 'e' });
    out.push(if exp < 0 { '-' } else { '+' });
    let _ = write!(out, "{:02}", exp.abs());
}

#[derive(Debug, Clone, PartialEq)]
enum Piece {
    Text(String),
    Value(ValueFormat),
}

/// A validated command template.
#[derive(Debug, Clone, PartialEq)]
pub struct Template {
    source: String,
    pieces: Vec<Piece>,
}

/// Whether a command carries a value (the template must say so).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Arity {
    NoValue,
    OneValue,
}

impl Template {
    /// Parse a template and check it takes a value exactly when `arity` says so.
    pub fn parse(text: &str, arity: Arity) -> Result<Template, TemplateError> {
        let t = Template::parse_any(text)?;
        match (arity, t.takes_value()) {
            (Arity::OneValue, false) => Err(TemplateError::MissingValue),
            (Arity::NoValue, true) => Err(TemplateError::UnexpectedValue),
            _ => Ok(t),
        }
    }

    /// Parse a template with or without a placeholder.
    pub fn parse_any(text: &str) -> Result<Template, TemplateError> {
        let mut pieces = Vec::new();
        let mut lit = String::new();
        let mut chars = text.char_indices().peekable();
        let mut values = 0;
        while let Some((i, c)) = chars.next() {
            match c {
                '{' if matches!(chars.peek(), Some((_, '{'))) => {
                    chars.next();
                    lit.push('{');
                }
                '}' if matches!(chars.peek(), Some((_, '}'))) => {
                    chars.next();
                    lit.push('}');
                }
                '}' => return Err(TemplateError::StrayClose(i)),
                '{' => {
                    let rest = &text[i + 1..];
                    let end = rest.find('}').ok_or(TemplateError::Unclosed(i))?;
                    let inner = &rest[..end];
                    if inner.contains('{') {
                        return Err(TemplateError::Unclosed(i));
                    }
                    let fmt = parse_placeholder(inner)?;
                    values += 1;
                    if values > 1 {
                        return Err(TemplateError::RepeatedValue);
                    }
                    if !lit.is_empty() {
                        pieces.push(Piece::Text(std::mem::take(&mut lit)));
                    }
                    pieces.push(Piece::Value(fmt));
                    // Skip the placeholder's characters.
                    while let Some(&(j, _)) = chars.peek() {
                        if j > i + end + 1 {
                            break;
                        }
                        chars.next();
                    }
                }
                _ => lit.push(c),
            }
        }
        if !lit.is_empty() {
            pieces.push(Piece::Text(lit));
        }
        Ok(Template {
            source: text.to_string(),
            pieces,
        })
    }

    pub fn takes_value(&self) -> bool {
        self.pieces.iter().any(|p| matches!(p, Piece::Value(_)))
    }

    /// The template as written in the bench file.
    pub fn source(&self) -> &str {
        &self.source
    }

    /// Render the command. `value` is ignored by a template without placeholder.
    pub fn render(&self, value: f64) -> Result<String, TemplateError> {
        let mut out = String::with_capacity(self.source.len() + 16);
        for p in &self.pieces {
            match p {
                Piece::Text(t) => out.push_str(t),
                Piece::Value(f) => {
                    if !value.is_finite() || !(value * f.scale).is_finite() {
                        return Err(TemplateError::NotFinite(value));
                    }
                    f.write(&mut out, value);
                }
            }
        }
        Ok(out)
    }
}

fn parse_placeholder(inner: &str) -> Result<ValueFormat, TemplateError> {
    let (head, spec) = match inner.split_once(':') {
        Some((h, s)) => (h.trim(), Some(s.trim())),
        None => (inner.trim(), None),
    };
    let (name, scale) = match head.split_once('*') {
        Some((n, k)) => {
            let k_trim = k.trim();
            let scale: f64 = k_trim
                .parse()
                .map_err(|_| TemplateError::BadScale(k_trim.to_string()))?;
            if !(scale.is_finite() && scale > 0.0) {
                return Err(TemplateError::BadScale(k_trim.to_string()));
            }
            (n.trim(), scale)
        }
        None => (head, 1.0),
    };
    if name != "value" {
        return Err(TemplateError::UnknownName(name.to_string()));
    }
    let mut fmt = ValueFormat {
        scale,
        plus_sign: false,
        style: NumberStyle::Shortest,
    };
    let Some(spec) = spec else {
        return Ok(fmt);
    };
    let bad = || TemplateError::BadFormat(spec.to_string());
    let mut s = spec;
    if let Some(rest) = s.strip_prefix('+') {
        fmt.plus_sign = true;
        s = rest;
    }
    let digits = |d: &str| -> Result<usize, TemplateError> {
        if d.is_empty() || !d.bytes().all(|b| b.is_ascii_digit()) {
            return Err(bad());
        }
        let n: usize = d.parse().map_err(|_| bad())?;
        if n > MAX_DECIMALS {
            return Err(bad());
        }
        Ok(n)
    };
    fmt.style = if s.is_empty() {
        NumberStyle::Shortest
    } else if s == "d" {
        NumberStyle::Whole
    } else if let Some(d) = s.strip_prefix('.') {
        NumberStyle::Fixed(digits(d)?)
    } else if let Some(d) = s.strip_prefix('e') {
        NumberStyle::Exponent {
            decimals: digits(d)?,
            upper: false,
        }
    } else if let Some(d) = s.strip_prefix('E') {
        NumberStyle::Exponent {
            decimals: digits(d)?,
            upper: true,
        }
    } else {
        return Err(bad());
    };
    Ok(fmt)
}

/// SI prefix multiplier for a suffix character (engineering notation on a meter's display).
pub fn si_prefix(c: char) -> Option<f64> {
    Some(match c {
        'G' => 1e9,
        'M' => 1e6,
        'k' | 'K' => 1e3,
        'm' => 1e-3,
        'u' | '\u{b5}' | '\u{3bc}' => 1e-6,
        'n' => 1e-9,
        'p' => 1e-12,
        _ => return None,
    })
}

/// Parse a number as instruments write it: NR1 (`12`, `-3`), NR2 (`12.034`, `.5`, `5.`),
/// NR3 (`1.2034E+01`, `1e-3`), each with an optional sign and surrounding blanks, optionally
/// followed by one engineering suffix (`12.5m`, `4.7k`, `2u`). Returns `None` for anything else
/// (including `inf`, `nan`, hex, empty text). Infinite results are rejected.
pub fn parse_number(text: &str) -> Option<f64> {
    let t = text.trim_matches(|c: char| c == ' ' || c == '\t');
    let b = t.as_bytes();
    let mut i = 0;
    if i < b.len() && (b[i] == b'+' || b[i] == b'-') {
        i += 1;
    }
    let int_start = i;
    while i < b.len() && b[i].is_ascii_digit() {
        i += 1;
    }
    let mut mantissa_digits = i - int_start;
    if i < b.len() && b[i] == b'.' {
        i += 1;
        let frac_start = i;
        while i < b.len() && b[i].is_ascii_digit() {
            i += 1;
        }
        mantissa_digits += i - frac_start;
    }
    if mantissa_digits == 0 {
        return None;
    }
    if i < b.len() && (b[i] == b'e' || b[i] == b'E') {
        let mut j = i + 1;
        if j < b.len() && (b[j] == b'+' || b[j] == b'-') {
            j += 1;
        }
        let exp_start = j;
        while j < b.len() && b[j].is_ascii_digit() {
            j += 1;
        }
        if j > exp_start {
            i = j;
        } else {
            // An `E` with no digits after it is not an exponent (nor a known suffix).
            return None;
        }
    }
    let (num, rest) = t.split_at(i);
    let mult = if rest.is_empty() {
        1.0
    } else {
        let mut cs = rest.chars();
        let c = cs.next()?;
        if cs.next().is_some() {
            return None;
        }
        si_prefix(c)?
    };
    let v: f64 = num.parse().ok()?;
    let v = v * mult;
    v.is_finite().then_some(v)
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
}

/// Why a reply pattern or its settings were rejected.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
pub enum PatternError {
    #[error("the reply pattern is not a valid regular expression: {0}")]
    Regex(String),
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
                let re = Regex::new(p).map_err(|e| PatternError::Regex(e.to_string()))?;
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

/// Multiplier for a unit text such as `V`, `mV`, `kohm`, `degC`: an SI prefix letter followed
/// by at least one more letter scales; a bare unit (`V`, `A`, `K`, `degC`, `ohm`) is 1.
/// Units that are letters only (and `%`) are accepted; anything else is refused.
pub fn unit_prefix_multiplier(unit: &str) -> Option<f64> {
    if !unit
        .chars()
        .all(|c| c.is_alphabetic() || c == '%' || c == '\u{b0}')
    {
        return None;
    }
    let mut cs = unit.chars();
    let first = cs.next()?;
    let rest = cs.as_str();
    if rest.is_empty() {
        return Some(1.0);
    }
    // Whole-word units that begin with a prefix letter.
    const BARE: [&str; 5] = ["mho", "min", "Pa", "Hz", "ppm"];
    if BARE.contains(&unit) {
        return Some(1.0);
    }
    Some(si_prefix(first).unwrap_or(1.0))
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

/// The four comma-separated fields of an IEEE 488.2 `*IDN?` reply.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Identity {
    pub maker: String,
    pub model: String,
    pub serial: String,
    pub firmware: String,
}

/// Split an `*IDN?` reply (IEEE 488.2: maker, model, serial, firmware, comma separated).
/// Returns `None` when the reply does not have exactly four fields.
pub fn parse_identity(reply: &str) -> Option<Identity> {
    let fields: Vec<&str> = reply.trim().split(',').map(str::trim).collect();
    match fields.as_slice() {
        [maker, model, serial, firmware] => Some(Identity {
            maker: maker.to_string(),
            model: model.to_string(),
            serial: serial.to_string(),
            firmware: firmware.to_string(),
        }),
        _ => None,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn bare() -> ReplyParser {
        ReplyParser::new(ReplySpec::default()).unwrap()
    }

    #[test]
    fn templates_render_each_style() {
        let t = Template::parse("CURR {value:.4}", Arity::OneValue).unwrap();
        assert_eq!(t.render(0.5).unwrap(), "CURR 0.5000");
        let t = Template::parse("VOLT {value:E3}", Arity::OneValue).unwrap();
        assert_eq!(t.render(12.0).unwrap(), "VOLT 1.200E+01");
        assert_eq!(t.render(0.0005).unwrap(), "VOLT 5.000E-04");
        let t = Template::parse("V{value:e2}", Arity::OneValue).unwrap();
        assert_eq!(t.render(-1234.5).unwrap(), "V-1.23e+03");
        let t = Template::parse("RES {value:d}", Arity::OneValue).unwrap();
        assert_eq!(t.render(99.6).unwrap(), "RES 100");
        let t = Template::parse("I {value*1000:.1} mA", Arity::OneValue).unwrap();
        assert_eq!(t.render(0.25).unwrap(), "I 250.0 mA");
        let t = Template::parse("SET {value:+.3}", Arity::OneValue).unwrap();
        assert_eq!(t.render(0.5).unwrap(), "SET +0.500");
        assert_eq!(t.render(-0.5).unwrap(), "SET -0.500");
        assert_eq!(t.render(-0.0001).unwrap(), "SET +0.000");
        let t = Template::parse("X {value}", Arity::OneValue).unwrap();
        assert_eq!(t.render(12.0).unwrap(), "X 12");
        let t = Template::parse("{{raw}} {value:.1}", Arity::OneValue).unwrap();
        assert_eq!(t.render(1.0).unwrap(), "{raw} 1.0");
        let t = Template::parse("INP ON", Arity::NoValue).unwrap();
        assert_eq!(t.render(f64::NAN).unwrap(), "INP ON");
    }

    #[test]
    fn templates_are_checked() {
        use TemplateError::*;
        assert_eq!(Template::parse("CURR", Arity::OneValue), Err(MissingValue));
        assert_eq!(
            Template::parse("INP {value}", Arity::NoValue),
            Err(UnexpectedValue)
        );
        assert_eq!(
            Template::parse("CURR {amps}", Arity::OneValue),
            Err(UnknownName("amps".into()))
        );
        assert_eq!(
            Template::parse("CURR {value:x4}", Arity::OneValue),
            Err(BadFormat("x4".into()))
        );
        assert_eq!(
            Template::parse("CURR {value:.99}", Arity::OneValue),
            Err(BadFormat(".99".into()))
        );
        assert_eq!(
            Template::parse("CURR {value", Arity::OneValue),
            Err(Unclosed(5))
        );
        assert_eq!(
            Template::parse("CURR }", Arity::NoValue),
            Err(StrayClose(5))
        );
        assert_eq!(
            Template::parse("{value} {value}", Arity::OneValue),
            Err(RepeatedValue)
        );
        assert_eq!(
            Template::parse("{value*-2}", Arity::OneValue),
            Err(BadScale("-2".into()))
        );
        let t = Template::parse("CURR {value}", Arity::OneValue).unwrap();
        assert_eq!(t.render(f64::INFINITY), Err(NotFinite(f64::INFINITY)));
    }

    // IEEE 488.2 section 7.7.2-7.7.4, section numbers from memory (decimal numeric program data / NR1, NR2, NR3 response
    // forms): NR1 is an integer, NR2 has an explicit decimal point, NR3 has an exponent.
    #[test]
    fn number_forms_of_ieee_488_2() {
        assert_eq!(parse_number("12"), Some(12.0)); // NR1
        assert_eq!(parse_number("-3"), Some(-3.0)); // NR1 signed
        assert_eq!(parse_number("+12.0341"), Some(12.0341)); // NR2
        assert_eq!(parse_number(".5"), Some(0.5)); // NR2 leading point
        assert_eq!(parse_number("5."), Some(5.0)); // NR2 trailing point
        assert_eq!(parse_number("+1.20034E+01"), Some(12.0034)); // NR3
        assert_eq!(parse_number("1.5e-3"), Some(0.0015)); // NR3 lower case
        assert_eq!(parse_number("-2.5E2"), Some(-250.0)); // NR3 unsigned exponent
        assert_eq!(parse_number(" 7 "), Some(7.0));
        assert_eq!(parse_number(""), None);
        assert_eq!(parse_number("+"), None);
        assert_eq!(parse_number("."), None);
        assert_eq!(parse_number("1E"), None);
        assert_eq!(parse_number("inf"), None);
        assert_eq!(parse_number("NaN"), None);
        assert_eq!(parse_number("0x10"), None);
        assert_eq!(parse_number("1.2.3"), None);
        assert_eq!(parse_number("1e999"), None);
    }

    // SI prefixes (BIPM SI Brochure, table 7): k = 1e3, m = 1e-3, u (micro) = 1e-6.
    #[test]
    fn engineering_suffixes() {
        assert_eq!(parse_number("12.5m"), Some(0.0125));
        assert_eq!(parse_number("4.7k"), Some(4700.0));
        assert_eq!(parse_number("2u"), Some(2e-6));
        assert_eq!(parse_number("2\u{b5}"), Some(2e-6));
        assert_eq!(parse_number("1.5M"), Some(1.5e6));
        assert_eq!(parse_number("3mm"), None);
        assert_eq!(parse_number("3x"), None);
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

    // IEEE 488.2 section 10.14 (*IDN?): four fields, maker, model, serial number, firmware.
    #[test]
    fn identity_fields() {
        let id = parse_identity("Regulus Simulated Bench,DMM-1,SN0042,1.0.3\n").unwrap();
        assert_eq!(id.maker, "Regulus Simulated Bench");
        assert_eq!(id.model, "DMM-1");
        assert_eq!(id.serial, "SN0042");
        assert_eq!(id.firmware, "1.0.3");
        assert_eq!(parse_identity("only,three,fields"), None);
    }
}
