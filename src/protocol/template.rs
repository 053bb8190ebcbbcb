//! Command templates: literal text with at most one typed, formatted `{value}` placeholder,
//! checked when the bench file is read and rendered when a setting is sent. Pure logic.
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

use std::fmt::Write as _;

/// Largest number of decimals a template may ask for.
const MAX_DECIMALS: usize = 15;

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
    #[error("value {value} would be sent as '{sent}', which loses it; give the placeholder more decimals (e.g. {{value:.6}}) or a scale")]
    Lossy { value: f64, sent: String },
    #[error("value {value} would be sent as a {digits}-character number; check the scale of the placeholder")]
    TooLong { value: f64, digits: usize },
}

/// Longest number a template may write into a command (no instrument takes more).
pub const MAX_NUMBER_CHARS: usize = 24;

/// Largest relative difference between a setpoint and what a template sends for it (0.5 %).
pub const LOSSLESS_RELATIVE: f64 = 0.005;

/// Rounding always allowed, as a fraction of the largest setpoint of the same step (0.01 %
/// of full scale: finer than the setting resolution of common bench instruments, common
/// practice). A 2.86 mA point of a sweep to 1.1 A sent as 2.9 mA is kept; 0.54 A sent as 0
/// or 1 is not.
pub const LOSSLESS_FULL_SCALE: f64 = 1e-4;

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

impl Template {
    fn value_format(&self) -> Option<&ValueFormat> {
        self.pieces.iter().find_map(|p| match p {
            Piece::Value(f) => Some(f),
            Piece::Text(_) => None,
        })
    }

    /// The number text this template writes for `value` (`None` without a placeholder).
    pub fn number_text(&self, value: f64) -> Result<Option<String>, TemplateError> {
        let Some(f) = self.value_format() else {
            return Ok(None);
        };
        if !value.is_finite() || !(value * f.scale).is_finite() {
            return Err(TemplateError::NotFinite(value));
        }
        let mut out = String::new();
        f.write(&mut out, value);
        Ok(Some(out))
    }

    /// What the instrument receives for `value`, in the setting's own unit (the number sent,
    /// divided by the placeholder's scale); `None` without a placeholder.
    pub fn sent_value(&self, value: f64) -> Result<Option<f64>, TemplateError> {
        let (Some(f), Some(text)) = (self.value_format(), self.number_text(value)?) else {
            return Ok(None);
        };
        let n: f64 = text
            .trim_start_matches('+')
            .parse()
            .map_err(|_| TemplateError::Lossy {
                value,
                sent: text.clone(),
            })?;
        Ok(Some(n / f.scale))
    }

    /// One step of the number this template writes near `value`, in the setting's unit
    /// (`{value:.4}`: 0.0001; `{value:d}`: 1; `{value:E3}` at 12: 0.01); zero for the
    /// shortest form (exact).
    pub fn resolution(&self, value: f64) -> f64 {
        let Some(f) = self.value_format() else {
            return 0.0;
        };
        let step = match f.style {
            NumberStyle::Shortest => 0.0,
            NumberStyle::Fixed(n) => 10f64.powi(-(n as i32)),
            NumberStyle::Whole => 1.0,
            NumberStyle::Exponent { decimals, .. } => {
                let v = (value * f.scale).abs();
                let e = if v > 0.0 { v.log10().floor() } else { 0.0 };
                10f64.powf(e - decimals as f64)
            }
        };
        step / f.scale
    }

    /// Check that `value` is sent without losing it: within [`LOSSLESS_RELATIVE`] of itself
    /// (a zero must be sent as zero) and in at most [`MAX_NUMBER_CHARS`] characters.
    pub fn check_lossless(&self, value: f64) -> Result<(), TemplateError> {
        self.check_lossless_in(value, 0.0)
    }

    /// As [`Template::check_lossless`], for a setpoint of a step whose largest setpoint is
    /// `full_scale`: a rounding within [`LOSSLESS_FULL_SCALE`] of it is accepted too.
    pub fn check_lossless_in(&self, value: f64, full_scale: f64) -> Result<(), TemplateError> {
        let Some(text) = self.number_text(value)? else {
            return Ok(());
        };
        if text.len() > MAX_NUMBER_CHARS {
            return Err(TemplateError::TooLong {
                value,
                digits: text.len(),
            });
        }
        let sent = self.sent_value(value)?.unwrap_or(value);
        let err = (sent - value).abs();
        let ok = if value == 0.0 {
            sent == 0.0
        } else {
            err <= LOSSLESS_RELATIVE * value.abs() || err <= LOSSLESS_FULL_SCALE * full_scale.abs()
        };
        if ok {
            Ok(())
        } else {
            Err(TemplateError::Lossy { value, sent: text })
        }
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

#[cfg(test)]
mod tests {
    use super::*;

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
    fn templates_say_what_they_send_and_refuse_losing_it() {
        let t = Template::parse("CURR {value:.4}", Arity::OneValue).unwrap();
        assert_eq!(t.sent_value(0.54).unwrap(), Some(0.54));
        assert!((t.resolution(0.54) - 1e-4).abs() < 1e-15);
        assert!(t.check_lossless(0.54).is_ok());
        // A small point of a large sweep may round by a little of the sweep's full scale
        // (0.0029 for 0.002857 in a sweep to 1.09 A), not by a lot of it.
        let four = Template::parse("CURR {value:.4}", Arity::OneValue).unwrap();
        assert!(four.check_lossless(0.002857).is_err());
        assert!(four.check_lossless_in(0.002857, 1.09).is_ok());
        let two = Template::parse("CURR {value:.2}", Arity::OneValue).unwrap();
        assert!(two.check_lossless_in(0.002857, 1.09).is_err());
        assert!(t.check_lossless(0.05).is_ok());
        // `{value:d}` sends 0.54 A as 1 and 0.3 A as 0: both lost.
        let d = Template::parse("CURR {value:d}", Arity::OneValue).unwrap();
        assert!(matches!(
            d.check_lossless(0.54),
            Err(TemplateError::Lossy { .. })
        ));
        assert!(matches!(
            d.check_lossless(0.3),
            Err(TemplateError::Lossy { .. })
        ));
        assert!(d.check_lossless(12.0).is_ok());
        // A scale of 1e308 writes a 309-digit number (or overflows).
        let big = Template::parse("CURR {value*1e308:.4}", Arity::OneValue).unwrap();
        assert!(big.check_lossless(0.5).is_err());
        let ma = Template::parse("I {value*1000:.1}", Arity::OneValue).unwrap();
        assert_eq!(ma.sent_value(0.25).unwrap(), Some(0.25));
        assert!((ma.resolution(0.25) - 1e-4).abs() < 1e-15);
        let e = Template::parse("VOLT {value:E3}", Arity::OneValue).unwrap();
        assert!((e.resolution(12.0) - 0.01).abs() < 1e-12);
        let none = Template::parse("INP ON", Arity::NoValue).unwrap();
        assert_eq!(none.sent_value(1.0).unwrap(), None);
        assert!(none.check_lossless(0.3).is_ok());
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
}
