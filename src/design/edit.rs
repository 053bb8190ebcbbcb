//! Writing a changed design back into its file's text with the file's comments and layout
//! kept: only the values that differ between the old and the new design are replaced (a
//! replaced value keeps its trailing comment), keys the new design drops are removed, and new
//! keys are added where their table is. Pure: text and designs in, text out.

use super::file::Design;
use toml_edit::{DocumentMut, Item, Value};

/// Why a design could not be written back.
#[derive(Debug, thiserror::Error)]
pub enum EditError {
    #[error("the base design text is not valid TOML: {0}")]
    Parse(#[from] toml_edit::TomlError),
    #[error("the design cannot be written as TOML: {0}")]
    Serialise(#[from] toml::ser::Error),
}

fn to_table(d: &Design) -> Result<toml::Table, EditError> {
    let text = toml::to_string(d)?;
    Ok(toml::from_str(&text).expect("a serialised design reads back"))
}

fn edit_value(v: &toml::Value) -> Value {
    match v {
        toml::Value::String(s) => Value::from(s.as_str()),
        toml::Value::Integer(i) => Value::from(*i),
        toml::Value::Float(f) => Value::from(*f),
        toml::Value::Boolean(b) => Value::from(*b),
        toml::Value::Datetime(d) => Value::from(d.to_string().as_str()),
        toml::Value::Array(a) => Value::Array(a.iter().map(edit_value).collect()),
        toml::Value::Table(t) => {
            let mut it = toml_edit::InlineTable::new();
            for (k, v) in t {
                it.insert(k, edit_value(v));
            }
            Value::InlineTable(it)
        }
    }
}

/// Replace the value at `item`, keeping the old value's decoration (its trailing comment).
fn replace(item: &mut Item, new: &toml::Value) {
    let mut v = edit_value(new);
    if let Some(old) = item.as_value() {
        *v.decor_mut() = old.decor().clone();
    }
    *item = Item::Value(v);
}

fn merge(
    item: &mut dyn toml_edit::TableLike,
    old: Option<&toml::Table>,
    new: &toml::Table,
    is_root: bool,
) {
    // Keys the new design no longer has.
    if let Some(old) = old {
        for k in old.keys() {
            if !new.contains_key(k) {
                item.remove(k);
            }
        }
    }
    for (k, nv) in new {
        let ov = old.and_then(|o| o.get(k));
        if ov == Some(nv) {
            continue;
        }
        match (item.get_mut(k), nv) {
            (Some(child), toml::Value::Table(nt)) if child.is_table_like() => {
                let ot = ov.and_then(|v| v.as_table());
                if let Some(t) = child.as_table_like_mut() {
                    merge(t, ot, nt, false);
                }
            }
            (Some(child), _) => replace(child, nv),
            (None, toml::Value::Table(nt)) if is_root => {
                let mut t = toml_edit::Table::new();
                merge(&mut t, None, nt, false);
                item.insert(k, Item::Table(t));
            }
            (None, _) => {
                item.insert(k, Item::Value(edit_value(nv)));
            }
        }
    }
}

/// The text of `base_text` (which describes `old`) changed so that it describes `new`.
pub fn rewrite(base_text: &str, old: &Design, new: &Design) -> Result<String, EditError> {
    let mut doc: DocumentMut = base_text.parse()?;
    let (o, n) = (to_table(old)?, to_table(new)?);
    merge(doc.as_table_mut(), Some(&o), &n, true);
    Ok(doc.to_string())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn comments_and_untouched_values_survive() {
        let text = include_str!("../../samples/teaching-lab-0-20v.toml");
        let old = Design::parse(text, "lab").unwrap();
        let mut new = old.clone();
        new.limit.sense.ohms = 0.33;
        new.aux.as_mut().unwrap().collector_ohms = Some(220.0);
        new.aux.as_mut().unwrap().collector_share = 0.0;
        let out = rewrite(text, &old, &new).unwrap();
        // Every comment line of the sample is still there, and the inline comment too.
        for l in text.lines().filter(|l| l.trim_start().starts_with('#')) {
            assert!(out.contains(l), "lost: {l}");
        }
        assert!(out.contains("# front-panel potentiometer sets 0-100 % of the reference"));
        let back = Design::parse(&out, "out").unwrap();
        assert_eq!(back, new);
        // Only the changed lines differ.
        let changed = out
            .lines()
            .filter(|l| !text.lines().any(|t| t == *l))
            .count();
        assert!(changed <= 3, "{changed} lines changed:\n{out}");
    }
}
