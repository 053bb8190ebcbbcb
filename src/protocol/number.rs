//! Number forms as instruments write them: plain, SCPI NR1/NR2/NR3 (IEEE 488.2), an optional
//! SI prefix suffix (`12.5m`), unit texts with a prefix (`mA`, `kohm`), and SCPI's overrange
//! value. The SI prefixes are the ones of [`crate::quantity`] (one table). Pure functions.

use crate::quantity::{prefix_exponent, scale_pow10};

/// SCPI's overrange value (IEEE 488.2 / SCPI "9.9E37"); anything this large or larger is an
/// overrange, never a number. SCPI also uses 9.91E37 for "not a number": reported the same way.
pub const SCPI_OVERRANGE: f64 = 9.9e37;

/// SI prefix multiplier for a suffix character (engineering notation on a meter's display),
/// from the one prefix table of [`crate::quantity`]. Femto is not read here: a trailing `f` on
/// an instrument's reply is not a femto value.
pub fn si_prefix(c: char) -> Option<f64> {
    suffix_exponent(c).map(|e| scale_pow10(1.0, e))
}

/// Power of ten of a suffix character (G down to p; `K` reads as `k`).
fn suffix_exponent(c: char) -> Option<i32> {
    prefix_exponent(c).filter(|e| *e != -15)
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
    let exp = if rest.is_empty() {
        0
    } else {
        let mut cs = rest.chars();
        let c = cs.next()?;
        if cs.next().is_some() {
            return None;
        }
        suffix_exponent(c)?
    };
    let v: f64 = num.parse().ok()?;
    // Multiply by the prefix's value (as instruments' numbers always were read), so a reading
    // is the same double it was: `470m` is 470 * 0.001.
    let v = if exp == 0 {
        v
    } else {
        v * scale_pow10(1.0, exp)
    };
    v.is_finite().then_some(v)
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

#[cfg(test)]
mod tests {
    use super::*;

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
        // A suffix multiplies by the prefix's value, bit for bit as readings always were.
        assert_eq!(parse_number("470m"), Some(470.0 * 1e-3));
        assert_eq!(parse_number("2.2u"), Some(2.2 * 1e-6));
        assert_eq!(parse_number("4.7k"), Some(4700.0));
        assert_eq!(parse_number("2u"), Some(2e-6));
        assert_eq!(parse_number("2\u{b5}"), Some(2e-6));
        assert_eq!(parse_number("1.5M"), Some(1.5e6));
        assert_eq!(parse_number("3mm"), None);
        assert_eq!(parse_number("3x"), None);
        // Both micro signs, as in the one prefix table (crate::quantity).
        assert_eq!(parse_number("2\u{3bc}"), Some(2e-6));
        // Femto is not an instrument reply suffix: a trailing f is refused.
        assert_eq!(parse_number("3f"), None);
        assert_eq!(si_prefix('f'), None);
        assert_eq!(si_prefix('K'), Some(1e3));
    }
}
