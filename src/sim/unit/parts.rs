//! One wrong part built into a simulated unit, for every element a design names that the
//! other unit faults do not cover: a feedback resistor of another value or the pair swapped,
//! a foldback divider element of another value, the other pass stage. Pure: applied to the
//! unit's element values (and its copy of the design) before it is built.

use crate::design::{Clamp, Design, Params, Stage};
use serde::Serialize;

/// A part that differs from the design.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub enum PartFault {
    /// Upper feedback resistor of this value (ohms).
    FeedbackTop(f64),
    /// Lower feedback resistor of this value (ohms).
    FeedbackBottom(f64),
    /// The two feedback resistors fitted in each other's place.
    FeedbackSwapped,
    /// Upper foldback divider resistor of this value (ohms).
    FoldTop(f64),
    /// Lower foldback divider resistor of this value (ohms).
    FoldBottom(f64),
    /// The other pass stage fitted (a single transistor for a Darlington or back).
    OtherPassStage,
}

impl PartFault {
    /// Parse `fb_top=27000`, `fb_bottom=4700`, `fb_swap`, `fold_top=1500`,
    /// `fold_bottom=330`, `pass_stage`; `None` when the key is none of these.
    pub fn parse(spec: &str) -> Option<Result<PartFault, String>> {
        let (key, value) = match spec.split_once('=') {
            Some((k, v)) => (k.trim(), Some(v.trim())),
            None => (spec.trim(), None),
        };
        let ohms = |v: Option<&str>| -> Result<f64, String> {
            v.and_then(|v| v.parse::<f64>().ok())
                .filter(|x| x.is_finite() && *x > 0.0)
                .ok_or_else(|| {
                    format!("fault '{spec}': give the fitted value in ohms, e.g. {key}=4700")
                })
        };
        Some(match key {
            "fb_top" => ohms(value).map(PartFault::FeedbackTop),
            "fb_bottom" => ohms(value).map(PartFault::FeedbackBottom),
            "fold_top" => ohms(value).map(PartFault::FoldTop),
            "fold_bottom" => ohms(value).map(PartFault::FoldBottom),
            "fb_swap" if value.is_none() => Ok(PartFault::FeedbackSwapped),
            "pass_stage" if value.is_none() => Ok(PartFault::OtherPassStage),
            "fb_swap" | "pass_stage" => Err(format!("fault '{spec}': {key} takes no value")),
            _ => return None,
        })
    }

    /// Short description for people.
    pub fn describe(&self) -> String {
        match self {
            PartFault::FeedbackTop(r) => format!("upper feedback resistor fitted: {r} ohm"),
            PartFault::FeedbackBottom(r) => format!("lower feedback resistor fitted: {r} ohm"),
            PartFault::FeedbackSwapped => "feedback resistors swapped".to_string(),
            PartFault::FoldTop(r) => format!("upper foldback divider resistor fitted: {r} ohm"),
            PartFault::FoldBottom(r) => format!("lower foldback divider resistor fitted: {r} ohm"),
            PartFault::OtherPassStage => "the other pass stage fitted".to_string(),
        }
    }

    /// Apply the fault to a unit's element values and its copy of the design; why not when
    /// the design has no such part.
    pub fn apply(&self, design: &mut Design, p: &mut Params) -> Result<(), String> {
        match *self {
            PartFault::FeedbackTop(r) => p.fb_top = r,
            PartFault::FeedbackBottom(r) => p.fb_bottom = r,
            PartFault::FeedbackSwapped => std::mem::swap(&mut p.fb_top, &mut p.fb_bottom),
            PartFault::FoldTop(_) | PartFault::FoldBottom(_)
                if design.limit.clamp != Clamp::Foldback =>
            {
                return Err(format!(
                    "the clamp is '{}', which has no foldback divider",
                    design.limit.clamp.as_str()
                ))
            }
            PartFault::FoldTop(r) => p.fold_top = r,
            PartFault::FoldBottom(r) => p.fold_bottom = r,
            PartFault::OtherPassStage => {
                design.pass.stage = match design.pass.stage {
                    Stage::Single => Stage::Darlington,
                    Stage::Darlington => Stage::Single,
                }
            }
        }
        Ok(())
    }
}
