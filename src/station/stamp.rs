//! The station stamp: `station.json` in a record folder says which station ran the record
//! and who operated it. Written beside a station run's derived files (never into readings.csv
//! or run.json); read by the index, the certificate and the store.

use serde::{Deserialize, Serialize};
use std::path::Path;

/// File name of the station stamp in a record folder.
pub const STATION_STAMP: &str = "station.json";

/// Which station ran a record, and who operated it.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct StationStamp {
    pub station: String,
    pub station_file: String,
    pub operator: Option<String>,
}

/// Write `station.json` into a record folder (a derived file: never readings or run.json).
pub fn write_station_stamp(dir: &Path, stamp: &StationStamp) -> std::io::Result<()> {
    let text = serde_json::to_string_pretty(stamp).map_err(std::io::Error::other)?;
    std::fs::write(dir.join(STATION_STAMP), text + "\n")
}

/// The station stamp of a record folder, if it has one that reads.
pub fn read_station_stamp(dir: &Path) -> Option<StationStamp> {
    let text = std::fs::read_to_string(dir.join(STATION_STAMP)).ok()?;
    serde_json::from_str(&text).ok()
}
