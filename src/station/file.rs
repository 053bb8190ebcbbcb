//! The station file (TOML): raw keys as written, then named checks, then the checked
//! [`Station`]. Relative paths are taken from the station file's own folder, so a station
//! file travels with its inputs. Every problem is a `config::Located` (file:line:column).

use crate::config::{self, Located};
use serde::Deserialize;
use std::path::{Path, PathBuf};

/// The station file as written.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct Raw {
    id: String,
    bench: PathBuf,
    design: PathBuf,
    plan: PathBuf,
    #[serde(default)]
    records: Option<PathBuf>,
    #[serde(default)]
    operator: Option<String>,
    #[serde(default)]
    store: Option<String>,
    #[serde(default)]
    unit_pattern: Option<String>,
}

/// A checked station file.
#[derive(Debug, Clone)]
pub struct Station {
    /// Where the station file was read from.
    pub path: PathBuf,
    /// Station id: names the station in records, certificates and the store.
    pub id: String,
    pub bench: PathBuf,
    pub design: PathBuf,
    pub plan: PathBuf,
    /// Records root (default `records` beside the station file).
    pub records: PathBuf,
    pub operator: Option<String>,
    /// Connection string of the shared store (`postgresql://...`), if the station syncs.
    pub store: Option<String>,
    /// The pattern a unit serial must match as a whole, as written.
    pub unit_pattern: Option<String>,
    pattern: Option<regex::Regex>,
}

/// Why a station file cannot be used.
#[derive(Debug, thiserror::Error)]
pub enum StationError {
    #[error("{path}: cannot read the station file: {source} (check --station, {env} and the configuration folder)", env = super::STATION_ENV)]
    Read {
        path: PathBuf,
        #[source]
        source: std::io::Error,
    },
    #[error(transparent)]
    Invalid(#[from] Located),
}

impl Station {
    /// Read and check a station file.
    pub fn load(path: &Path) -> Result<Station, StationError> {
        let text = std::fs::read_to_string(path).map_err(|source| StationError::Read {
            path: path.to_path_buf(),
            source,
        })?;
        Ok(Station::parse(&text, path)?)
    }

    /// Check a station file's text; `path` names it in messages and anchors relative paths.
    pub fn parse(text: &str, path: &Path) -> Result<Station, Located> {
        let file = path.display().to_string();
        let raw: Raw = toml::from_str(text).map_err(|e| config::from_toml(&file, text, &e))?;
        let at = |key: &str, msg: String| config::at_path(&file, text, &[key], msg);
        check_id(&raw.id).map_err(|m| at("id", m))?;
        for (key, p) in [
            ("bench", &raw.bench),
            ("design", &raw.design),
            ("plan", &raw.plan),
        ] {
            if p.as_os_str().is_empty() {
                return Err(at(
                    key,
                    format!("`{key}` is empty: give the {key} file's path"),
                ));
            }
        }
        if let Some(op) = &raw.operator {
            if op.trim().is_empty() {
                return Err(at(
                    "operator",
                    "`operator` is empty: give a name or leave the key out".into(),
                ));
            }
        }
        if let Some(s) = &raw.store {
            if !(s.starts_with("postgresql://") || s.starts_with("postgres://")) {
                return Err(at(
                    "store",
                    format!("`store` = \"{s}\" is not a PostgreSQL connection URL: write postgresql://USER@HOST:PORT/DATABASE"),
                ));
            }
        }
        let pattern = match &raw.unit_pattern {
            None => None,
            Some(p) => Some(regex::Regex::new(&format!("^(?:{p})$")).map_err(|e| {
                at(
                    "unit_pattern",
                    format!("`unit_pattern` is not a valid regular expression: {e}"),
                )
            })?),
        };
        let base = path.parent().unwrap_or(Path::new(""));
        let resolve = |p: &Path| {
            if p.is_absolute() {
                p.to_path_buf()
            } else {
                base.join(p)
            }
        };
        Ok(Station {
            path: path.to_path_buf(),
            id: raw.id,
            bench: resolve(&raw.bench),
            design: resolve(&raw.design),
            plan: resolve(&raw.plan),
            records: resolve(raw.records.as_deref().unwrap_or(Path::new("records"))),
            operator: raw.operator,
            store: raw.store,
            unit_pattern: raw.unit_pattern,
            pattern,
        })
    }

