//! The plan's quantity syntax: absolute values (`"450 mA"`, `"1.2 kohm"`, `"300 ms"`, the SI
//! prefixes coming from [`crate::quantity`], the one prefix table) and values relative to the
//! design (`"90 % of limit"`, `"vout"`). Pure text handling.

use super::targets::DesignTargets;
use crate::quantity::{prefix_exponent, scale_pow10};

/// Physical dimension of a plan quantity.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Dim {
    Current,
    Voltage,
    Resistance,
    Power,
    Temperature,
    Time,
}

impl Dim {
    pub(super) fn name(self) -> &'static str {
        match self {
            Dim::Current => "a current",
            Dim::Voltage => "a voltage",
            Dim::Resistance => "a resistance",
            Dim::Power => "a power",
            Dim::Temperature => "a temperature",
            Dim::Time => "a duration",
        }
    }
    pub(super) fn example(self) -> &'static str {
        match self {
            Dim::Current => "\"450 mA\" or \"90 % of limit\"",
            Dim::Voltage => "\"12 V\" or \"50 % of vout\"",
            Dim::Resistance => "\"50 mohm\" or \"150 % of r_knee\"",
            Dim::Power => "\"25 W\"",
            Dim::Temperature => "\"85 degC\"",
            Dim::Time => "\"300 ms\", \"2 s\" or \"10 min\"",
        }
    }
}

/// Round to 9 significant digits, removing binary noise such as 4.800000000000001 from
/// computed setpoints (instruments resolve far less).
pub fn tidy(x: f64) -> f64 {
    if x == 0.0 || !x.is_finite() {
        return x;
    }
    let digits = 8 - x.abs().log10().floor() as i32;
    let scale = 10f64.powi(digits.clamp(-300, 300));
    (x * scale).round() / scale
}

/// Parse one quantity string of the plan syntax (see the module docs).
pub fn parse_quantity(text: &str, dim: Dim, t: &DesignTargets) -> Result<f64, String> {
    let s = text.trim();
    let bad = || {
        format!(
            "cannot read '{text}' as {}: write e.g. {}",
            dim.name(),
            dim.example()
        )
    };
    // Relative form: "<pct> % of <basis>", "<pct>% <basis>", or "<basis>".
    let (pct, basis) = match s.split_once('%') {
        Some((num, rest)) => {
            let pct: f64 = num.trim().parse().map_err(|_| bad())?;
            let rest = rest.trim();
            let rest = rest.strip_prefix("of ").unwrap_or(rest).trim();
            (Some(pct), Some(rest))
        }
        None if s.chars().next().is_some_and(|c| c.is_ascii_alphabetic()) => (None, Some(s)),
        None => (None, None),
    };
    if let Some(basis) = basis {
        let (value, bdim) = match basis {
            "vout" => (Some(t.vout_v), Dim::Voltage),
            "vin" => (t.input_voltage_v, Dim::Voltage),
            "limit" => (Some(t.limit_current_a), Dim::Current),
            "short" => (Some(t.short_circuit_current_a), Dim::Current),
            "max_load" => (Some(t.max_load_current_a), Dim::Current),
            "r_knee" => (Some(t.vout_v / t.limit_current_a), Dim::Resistance),
            _ => {
                return Err(format!(
                    "'{basis}' is not a design value: use vout, vin, limit, short, max_load or \
                     r_knee (as in \"90 % of limit\")"
                ))
            }
        };
        if bdim != dim {
            return Err(format!(
                "'{basis}' is {}, but this field needs {}",
                bdim.name(),
                dim.name()
            ));
        }
        let value = value.ok_or_else(|| {
            format!("the design states no '{basis}' value; give an absolute value instead")
        })?;
        if !(value.is_finite() && value > 0.0) {
            return Err(format!(
                "the design's '{basis}' value ({value}) is not usable; give an absolute value"
            ));
        }
        return Ok(pct.unwrap_or(100.0) / 100.0 * value);
    }
    // Absolute form: number, optional space, optional SI prefix, unit.
    let split = s
        .char_indices()
        .find(|(i, c)| {
            !(c.is_ascii_digit()
                || *c == '.'
                || *c == '+'
                || *c == '-'
                || ((*c == 'e' || *c == 'E')
                    && s[i + 1..]
                        .chars()
                        .next()
                        .is_some_and(|n| n.is_ascii_digit() || n == '-' || n == '+')))
        })
        .map(|(i, _)| i)
        .unwrap_or(s.len());
    let number: f64 = s[..split].trim().parse().map_err(|_| bad())?;
    let unit = s[split..].trim();
    let (factor, exp) = unit_scale(unit, dim).ok_or_else(bad)?;
    let value = scale_pow10(number * factor, exp);
    if !value.is_finite() {
        return Err(format!("'{text}' is out of range"));
    }
    Ok(value)
}

/// Scale of a unit of `dim` as (factor, power of ten): `mA` -> (1, -3), `min` -> (60, 0).
fn unit_scale(unit: &str, dim: Dim) -> Option<(f64, i32)> {
    let base: &[&str] = match dim {
        Dim::Current => &["A"],
        Dim::Voltage => &["V"],
        Dim::Resistance => &["ohm", "Ohm", "\u{3a9}"],
        Dim::Power => &["W"],
        Dim::Temperature => &["degC", "\u{b0}C"],
        Dim::Time => &["s", "sec"],
    };
    if base.contains(&unit) {
        return Some((1.0, 0));
    }
    match (dim, unit) {
        (Dim::Time, "min") => return Some((60.0, 0)),
        (Dim::Time, "h") => return Some((3600.0, 0)),
        (Dim::Temperature, _) => return None,
        _ => {}
    }
    // An SI prefix from the one prefix table, then the base unit. A plan takes only the
    // prefixes a bench needs (M, k, m, u or a micro sign; durations m and u before `s`):
    // n, p, G, K and the like are refused as likely typos.
    let mut chars = unit.chars();
    let prefix = chars.next()?;
    let rest = chars.as_str();
    let allowed: &[i32] = match dim {
        Dim::Time if rest == "s" => &[-3, -6],
        Dim::Time => return None,
        _ => &[6, 3, -3, -6],
    };
    if prefix == 'K' || !base.contains(&rest) {
        return None;
    }
    prefix_exponent(prefix)
        .filter(|e| allowed.contains(e))
        .map(|e| (1.0, e))
}
