//! Engineering-unit formatting for people (583 mA, 1.20 ohm, 408 mW) and parsing of numbers
//! with SI prefixes (1.2k, 470m, 4u7 is not accepted). Pure functions only.

/// Format `value` with three significant digits and an SI prefix, e.g. `583 mA`, `1.20 ohm`.
pub fn eng(value: f64, unit: &str) -> String {
    if !value.is_finite() {
        return format!("{value} {unit}");
    }
    if value == 0.0 {
        return format!("0 {unit}");
    }
    const PREFIXES: [(f64, &str); 9] = [
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
    for (scale, p) in PREFIXES {
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
    // Power of ten of the prefix; scale by division for sub-unit prefixes so that 470m is
    // exactly the double nearest 0.47.
    let exp: i32 = match last {
        'G' => 9,
        'M' => 6,
        'k' | 'K' => 3,
        'm' => -3,
        'u' | '\u{b5}' => -6,
        'n' => -9,
        'p' => -12,
        _ => 0,
    };
    let num = if exp == 0 {
        t
    } else {
        &t[..t.len() - last.len_utf8()]
    };
    let v: f64 = num.trim().parse().ok()?;
    let scaled = if exp >= 0 {
        v * 10f64.powi(exp)
    } else {
        v / 10f64.powi(-exp)
    };
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
    fn parses_prefixes() {
        assert_eq!(parse_si("1.2k"), Some(1200.0));
        assert_eq!(parse_si("470m"), Some(0.47));
        assert!((parse_si("2.2u").unwrap() - 2.2e-6).abs() < 1e-18);
        assert_eq!(parse_si("3e-3"), Some(0.003));
        assert_eq!(parse_si("abc"), None);
        assert_eq!(parse_si(""), None);
    }
}
