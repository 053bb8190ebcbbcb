//! Reading one plan field into a value of the right kind (a quantity of a dimension, a
//! positive or non-negative one, a duration, a count, a percentage), each failure located at
//! the field. Pure.

use super::error::PlanError;
use super::quantity::{parse_quantity, tidy, Dim};
use super::raw::SV;
use super::targets::DesignTargets;
use crate::config;
use std::ops::Range;
use std::time::Duration;

/// What every check needs: the plan text and file name (to locate errors) and the design
/// targets (to resolve relative values).
pub(super) struct Cx<'a> {
    text: &'a str,
    file: &'a str,
    pub(super) targets: &'a DesignTargets,
}

impl<'a> Cx<'a> {
    pub(super) fn new(text: &'a str, file: &'a str, targets: &'a DesignTargets) -> Cx<'a> {
        Cx {
            text,
            file,
            targets,
        }
    }

    /// A problem at a span of the plan text.
    pub(super) fn at(&self, span: Range<usize>, message: impl Into<String>) -> PlanError {
        PlanError::Invalid(config::at_span(self.file, self.text, Some(span), message))
    }

    /// A problem of the plan as a whole (no single place to point at).
    pub(super) fn general(&self, message: impl Into<String>) -> PlanError {
        PlanError::Invalid(config::at_span(self.file, self.text, None, message))
    }

    pub(super) fn quantity(&self, v: &SV, dim: Dim, field: &str) -> Result<f64, PlanError> {
        let value = match v.get_ref() {
            toml::Value::Integer(i) => *i as f64,
            toml::Value::Float(f) => *f,
            toml::Value::String(s) => parse_quantity(s, dim, self.targets)
                .map_err(|m| self.at(v.span(), format!("`{field}`: {m}")))?,
            other => {
                return Err(self.at(
                    v.span(),
                    format!(
                        "`{field}` must be {}, e.g. {}; found a {}",
                        dim.name(),
                        dim.example(),
                        other.type_str()
                    ),
                ))
            }
        };
        if !value.is_finite() {
            return Err(self.at(v.span(), format!("`{field}` must be a finite number")));
        }
        Ok(tidy(value))
    }

    pub(super) fn positive(&self, v: &SV, dim: Dim, field: &str) -> Result<f64, PlanError> {
        let x = self.quantity(v, dim, field)?;
        if x <= 0.0 {
            return Err(self.at(v.span(), format!("`{field}` must be greater than zero")));
        }
        Ok(x)
    }

    pub(super) fn non_negative(&self, v: &SV, dim: Dim, field: &str) -> Result<f64, PlanError> {
        let x = self.quantity(v, dim, field)?;
        if x < 0.0 {
            return Err(self.at(v.span(), format!("`{field}` must not be negative")));
        }
        Ok(x)
    }

    pub(super) fn duration(&self, v: &SV, field: &str) -> Result<Duration, PlanError> {
        let s = self.non_negative(v, Dim::Time, field)?;
        if s > 30.0 * 86_400.0 {
            return Err(self.at(v.span(), format!("`{field}` is longer than 30 days")));
        }
        Ok(Duration::from_secs_f64(s))
    }

    pub(super) fn count(&self, v: &SV, field: &str, min: i64, max: i64) -> Result<u32, PlanError> {
        match v.get_ref() {
            toml::Value::Integer(i) if (min..=max).contains(i) => Ok(*i as u32),
            toml::Value::Integer(_) => Err(self.at(
                v.span(),
                format!("`{field}` must be between {min} and {max}"),
            )),
            other => Err(self.at(
                v.span(),
                format!(
                    "`{field}` must be a whole number, found a {}",
                    other.type_str()
                ),
            )),
        }
    }

    /// A percentage: `"1 %"`, or a bare number meaning percent. Returned as a fraction.
    pub(super) fn percent(&self, v: &SV, field: &str, lo: f64, hi: f64) -> Result<f64, PlanError> {
        let pct = match v.get_ref() {
            toml::Value::Integer(i) => Some(*i as f64),
            toml::Value::Float(f) => Some(*f),
            toml::Value::String(s) => s
                .trim()
                .strip_suffix('%')
                .and_then(|n| n.trim().parse::<f64>().ok()),
            _ => None,
        };
        match pct {
            Some(p) if p.is_finite() && p >= lo && p <= hi => Ok(p / 100.0),
            Some(_) => Err(self.at(
                v.span(),
                format!("`{field}` must be between {lo} % and {hi} %"),
            )),
            None => Err(self.at(
                v.span(),
                format!("`{field}` must be a percentage such as \"1 %\""),
            )),
        }
    }
}
