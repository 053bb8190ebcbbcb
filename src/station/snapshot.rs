//! What a record's input snapshots say that the floor shows: the calibration due date of each
//! instrument (`calibration_due` in the bench file) and the design's revision. Pure text
//! parsing; the caller reads the files.

/// Calibration due dates from a bench file's text: `calibration_due` of each
/// `[[instrument]]`, by instrument name.
pub fn calibration_dates(bench_toml: &str) -> Vec<(String, String)> {
    let Ok(v) = bench_toml.parse::<toml::Table>() else {
        return Vec::new();
    };
    let Some(list) = v.get("instrument").and_then(|i| i.as_array()) else {
        return Vec::new();
    };
    list.iter()
        .filter_map(|i| {
            let name = i.get("name")?.as_str()?.to_string();
            let due = i.get("calibration_due")?;
            let text = match due {
                toml::Value::Datetime(d) => d.to_string(),
                toml::Value::String(s) => s.clone(),
                _ => return None,
            };
            Some((name, text))
        })
        .collect()
}

/// Design revision from a design file's text (`[design] revision`).
pub fn design_revision(design_toml: &str) -> Option<String> {
    let v = design_toml.parse::<toml::Table>().ok()?;
    Some(v.get("design")?.get("revision")?.as_str()?.to_string())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn calibration_dates_and_revision_come_from_the_snapshots() {
        let bench = "[[instrument]]\nname = \"dmm\"\nroles = []\ncalibration_due = 2027-06-30\n\
[[instrument]]\nname = \"eload\"\nroles = []\n";
        assert_eq!(
            calibration_dates(bench),
            vec![("dmm".to_string(), "2027-06-30".to_string())]
        );
        assert!(calibration_dates("not toml [").is_empty());
        assert_eq!(
            design_revision("[design]\nname = \"x\"\nrevision = \"B\"\n").as_deref(),
            Some("B")
        );
        assert_eq!(design_revision("[design]\nname = \"x\"\n"), None);
    }
}