    /// Does `serial` match the station's unit pattern (always true without one)?
    pub fn serial_matches(&self, serial: &str) -> bool {
        self.pattern.as_ref().is_none_or(|p| p.is_match(serial))
    }
}

/// A station id names folders and store rows: letters, digits, `-`, `_`, `.`; 1 to 64 long.
fn check_id(id: &str) -> Result<(), String> {
    let ok = !id.is_empty()
        && id.len() <= 64
        && !id.starts_with('.')
        && id
            .chars()
            .all(|c| c.is_ascii_alphanumeric() || matches!(c, '-' | '_' | '.'));
    if ok {
        Ok(())
    } else {
        Err(format!(
            "station id '{id}' must be 1 to 64 letters, digits, '-', '_' or '.', not starting with '.'"
        ))
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    const GOOD: &str = "id = \"ST-01\"\nbench = \"bench.toml\"\ndesign = \"/abs/d.toml\"\nplan = \"plans/p.toml\"\noperator = \"Tester A\"\nunit_pattern = \"TLB-[0-9]{4}\"\n";

    #[test]
    fn a_station_file_reads_with_paths_from_its_folder() {
        let s = Station::parse(GOOD, Path::new("/floor/st/station.toml")).unwrap();
        assert_eq!(s.id, "ST-01");
        assert_eq!(s.bench, Path::new("/floor/st/bench.toml"));
        assert_eq!(s.design, Path::new("/abs/d.toml"));
        assert_eq!(s.plan, Path::new("/floor/st/plans/p.toml"));
        assert_eq!(s.records, Path::new("/floor/st/records"));
        assert_eq!(s.operator.as_deref(), Some("Tester A"));
        assert!(s.serial_matches("TLB-0042"));
        // The pattern must match the whole serial, not a part of it.
        assert!(!s.serial_matches("XTLB-00421"));
        assert!(!s.serial_matches("TLB-42"));
    }

    #[test]
    fn the_template_reads() {
        let text = include_str!("../../config/station-template.toml");
        let s = Station::parse(text, Path::new("/st/station.toml")).unwrap();
        assert_eq!(s.id, "ST-01");
        assert!(s.store.is_some() && s.serial_matches("TLB-0001"));
    }

    #[test]
    fn mistakes_are_located() {
        let p = Path::new("station.toml");
        let bad_pattern = GOOD.replace("TLB-[0-9]{4}", "TLB-[0-9");
        let e = Station::parse(&bad_pattern, p).unwrap_err();
        assert_eq!((e.line, e.column), (Some(6), Some(16)), "{e}");
        assert!(e.message.contains("unit_pattern"), "{e}");

        let e = Station::parse(&GOOD.replace("ST-01", "ST 01"), p).unwrap_err();
        assert_eq!((e.line, e.column), (Some(1), Some(6)), "{e}");

        let e = Station::parse(&format!("{GOOD}benchh = \"x\"\n"), p).unwrap_err();
        assert_eq!(e.line, Some(7), "{e}");
        assert!(e.to_string().starts_with("station.toml:7:"), "{e}");

        let e = Station::parse(&GOOD.replace("bench = \"bench.toml\"\n", ""), p).unwrap_err();
        assert!(e.message.contains("bench"), "{e}");

        let e = Station::parse(&format!("{GOOD}store = \"mysql://x\"\n"), p).unwrap_err();
        assert_eq!(e.line, Some(7), "{e}");
    }
}
