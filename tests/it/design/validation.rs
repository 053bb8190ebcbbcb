//! Every number of the teaching-lab sample replaced, one at a time, by each of nan, +-inf,
//! +-1e308, 0, -1 and 1e-300: the design is either refused with file:line:column naming the
//! number at fault, or accepted with an expectation whose every number is finite and of a sane
//! size (no NaN, no 300-digit bands). IEEE 754 gives the special values; the substitution set
//! is the one the design-model issue lists.

use regulus::design::{expect_with, Design};

const SUBSTITUTES: [&str; 8] = ["nan", "inf", "-inf", "1e308", "-1e308", "0", "-1", "1e-300"];

/// Byte spans of every number in a TOML document, with its dotted key path.
fn numbers(text: &str) -> Vec<(String, std::ops::Range<usize>)> {
    fn walk_value(
        v: &toml_edit::Value,
        path: String,
        out: &mut Vec<(String, std::ops::Range<usize>)>,
    ) {
        match v {
            toml_edit::Value::Float(_) | toml_edit::Value::Integer(_) => {
                out.push((path, v.span().expect("parsed values have spans")))
            }
            toml_edit::Value::Array(a) => {
                for (i, v) in a.iter().enumerate() {
                    walk_value(v, format!("{path}[{i}]"), out);
                }
            }
            toml_edit::Value::InlineTable(t) => {
                for (k, v) in t.iter() {
                    walk_value(v, format!("{path}.{k}"), out);
                }
            }
            _ => {}
        }
    }
    fn walk_table(
        t: &toml_edit::Table,
        path: &str,
        out: &mut Vec<(String, std::ops::Range<usize>)>,
    ) {
        for (k, item) in t.iter() {
            let p = if path.is_empty() {
                k.to_string()
            } else {
                format!("{path}.{k}")
            };
            match item {
                toml_edit::Item::Value(v) => walk_value(v, p, out),
                toml_edit::Item::Table(t) => walk_table(t, &p, out),
                _ => {}
            }
        }
    }
    let doc = toml_edit::ImDocument::parse(text.to_string()).expect("sample parses");
    let mut out = Vec::new();
    walk_table(doc.as_table(), "", &mut out);
    out
}

/// Paths of the nulls and non-finite numbers in a JSON value, and the largest magnitude.
fn scan(v: &serde_json::Value, path: &str, nulls: &mut Vec<String>, max_abs: &mut f64) {
    match v {
        serde_json::Value::Null => nulls.push(path.to_string()),
        serde_json::Value::Number(n) => {
            let x = n.as_f64().unwrap_or(f64::NAN);
            if !x.is_finite() {
                nulls.push(path.to_string());
            } else {
                *max_abs = max_abs.max(x.abs());
            }
        }
        serde_json::Value::Array(a) => {
            for (i, x) in a.iter().enumerate() {
                scan(x, &format!("{path}[{i}]"), nulls, max_abs);
            }
        }
        serde_json::Value::Object(m) => {
            for (k, x) in m {
                scan(x, &format!("{path}.{k}"), nulls, max_abs);
            }
        }
        _ => {}
    }
}

fn json_of(d: &Design) -> serde_json::Value {
    serde_json::to_value(expect_with(d, 400, 1)).expect("expectation serialises")
}

fn line_of(text: &str, offset: usize) -> usize {
    text[..offset].matches('\n').count() + 1
}

#[test]
fn every_number_of_the_teaching_sample_is_validated() {
    let text = std::fs::read_to_string("samples/teaching-lab-0-20v.toml").unwrap();
    let base = Design::parse(&text, "lab.toml").unwrap();
    let mut base_nulls = Vec::new();
    let mut base_max = 0.0;
    scan(&json_of(&base), "", &mut base_nulls, &mut base_max);
    let found = numbers(&text);
    assert!(found.len() >= 38, "only {} numbers found", found.len());
    let (mut refused, mut accepted) = (0, 0);
    for (key, span) in &found {
        let line = line_of(&text, span.start);
        let leaf = key.rsplit('.').next().unwrap().split('[').next().unwrap();
        for sub in SUBSTITUTES {
            let mut t = text.clone();
            t.replace_range(span.clone(), sub);
            match Design::parse(&t, "lab.toml") {
                Err(e) => {
                    refused += 1;
                    let msg = e.to_string();
                    let located = msg
                        .strip_prefix("lab.toml:")
                        .and_then(|r| r.split(':').next())
                        .and_then(|l| l.parse::<usize>().ok());
                    let Some(at_line) = located else {
                        panic!("{key} = {sub}: refused without file:line:column: {msg}");
                    };
                    assert!(
                        at_line == line || msg.contains(leaf),
                        "{key} = {sub}: refused at line {at_line}, not at the number's line {line} and without naming `{leaf}`: {msg}"
                    );
                    assert!(!msg.contains("panicked"), "{key} = {sub}: {msg}");
                }
                Ok(d) => {
                    accepted += 1;
                    let mut nulls = Vec::new();
                    let mut max_abs = 0.0f64;
                    scan(&json_of(&d), "", &mut nulls, &mut max_abs);
                    // A longest short dwell of null means "no limit" (the short settles below
                    // T_j max): a meaningful value, not a non-finite number.
                    let new: Vec<_> = nulls
                        .iter()
                        .filter(|n| !base_nulls.contains(n) && !n.ends_with(".longest_s"))
                        .collect();
                    assert!(
                        new.is_empty(),
                        "{key} = {sub}: accepted, but the expectation has non-finite values at {new:?}"
                    );
                    assert!(
                        max_abs < 1e7,
                        "{key} = {sub}: accepted, but a value of {max_abs:e} appears in the expectation"
                    );
                }
            }
        }
    }
    // Every number accepts some of the substitutes at most; the absurd ones never pass.
    assert_eq!(refused + accepted, found.len() * SUBSTITUTES.len());
    assert!(refused > accepted, "refused {refused}, accepted {accepted}");
}

#[test]
fn absurd_values_are_refused_whatever_the_key() {
    // nan, +-inf and +-1e308 have no physical meaning for any number of a design file.
    let text = std::fs::read_to_string("samples/teaching-lab-0-20v.toml").unwrap();
    for (key, span) in numbers(&text) {
        for sub in ["nan", "inf", "-inf", "1e308", "-1e308"] {
            let mut t = text.clone();
            t.replace_range(span.clone(), sub);
            assert!(
                Design::parse(&t, "lab.toml").is_err(),
                "{key} = {sub} was accepted"
            );
        }
    }
}

#[test]
fn minus_infinity_ambient_is_refused_with_what_to_write() {
    let text = std::fs::read_to_string("samples/teaching-lab-0-20v.toml")
        .unwrap()
        .replace("ambient_min_c = 15", "ambient_min_c = -inf");
    let line = text
        .lines()
        .position(|l| l.starts_with("ambient_min_c"))
        .unwrap()
        + 1;
    let msg = Design::parse(&text, "lab.toml").unwrap_err().to_string();
    assert!(msg.starts_with(&format!("lab.toml:{line}:")), "{msg}");
    assert!(
        msg.contains("write, for example, `ambient_min_c = "),
        "{msg}"
    );
}
