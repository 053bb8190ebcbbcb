//! A test station: the station file (which bench, design and plan this station tests with,
//! where its records go, who operates it, which store it syncs to and what a unit serial must
//! look like), where that file is found, the checks on a scanned serial, the floor result of
//! one unit and a batch's running tally with its capability. Pure apart from reading the
//! station file; opens no port, runs nothing.
//! This file only declares and re-exports.

mod file;
mod locate;
mod result;
mod serial;
mod snapshot;
mod stamp;
mod tally;

pub use file::{Station, StationError};
pub use locate::{locate, locate_from_env, Located as StationSource, STATION_ENV};
pub use result::FloorResult;
pub use serial::{SerialCheck, SerialGate};
pub use snapshot::{calibration_dates, design_revision};
pub use stamp::{read_station_stamp, write_station_stamp, StationStamp, STATION_STAMP};
pub use tally::{Tally, CPK_MIN_UNITS};
