//! Locating problems in TOML configuration files: turn a byte offset or a key path into a
//! line and column, so every configuration error can say `file:line:column: what to fix`.
//! [`Located`] is the one located-error type of every configuration file (design, bench, plan).
//! Pure text handling; callers read the files.

use std::fmt;

/// A configuration problem at a place in a file.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub struct Located {
    pub file: String,
    /// 1-based line and column, when the place is known.
    pub line: Option<usize>,
    pub column: Option<usize>,
    pub message: String,
}

impl fmt::Display for Located {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match (self.line, self.column) {
            (Some(l), Some(c)) => write!(f, "{}:{}:{}: {}", self.file, l, c, self.message),
            _ => write!(f, "{}: {}", self.file, self.message),
        }
    }
}

/// 1-based line and column (in characters) of a byte offset; an offset inside a multi-byte
/// character counts as that character.
pub fn line_col(src: &str, offset: usize) -> (usize, usize) {
    let mut offset = offset.min(src.len());
    while !src.is_char_boundary(offset) {
        offset -= 1;
    }
    let before = &src[..offset];
    let line = before.matches('\n').count() + 1;
    let line_start = before.rfind('\n').map(|p| p + 1).unwrap_or(0);
    let column = before[line_start..].chars().count() + 1;
    (line, column)
}

/// Byte offset of the value (or, failing that, the key) at a dotted key path such as
/// `["limit", "sense", "ohms"]`. Falls back to the deepest table that exists.
pub fn locate_path(src: &str, path: &[&str]) -> Option<usize> {
    let doc = toml_edit::ImDocument::parse(src).ok()?;
    let mut table: &dyn toml_edit::TableLike = doc.as_table();
    let mut best: Option<usize> = None;
    for (i, key) in path.iter().enumerate() {
        let Some((k, item)) = table.get_key_value(key) else {
            return best;
        };
        let last = i + 1 == path.len();
        best = item.span().or_else(|| k.span()).map(|s| s.start).or(best);
        if last {
            return best;
        }
        match item.as_table_like() {
            Some(t) => table = t,
            None => return best,
        }
    }
    best
}

/// Build a located error for a key path (line and column when the path can be found).
pub fn at_path(file: &str, src: &str, path: &[&str], message: impl Into<String>) -> Located {
    let (line, column) = match locate_path(src, path) {
        Some(off) => {
            let (l, c) = line_col(src, off);
            (Some(l), Some(c))
        }
        None => (None, None),
    };
    Located {
        file: file.to_string(),
        line,
        column,
        message: message.into(),
    }
}

/// Build a located error at a byte span of the file text (line and column of its start), or
/// for the whole file when the span is unknown.
pub fn at_span(
    file: &str,
    src: &str,
    span: Option<std::ops::Range<usize>>,
    message: impl Into<String>,
) -> Located {
    let (line, column) = match span {
        Some(span) => {
            let (l, c) = line_col(src, span.start);
            (Some(l), Some(c))
        }
        None => (None, None),
    };
    Located {
        file: file.to_string(),
        line,
        column,
        message: message.into(),
    }
}

/// Convert a toml deserialisation error into a located error.
pub fn from_toml(file: &str, src: &str, err: &toml::de::Error) -> Located {
    at_span(file, src, err.span(), err.message().trim())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn finds_nested_and_inline_keys() {
        let src = "[a]\nx = 1\n[b]\nsense = { ohms = 0.5, tol = 1 }\n";
        let off = locate_path(src, &["b", "sense", "tol"]).unwrap();
        assert_eq!(line_col(src, off), (4, 29));
        let off = locate_path(src, &["a", "x"]).unwrap();
        assert_eq!(line_col(src, off), (2, 5));
        // Missing key falls back to the deepest existing place.
        let off = locate_path(src, &["a", "missing"]).unwrap();
        assert_eq!(line_col(src, off).0, 1, "points into table [a]");
    }

    #[test]
    fn formats_file_line_column() {
        let e = at_path("d.toml", "[a]\nx = 1\n", &["a", "x"], "x must be positive");
        assert_eq!(e.to_string(), "d.toml:2:5: x must be positive");
    }
}
