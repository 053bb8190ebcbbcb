//! Where a bench-file rule points: the file being checked and the instrument whose table is
//! checked, so every message reads `file:line:column: instrument '<name>': ...`. Pure.

use crate::bench::BenchError;
use crate::config::at_span;
use std::ops::Range;

/// The bench file being checked: where messages point.
#[derive(Clone, Copy)]
pub(super) struct FileCtx<'a> {
    pub file: &'a str,
    pub src: &'a str,
}

impl FileCtx<'_> {
    /// A configuration error at a span, or at the start of the file when the place is unknown.
    pub fn at(&self, span: Option<Range<usize>>, message: impl Into<String>) -> BenchError {
        BenchError::Config(at_span(
            self.file,
            self.src,
            Some(span.unwrap_or(0..0)),
            message,
        ))
    }
}

/// One instrument being checked: messages start with its name.
pub(super) struct Ctx<'a> {
    pub file: FileCtx<'a>,
    pub name: &'a str,
}

impl Ctx<'_> {
    pub fn err(&self, span: Option<Range<usize>>, message: impl std::fmt::Display) -> BenchError {
        self.file
            .at(span, format!("instrument '{}': {message}", self.name))
    }
}

pub(super) type Checked<T> = Result<T, BenchError>;
