//! The analysis' vocabulary: options (knee drop, regulation span, regulation reference) and
//! the metrics it reports, as serialised into `summary.json`. Pure data.

use super::fit::ExpFit;
use serde::{Deserialize, Serialize};

/// Default fractional drop `d` of the fixed-drop knee criterion (2 %).
pub const DEFAULT_KNEE_DROP: f64 = 0.02;
/// Default fraction of the knee current that bounds the regulation region (80 %).
pub const DEFAULT_REGULATION_SPAN: f64 = 0.8;

/// Which voltage divides a regulation figure.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum RegulationReference {
    /// Full-load output voltage (the common textbook definition for load regulation).
    FullLoad,
    /// No-load output voltage.
    NoLoad,
    /// The design's nominal output voltage.
    Nominal,
    /// Mean output over the line sweep (line regulation only, when nothing better exists).
    LineSweepMean,
}

/// Options of the analysis; `Default` gives the documented defaults.
#[derive(Debug, Clone, PartialEq)]
pub struct AnalysisOptions {
    /// Fractional drop `d` of the fixed-drop knee criterion.
    pub knee_drop: f64,
    /// Fraction of the knee current bounding the regulation region.
    pub regulation_span: f64,
    /// Denominator of load regulation.
    pub reference: RegulationReference,
    /// The design's nominal output voltage (needed for [`RegulationReference::Nominal`]).
    pub nominal_voltage: Option<f64>,
    /// Rated full-load current; when absent the last regulating sweep point is full load.
    pub full_load_current: Option<f64>,
}

impl RegulationReference {
    /// Words for people: `full-load`, `no-load`, `nominal`, `line-sweep mean`.
    pub fn label(self) -> &'static str {
        match self {
            RegulationReference::FullLoad => "full-load",
            RegulationReference::NoLoad => "no-load",
            RegulationReference::Nominal => "nominal",
            RegulationReference::LineSweepMean => "line-sweep mean",
        }
    }
}

impl Default for AnalysisOptions {
    fn default() -> Self {
        AnalysisOptions {
            knee_drop: DEFAULT_KNEE_DROP,
            regulation_span: DEFAULT_REGULATION_SPAN,
            reference: RegulationReference::FullLoad,
            nominal_voltage: None,
            full_load_current: None,
        }
    }
}

/// One point of a V-I curve.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct CurvePoint {
    pub current: f64,
    pub voltage: f64,
}

/// Load regulation with its denominator.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct LoadRegulation {
    /// (V_NL - V_FL) / V_ref * 100.
    pub percent: f64,
    pub reference: RegulationReference,
    pub reference_voltage: f64,
}

/// Output resistance -dV/dI over the regulation region.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct OutputResistance {
    pub ohms: f64,
    /// Standard uncertainty of the fitted slope (None with only two points).
    pub std_uncertainty: Option<f64>,
    pub points: usize,
    /// Highest load current among the fitted points, A.
    pub max_current: f64,
    /// The fitted line's output voltage at zero current, V.
    pub intercept_voltage: f64,
}

/// The limit knee by both methods.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct KneeMetrics {
    /// The fractional drop `d` used.
    pub drop_fraction: f64,
    /// `(1 - d) * V_NL`.
    pub threshold_voltage: f64,
    /// First crossing below the threshold, linearly interpolated.
    pub fixed_drop: Option<CurvePoint>,
    /// Intersection of the regulation line and the limit line.
    pub two_segment: Option<CurvePoint>,
    /// The highest-current curve point still at or above the threshold: when the limit was
    /// not reached, the limit is at least this high.
    #[serde(default)]
    pub highest_regulating: Option<CurvePoint>,
}

/// Short-circuit current over the dwell.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct ShortCircuit {
    pub start_current: f64,
    pub end_current: f64,
    pub dwell_s: f64,
    /// (end - start) / dwell, A/s.
    pub drift_a_per_s: f64,
    /// (end - start) / start * 100.
    pub drift_percent: f64,
    /// None when no first-order settling is seen within the dwell.
    pub time_constant: Option<ExpFit>,
    /// Highest temperature read during the dwell, degC.
    pub peak_temperature: Option<f64>,
    /// True when the output came back above the knee threshold after the short was removed;
    /// None when no recovery rows exist.
    pub recovered: Option<bool>,
    /// Output voltage of the last reading after the short was removed.
    #[serde(default)]
    pub recovery_voltage: Option<f64>,
    /// The voltage it had to reach (the knee threshold, or the design's nominal output less
    /// the knee drop when the record has no no-load reading).
    #[serde(default)]
    pub recovery_threshold: Option<f64>,
    pub points: usize,
}

/// Line regulation from a line sweep.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct LineRegulation {
    pub input_low: f64,
    pub input_high: f64,
    /// Fitted output change over the input range, V.
    pub delta_output: f64,
    /// delta_output / V_ref * 100.
    pub percent: f64,
    /// Percent per volt of input change.
    pub percent_per_volt: f64,
    pub reference: RegulationReference,
    pub reference_voltage: f64,
    pub points: usize,
}

/// Everything the analysis found in one record. Absent metrics are `None`, with a note in
/// `notes` saying why.
#[derive(Debug, Clone, PartialEq, Default, Serialize, Deserialize)]
pub struct Metrics {
    pub rows: usize,
    pub no_load: Option<CurvePoint>,
    pub full_load: Option<CurvePoint>,
    pub load_regulation: Option<LoadRegulation>,
    pub output_resistance: Option<OutputResistance>,
    pub knee: Option<KneeMetrics>,
    pub short_circuit: Option<ShortCircuit>,
    /// I_sc (start of dwell) / I_knee (fixed-drop knee).
    pub foldback_ratio: Option<f64>,
    pub line_regulation: Option<LineRegulation>,
    pub max_temperature: Option<f64>,
    /// Conditions of the curve row nearest the knee (for reading the limit model hot).
    pub knee_conditions: Option<KneeConditions>,
    /// Output drift and temperature rise over a soak.
    #[serde(default)]
    pub soak: Option<Soak>,
    /// The pre-flight reading of the unloaded output, when the run stopped there (no load
    /// sweep or curve): not judged as the output (the unit may not be the design's), but
    /// what a diagnosis of that stop fits.
    #[serde(default)]
    pub preflight: Option<CurvePoint>,
    pub notes: Vec<String>,
}

/// What a soak showed: the output's drift from its first to its last reading, and the
/// temperature rise from the first reading to the highest.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct Soak {
    pub start_voltage: f64,
    pub end_voltage: f64,
    /// end - start, V.
    pub drift_v: f64,
    /// (end - start) / start * 100.
    pub drift_percent: f64,
    pub duration_s: f64,
    /// Highest minus first temperature reading, degC (None without a thermometer).
    pub temperature_rise: Option<f64>,
    pub points: usize,
}

/// What the pass device saw at the knee (when the limit was not reached, at the highest
/// regulating point): its case temperature and dissipation.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct KneeConditions {
    /// Thermometer reading (pass device case), degC.
    pub case_temperature: Option<f64>,
    /// (V_in - V_out) * I_out, W; V_in measured, or the programmed source voltage.
    pub pass_watts: Option<f64>,
}

impl Metrics {
    /// The limit current used for comparison: the two-segment knee when it exists (closest to
    /// the clamp's onset), otherwise the fixed-drop knee.
    pub fn limit_current(&self) -> Option<f64> {
        let k = self.knee.as_ref()?;
        k.two_segment.or(k.fixed_drop).map(|p| p.current)
    }
}
