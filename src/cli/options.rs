//! Option groups shared by several commands, flattened into their `Args` with
//! `#[command(flatten)]`: the analysis settings of `report`, `history` and `compare`.

use crate::analysis::{AnalysisOptions, RegulationReference};

/// Denominator of load regulation.
#[derive(Debug, Clone, Copy, clap::ValueEnum)]
pub enum ReferenceArg {
    FullLoad,
    NoLoad,
    Nominal,
}

/// Analysis settings shared by `report`, `history` and `compare`.
#[derive(Debug, Clone, clap::Args)]
pub struct AnalysisArgs {
    /// Fixed-drop knee criterion: percent below the no-load voltage.
    #[arg(long, value_name = "PERCENT", default_value_t = 2.0)]
    pub knee_drop: f64,
    /// Denominator of load regulation.
    #[arg(long, value_enum, default_value = "full-load")]
    pub regulation_reference: ReferenceArg,
    /// Rated full-load current in amperes (default: the last regulating sweep point).
    #[arg(long, value_name = "AMPERES")]
    pub full_load: Option<f64>,
}

impl AnalysisArgs {
    /// Checked analysis options, or a message saying what to fix.
    pub fn options(&self) -> Result<AnalysisOptions, String> {
        if !(self.knee_drop > 0.0 && self.knee_drop < 50.0) {
            return Err(format!(
                "--knee-drop {} is out of range: give a percentage between 0 and 50 (default 2)",
                self.knee_drop
            ));
        }
        if let Some(i) = self.full_load {
            if !(i > 0.0 && i.is_finite()) {
                return Err(format!(
                    "--full-load {i} must be a positive current in amperes"
                ));
            }
        }
        Ok(AnalysisOptions {
            knee_drop: self.knee_drop / 100.0,
            reference: match self.regulation_reference {
                ReferenceArg::FullLoad => RegulationReference::FullLoad,
                ReferenceArg::NoLoad => RegulationReference::NoLoad,
                ReferenceArg::Nominal => RegulationReference::Nominal,
            },
            full_load_current: self.full_load,
            ..AnalysisOptions::default()
        })
    }
}
