//! The certificate of one unit: a single printable page (`certificate.html`, A4 with a print
//! stylesheet) with the floor result in large letters, the unit, design and revision, plan,
//! station, operator and date, the instruments with their identities and calibration due
//! dates (from the bench file, when it gives them), the key metrics against their limits and
//! a signature line. Rendering is pure (generic writer); [`write_certificate`] reads the
//! record's snapshots and writes the page. No scripts, no external files.

use super::html::escape;
use super::{ReportError, Summary};
use crate::quantity::eng;
use crate::record::{self, RunInfo};
use crate::station::{read_station_stamp, FloorResult, StationStamp};
use std::io::Write;
use std::path::{Path, PathBuf};

/// File name of the certificate page in a record folder.
pub const CERTIFICATE_FILE: &str = "certificate.html";

/// Everything a certificate shows.
#[derive(Debug, Clone)]
pub struct Certificate<'a> {
    pub result: FloorResult,
    pub info: &'a RunInfo,
    pub summary: Option<&'a Summary>,
    pub design_revision: Option<String>,
    pub station: Option<StationStamp>,
    /// Instrument name -> calibration due date, as the bench file gives them.
    pub calibration: Vec<(String, String)>,
}

/// Shared by the certificate and the report: the large verdict banner and its colours.
pub const BANNER_STYLE: &str =
    ".banner{border:6px solid #111;padding:10px 18px;margin:10px 0 16px;\
display:flex;justify-content:space-between;align-items:center}\
.banner .word{font-size:64px;font-weight:900;letter-spacing:6px;line-height:1}\
.banner .what{font-size:15px;text-align:right}\
.r-pass{background:#dff0d8}.r-marginal{background:#fcf3cf}.r-fail{background:#f2d7d5}\
.r-incomplete{background:#e5e5e5}.r-error{background:#e5e5e5}\
@media print{.banner{-webkit-print-color-adjust:exact;print-color-adjust:exact}}";

/// The verdict banner as an HTML fragment: the word, large, and what it is about.
pub fn banner_html(result: FloorResult, unit: &str, detail: &str) -> String {
    format!(
        "<div class=\"banner r-{}\" id=\"verdict-banner\"><span class=\"word\">{}</span>\
<span class=\"what\">unit <b>{}</b><br>{}</span></div>",
        result.as_str(),
        result.word(),
        escape(unit),
        escape(detail)
    )
}

const STYLE: &str = "@page{size:A4;margin:14mm}\
body{font-family:sans-serif;color:#111;margin:0 auto;max-width:190mm;font-size:12px}\
h1{font-size:20px;margin:4px 0}table{border-collapse:collapse;width:100%;margin:6px 0}\
td,th{border:1px solid #999;padding:3px 6px;text-align:left;vertical-align:top}\
th{background:#eee}td.num{text-align:right;font-variant-numeric:tabular-nums}\
h2{font-size:14px;margin:12px 0 2px}.sign{margin-top:28px;display:flex;gap:40px}\
.sign div{flex:1;border-top:1px solid #111;padding-top:4px}\
@media print{body{max-width:none}th{-webkit-print-color-adjust:exact;print-color-adjust:exact}\
table,.sign{page-break-inside:avoid}}";

