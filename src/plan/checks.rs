//! The plan's rules, one small named function each. `expand` chains them (each returns the
//! first problem it finds, located at the value to fix) while it builds the checked types;
//! a rule never builds anything itself. Pure.

use super::error::PlanError;
use super::fields::Cx;
use super::raw::{allowed_fields, RawStep, KINDS};
use super::steps::Interlocks;
use crate::record::StepKind;
use std::ops::Range;
use std::time::Duration;
use toml::Spanned;

/// Most points one sweep or soak may take.
pub(super) const MAX_SWEEP_POINTS: usize = 10_000;

/// The plan name becomes part of the record folder name.
pub(super) fn name_is_a_folder_component(
    cx: &Cx<'_>,
    name: &Spanned<String>,
) -> Result<String, PlanError> {
    let trimmed = name.get_ref().trim().to_string();
    if trimmed.is_empty()
        || trimmed.starts_with('.')
        || trimmed.len() > 100
        || !trimmed
            .chars()
            .all(|c| c.is_ascii_alphanumeric() || c == '-' || c == '_' || c == '.')
    {
        return Err(cx.at(
            name.span(),
            "`name` must be 1-100 letters, digits, '-', '_' and '.', not starting with '.' \
             (it becomes part of the record folder name)",
        ));
    }
    Ok(trimmed)
}

/// A plan runs at least one step.
pub(super) fn has_steps<T>(cx: &Cx<'_>, name: &str, steps: &[T]) -> Result<(), PlanError> {
    if steps.is_empty() {
        return Err(cx.general(format!(
            "plan '{name}' has no steps: add at least one [[step]] table with a `kind` \
             ({KINDS})"
        )));
    }
    Ok(())
}

/// The interlock limits must be usable numbers (the defaults derive from the design).
pub(super) fn interlocks_are_usable(cx: &Cx<'_>, il: &Interlocks) -> Result<(), PlanError> {
    let usable = |x: f64| x.is_finite() && x > 0.0;
    if !usable(il.max_output_voltage_v) || !usable(il.max_load_power_w) {
        return Err(cx.general(
            "the design's output voltage and currents must be positive to derive \
             the default interlocks; set [interlocks] explicitly",
        ));
    }
    Ok(())
}

/// A step's `kind` is one of the known kinds.
pub(super) fn kind_is_known(cx: &Cx<'_>, kind: &Spanned<String>) -> Result<StepKind, PlanError> {
    StepKind::parse(kind.get_ref()).ok_or_else(|| {
        cx.at(
            kind.span(),
            format!("unknown step kind '{}': use one of {KINDS}", kind.get_ref()),
        )
    })
}

/// Every field present in a step applies to its kind.
pub(super) fn fields_apply_to_kind(
    cx: &Cx<'_>,
    s: &RawStep,
    kind: StepKind,
) -> Result<(), PlanError> {
    let allowed = allowed_fields(kind);
    for (field, span) in s.present() {
        if !allowed.contains(&field) {
            return Err(cx.at(
                span,
                format!(
                    "`{field}` does not apply to a {} step (it takes: {}, label, settle, \
                     samples)",
                    kind.as_str(),
                    allowed.join(", ")
                ),
            ));
        }
    }
    Ok(())
}

/// Every value of a list (CR resistances, source voltages) is above zero.
pub(super) fn all_above_zero(
    cx: &Cx<'_>,
    values: &[f64],
    span: Range<usize>,
    message: &str,
) -> Result<(), PlanError> {
    if values.iter().any(|v| *v <= 0.0) {
        return Err(cx.at(span, message));
    }
    Ok(())
}

/// A reading interval is above zero and no longer than the time it divides (`within` names
/// that field: `duration` or `dwell`).
pub(super) fn interval_fits(
    cx: &Cx<'_>,
    interval: Duration,
    total: Duration,
    within: &str,
    span: Range<usize>,
) -> Result<(), PlanError> {
    if interval.is_zero() || interval > total {
        return Err(cx.at(
            span,
            format!("`interval` must be above zero and no longer than `{within}`"),
        ));
    }
    Ok(())
}

/// A soak takes at most [`MAX_SWEEP_POINTS`] readings.
pub(super) fn soak_readings_within_limit(
    cx: &Cx<'_>,
    duration: Duration,
    interval: Duration,
    span: Range<usize>,
) -> Result<(), PlanError> {
    let readings = duration.as_secs_f64() / interval.as_secs_f64();
    if readings + 1.0 > MAX_SWEEP_POINTS as f64 {
        return Err(cx.at(
            span,
            format!(
                "this interval gives {readings:.0} readings; the limit is {MAX_SWEEP_POINTS}: lengthen the interval"
            ),
        ));
    }
    Ok(())
}

/// A step size gives at most [`MAX_SWEEP_POINTS`] points (`steps` is the number of steps).
pub(super) fn sweep_points_within_limit(
    cx: &Cx<'_>,
    steps: f64,
    span: Range<usize>,
) -> Result<(), PlanError> {
    if steps + 1.0 > MAX_SWEEP_POINTS as f64 {
        return Err(cx.at(
            span,
            format!(
                "this step size gives {} points; the limit is {MAX_SWEEP_POINTS}",
                steps + 1.0
            ),
        ));
    }
    Ok(())
}

/// A short lasts more than zero and at most the interlock's `max_short_dwell`.
pub(super) fn dwell_within_interlock(
    cx: &Cx<'_>,
    dwell: Duration,
    il: &Interlocks,
    span: Range<usize>,
) -> Result<(), PlanError> {
    if dwell.is_zero() || dwell > il.max_short_dwell {
        return Err(cx.at(
            span,
            format!(
                "`dwell` must be above zero and at most the interlock max_short_dwell \
                 ({} s)",
                il.max_short_dwell.as_secs_f64()
            ),
        ));
    }
    Ok(())
}

/// The knee search needs `reference < expected < upper <= ceiling`.
pub(super) fn knee_bounds_are_ordered(
    cx: &Cx<'_>,
    [reference, expected, upper, ceiling]: [f64; 4],
    span: Range<usize>,
) -> Result<(), PlanError> {
    if !(reference < expected && expected < upper && upper <= ceiling) {
        return Err(cx.at(
            span,
            format!(
                "knee search needs reference < expected < upper <= ceiling; got {} < {} < \
                 {} <= {} A",
                reference, expected, upper, ceiling
            ),
        ));
    }
    Ok(())
}
