//! The plan file's shape as read from TOML: every value keeps its span so a later check can
//! point at it. No checking beyond TOML syntax and unknown keys; see `checks` and `expand`.

use crate::record::StepKind;
use serde::Deserialize;
use std::ops::Range;
use toml::Spanned;

pub(super) type SV = Spanned<toml::Value>;

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub(super) struct RawPlan {
    pub(super) name: Spanned<String>,
    pub(super) description: Option<String>,
    pub(super) source: Option<SV>,
    pub(super) settle: Option<SV>,
    pub(super) samples: Option<SV>,
    pub(super) interlocks: Option<RawInterlocks>,
    #[serde(default)]
    pub(super) step: Vec<Spanned<RawStep>>,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub(super) struct RawInterlocks {
    pub(super) max_output_voltage: Option<SV>,
    pub(super) max_load_power: Option<SV>,
    pub(super) max_temperature: Option<SV>,
    pub(super) max_short_dwell: Option<SV>,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub(super) struct RawStep {
    pub(super) kind: Spanned<String>,
    pub(super) label: Option<Spanned<String>>,
    /// Why this step may go beyond what the design allows (a CC load above its lowest
    /// worst-case limit, past an interlock); shown on the console, in the record's plan
    /// snapshot and in the report.
    pub(super) beyond_design: Option<Spanned<String>>,
    pub(super) settle: Option<SV>,
    pub(super) samples: Option<SV>,
    pub(super) mode: Option<Spanned<String>>,
    pub(super) from: Option<SV>,
    pub(super) to: Option<SV>,
    pub(super) step: Option<SV>,
    pub(super) points: Option<SV>,
    pub(super) load: Option<SV>,
    pub(super) expected: Option<SV>,
    pub(super) reference: Option<SV>,
    pub(super) upper: Option<SV>,
    pub(super) ceiling: Option<SV>,
    pub(super) drop: Option<SV>,
    pub(super) resolution: Option<SV>,
    pub(super) max_points: Option<SV>,
    pub(super) resistance: Option<SV>,
    pub(super) dwell: Option<SV>,
    pub(super) interval: Option<SV>,
    pub(super) recovery_load: Option<SV>,
    pub(super) recovery_time: Option<SV>,
    pub(super) duration: Option<SV>,
    /// Line sweep: the largest output change over the sweep that passes ("0.1 %").
    pub(super) max_change: Option<SV>,
    /// Soak: the largest output drift that passes ("0.2 %").
    pub(super) max_drift: Option<SV>,
    /// Soak: the largest temperature rise that passes ("25 degC").
    pub(super) max_rise: Option<SV>,
}

impl RawStep {
    /// Names and spans of the kind-specific fields that are present.
    pub(super) fn present(&self) -> Vec<(&'static str, Range<usize>)> {
        let mut v = Vec::new();
        let mut add = |name: &'static str, f: &Option<SV>| {
            if let Some(s) = f {
                v.push((name, s.span()));
            }
        };
        add("from", &self.from);
        add("to", &self.to);
        add("step", &self.step);
        add("points", &self.points);
        add("load", &self.load);
        add("expected", &self.expected);
        add("reference", &self.reference);
        add("upper", &self.upper);
        add("ceiling", &self.ceiling);
        add("drop", &self.drop);
        add("resolution", &self.resolution);
        add("max_points", &self.max_points);
        add("resistance", &self.resistance);
        add("dwell", &self.dwell);
        add("interval", &self.interval);
        add("recovery_load", &self.recovery_load);
        add("recovery_time", &self.recovery_time);
        add("duration", &self.duration);
        add("max_change", &self.max_change);
        add("max_drift", &self.max_drift);
        add("max_rise", &self.max_rise);
        if let Some(m) = &self.mode {
            v.push(("mode", m.span()));
        }
        v
    }
}

pub(super) const KINDS: &str =
    "load_sweep, limit_trace, knee_search, short_circuit, line_sweep, soak";

pub(super) fn allowed_fields(kind: StepKind) -> &'static [&'static str] {
    match kind {
        StepKind::LoadSweep => &["from", "to", "step", "points"],
        StepKind::LimitTrace => &["mode", "from", "to", "step", "points"],
        StepKind::KneeSearch => &[
            "mode",
            "expected",
            "reference",
            "upper",
            "ceiling",
            "drop",
            "resolution",
            "max_points",
        ],
        StepKind::ShortCircuit => &[
            "resistance",
            "dwell",
            "interval",
            "recovery_load",
            "recovery_time",
        ],
        StepKind::LineSweep => &["from", "to", "step", "points", "load", "max_change"],
        StepKind::Soak => &["load", "duration", "interval", "max_drift", "max_rise"],
        StepKind::Preflight => &[],
    }
}
