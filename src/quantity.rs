//! SI quantities: the one table of SI prefixes, engineering formatting for people (583 mA,
//! 1.20 ohm, 408 mW) and parsing of numbers with a prefix suffix (1.2k, 470m, 2.2u or 2.2 with
//! a micro sign; 4u7 is not accepted). Plan, protocol, design and output all use this module; the
//! simulated instruments keep a parser of their own on purpose (they stand for foreign
//! firmware). Pure functions only: no I/O.

/// The SI prefixes this project reads, largest first: (letter, power of ten). Both micro signs
/// (U+00B5 and the Greek U+03BC) read as `u`; [`prefix_exponent`] also takes `K` for `k`.
pub const PREFIXES: [(char, i32); 10] = [
    ('G', 9),
    ('M', 6),
    ('k', 3),
    ('m', -3),
    ('u', -6),
    ('\u{b5}', -6),
    ('\u{3bc}', -6),
    ('n', -9),
    ('p', -12),
    ('f', -15),
];

/// Power of ten of an SI prefix letter (`k` -> 3, `m` -> -3, `u` or a micro sign -> -6), `None`
/// for anything else. `K` is accepted for `k` (a common spelling on instrument displays).
pub fn prefix_exponent(c: char) -> Option<i32> {
    let c = if c == 'K' { 'k' } else { c };
    PREFIXES.iter().find(|(p, _)| *p == c).map(|(_, e)| *e)
}

/// Multiplier of an SI prefix letter (`k` -> 1e3, `m` -> 1e-3).
pub fn prefix_multiplier(c: char) -> Option<f64> {
    prefix_exponent(c).map(|e| scale_pow10(1.0, e))
}

/// Scale `v` by `10^exp`, dividing for negative powers so that `470m` is exactly the double
/// nearest 0.47.
pub fn scale_pow10(v: f64, exp: i32) -> f64 {
    if exp >= 0 {
        v * 10f64.powi(exp)
    } else {
        v / 10f64.powi(-exp)
    }
}

/// Format `value` with three significant digits and an SI prefix, e.g. `583 mA`, `1.20 ohm`.
pub fn eng(value: f64, unit: &str) -> String {
    if !value.is_finite() {
        return format!("{value} {unit}");
    }
    if value == 0.0 {
        return format!("0 {unit}");
    }
    // Written prefixes: ASCII letters only (no micro sign in output).
    const WRITTEN: [(f64, &str); 9] = [
        (1e9, "G"),
        (1e6, "M"),
        (1e3, "k"),
        (1.0, ""),
        (1e-3, "m"),
        (1e-6, "u"),
        (1e-9, "n"),
        (1e-12, "p"),
        (1e-15, "f"),
    ];
    let a = value.abs();
    // Units that read better without prefixes.
    if unit == "degC" || unit == "%" || unit == "degC/W" {
        return format!("{} {unit}", sig3(value));
    }
    let mut chosen = (1.0, "");
    for (scale, p) in WRITTEN {
        if a >= scale * 0.9995 {
            chosen = (scale, p);
            break;
        }
        chosen = (scale, p);
    }
    let scaled = value / chosen.0;
    format!("{} {}{}", sig3(scaled), chosen.1, unit)
}

/// Three significant digits, keeping trailing zeros (1.20, 12.0, 583).
pub fn sig3(x: f64) -> String {
    if x == 0.0 || !x.is_finite() {
        return format!("{x}");
    }
    let mag = x.abs().log10().floor() as i32;
    let decimals = (2 - mag).clamp(0, 12) as usize;
    let s = format!("{:.*}", decimals, x);
    // Rounding may have carried into a new digit (999.6 -> 1000): re-format.
    let rounded: f64 = s.parse().unwrap_or(x);
    if rounded == 0.0 {
        // Below the 12 decimals shown (e.g. 1e-15): log10 would be -inf.
        return s;
    }
    let mag2 = rounded.abs().log10().floor() as i32;
    if mag2 != mag {
        let decimals = (2 - mag2).clamp(0, 12) as usize;
        return format!("{:.*}", decimals, rounded);
    }
    s
}

/// Parse a number that may carry an SI prefix suffix: `1.2k`, `470m`, `2.2u`, `4.7M`, `3e-3`.
pub fn parse_si(text: &str) -> Option<f64> {
    let t = text.trim();
    if t.is_empty() {
        return None;
    }
    let last = t.chars().last()?;
    // Femto is not read as a suffix here: a trailing `f` is more often a typo than 1e-15.
    let exp = match prefix_exponent(last) {
        Some(-15) | None => 0,
        Some(e) => e,
    };
    let num = if exp == 0 {
        t
    } else {
        &t[..t.len() - last.len_utf8()]
    };
    let v: f64 = num.trim().parse().ok()?;
    let scaled = scale_pow10(v, exp);
    scaled.is_finite().then_some(scaled)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn formats_like_a_datasheet() {
        assert_eq!(eng(0.583, "A"), "583 mA");
        assert_eq!(eng(1.2, "ohm"), "1.20 ohm");
        assert_eq!(eng(0.408, "W"), "408 mW");
        assert_eq!(eng(12.0, "V"), "12.0 V");
        assert_eq!(eng(4700.0, "ohm"), "4.70 kohm");
        assert_eq!(eng(-0.0123, "V"), "-12.3 mV");
        assert_eq!(eng(0.9996, "A"), "1.00 A");
        assert_eq!(eng(0.0, "W"), "0 W");
        // Regression: a value far below the smallest prefix must not overflow.
        assert_eq!(eng(1e-30, "A"), "0.000000000000 fA");
    }

    #[test]
    fn prefix_table_is_the_si_one() {
        // SI prefixes: BIPM, The International System of Units (SI Brochure, 9th edition).
        assert_eq!(prefix_exponent('G'), Some(9));
        assert_eq!(prefix_exponent('M'), Some(6));
        assert_eq!(prefix_exponent('k'), Some(3));
        assert_eq!(prefix_exponent('K'), Some(3));
        assert_eq!(prefix_exponent('m'), Some(-3));
        assert_eq!(prefix_exponent('u'), Some(-6));
        assert_eq!(prefix_exponent('\u{b5}'), Some(-6));
        assert_eq!(prefix_exponent('\u{3bc}'), Some(-6));
        assert_eq!(prefix_exponent('n'), Some(-9));
        assert_eq!(prefix_exponent('p'), Some(-12));
        assert_eq!(prefix_exponent('x'), None);
        assert_eq!(scale_pow10(470.0, -3), 0.47);
    }

    #[test]
    fn parses_prefixes() {
        assert_eq!(parse_si("1.2k"), Some(1200.0));
        assert_eq!(parse_si("470m"), Some(0.47));
        assert!((parse_si("2.2u").unwrap() - 2.2e-6).abs() < 1e-18);
        assert_eq!(parse_si("3e-3"), Some(0.003));
        assert_eq!(parse_si("abc"), None);
        // Both micro signs read as micro (one prefix table everywhere).
        assert!((parse_si("2.2\u{b5}").unwrap() - 2.2e-6).abs() < 1e-18);
        assert!((parse_si("2.2\u{3bc}").unwrap() - 2.2e-6).abs() < 1e-18);
        assert_eq!(parse_si("4.7K"), Some(4700.0));
        assert_eq!(parse_si(""), None);
    }
}
