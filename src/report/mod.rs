//! Reports derived from a record: `summary.json` (metrics, verdicts, drift flags, schema
//! version), plots (`plots/*.svg` and `.png`) and a self-contained `report.html`; plus the
//! history listing of a unit. Everything here can be regenerated from the record; this module
//! never writes into `readings.csv` or `run.json`. Building the summary and rendering are pure
//! (generic writers); file access is limited to [`load_record`], [`write_report`] and
//! [`history`].
//! This file only declares and re-exports.

pub mod certificate;
pub mod dashboard;
pub mod font;
mod history;
pub mod html;
pub mod pdf;
pub mod plots;
pub mod plots_line;
mod summary;

pub use history::*;
pub use summary::*;