/// Render the certificate page.
pub fn write_certificate_html<W: Write>(mut w: W, c: &Certificate<'_>) -> std::io::Result<()> {
    let e = escape;
    let info = c.info;
    let design = match &c.design_revision {
        Some(r) => format!("{} (revision {r})", info.design.name),
        None => info.design.name.clone(),
    };
    writeln!(
        w,
        "<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">\
<title>Test certificate {}</title><style>{STYLE}{BANNER_STYLE}</style></head><body>",
        e(&info.unit)
    )?;
    writeln!(w, "<h1>Test certificate</h1>")?;
    writeln!(
        w,
        "{}",
        banner_html(c.result, &info.unit, &format!("design {design}"))
    )?;
    let station = c.station.as_ref().map(|s| s.station.clone());
    let operator = info
        .operator
        .clone()
        .or_else(|| c.station.as_ref().and_then(|s| s.operator.clone()));
    writeln!(w, "<table id=\"run\">")?;
    let rows: [(&str, String); 8] = [
        ("Unit", info.unit.clone()),
        ("Design", design.clone()),
        ("Design file SHA-256", info.design.sha256.clone()),
        ("Plan", info.plan_name.clone()),
        ("Station", station.unwrap_or_else(|| "not recorded".into())),
        (
            "Operator",
            operator.unwrap_or_else(|| "not recorded".into()),
        ),
        ("Started (UTC)", info.started_utc.clone()),
        (
            "Ended (UTC)",
            info.ended_utc
                .clone()
                .unwrap_or_else(|| "did not finish".into()),
        ),
    ];
    for (k, v) in rows {
        writeln!(w, "<tr><th>{k}</th><td>{}</td></tr>", e(&v))?;
    }
    if let Some(reason) = &info.reason {
        writeln!(w, "<tr><th>Stopped because</th><td>{}</td></tr>", e(reason))?;
    }
    writeln!(w, "</table>")?;

    writeln!(w, "<h2>Key metrics against the design's limits</h2>")?;
    writeln!(
        w,
        "<table id=\"metrics\"><tr><th>metric</th><th>measured</th><th>lower limit</th>\
<th>upper limit</th><th>margin</th><th>result</th></tr>"
    )?;
    match c.summary.and_then(|s| s.comparison.as_ref()) {
        Some(cmp) => {
            for ch in &cmp.checks {
                writeln!(
                    w,
                    "<tr><td>{}</td><td class=\"num\">{}</td><td class=\"num\">{}</td>\
<td class=\"num\">{}</td><td class=\"num\">{}</td><td>{}</td></tr>",
                    e(&ch.metric),
                    e(&eng(ch.measured, &ch.unit)),
                    e(&eng(ch.worst_case.min, &ch.unit)),
                    e(&eng(ch.worst_case.max, &ch.unit)),
                    e(&eng(ch.margin, &ch.unit)),
                    ch.verdict.as_str().to_uppercase()
                )?;
            }
            for m in &cmp.not_measured {
                writeln!(
                    w,
                    "<tr><td>{}</td><td colspan=\"4\">not measured</td><td>-</td></tr>",
                    e(m)
                )?;
            }
        }
        None => writeln!(
            w,
            "<tr><td colspan=\"6\">no comparison with the design: nothing was judged</td></tr>"
        )?,
    }
    writeln!(w, "</table>")?;

    writeln!(w, "<h2>Instruments</h2>")?;
    writeln!(
        w,
        "<table id=\"instruments\"><tr><th>name</th><th>roles</th><th>identity</th>\
<th>link</th><th>calibration due</th></tr>"
    )?;
    for i in &info.instruments {
        let roles: Vec<&str> = i.roles.iter().map(|r| r.as_str()).collect();
        let due = c
            .calibration
            .iter()
            .find(|(n, _)| n == &i.name)
            .map(|(_, d)| d.clone())
            .unwrap_or_else(|| "not given".into());
        writeln!(
            w,
            "<tr><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td></tr>",
            e(&i.name),
            e(&roles.join(", ")),
            e(i.identity.as_deref().unwrap_or("not queried")),
            e(&i.link),
            e(&due)
        )?;
    }
    writeln!(w, "</table>")?;
    writeln!(
        w,
        "<div class=\"sign\"><div>Tested by (name, signature)</div><div>Date</div>\
<div>Approved by (name, signature)</div></div>"
    )?;
    writeln!(
        w,
        "<p style=\"font-size:10px;color:#444\">regulus {}: generated from the record \
{} / {}; the record's files are the evidence.</p></body></html>",
        e(&info.tool_version),
        e(&info.unit),
        e(&record_folder_label(info))
    )
}

fn record_folder_label(info: &RunInfo) -> String {
    format!("{} {}", info.started_utc, info.plan_name)
}

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

/// Write `certificate.html` into a record folder from its run.json, snapshots and station
/// stamp, with the given result and summary.
pub fn write_certificate(
    dir: &Path,
    result: FloorResult,
    summary: Option<&Summary>,
) -> Result<PathBuf, ReportError> {
    let info = record::read_info(dir)?;
    let bench = std::fs::read_to_string(dir.join(record::BENCH_SNAPSHOT)).unwrap_or_default();
    let design = std::fs::read_to_string(dir.join(record::DESIGN_SNAPSHOT)).unwrap_or_default();
    let c = Certificate {
        result,
        info: &info,
        summary,
        design_revision: design_revision(&design),
        station: read_station_stamp(dir),
        calibration: calibration_dates(&bench),
    };
    let mut page = Vec::new();
    write_certificate_html(&mut page, &c).map_err(|source| ReportError::Write {
        path: dir.join(CERTIFICATE_FILE),
        source,
    })?;
    let path = dir.join(CERTIFICATE_FILE);
    std::fs::write(&path, page).map_err(|source| ReportError::Write {
        path: path.clone(),
        source,
    })?;
    Ok(path)
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

    #[test]
    fn the_banner_shows_the_word_and_never_pass_for_incomplete() {
        let b = banner_html(FloorResult::Incomplete, "U<1>", "design D");
        assert!(b.contains(">INCOMPLETE<") && !b.contains("PASS"));
        assert!(b.contains("U&lt;1&gt;"));
    }
}
