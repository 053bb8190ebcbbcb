//! The certificate of one unit: a single printable page (`certificate.html`, A4 with a print
//! stylesheet) with the floor result in large letters, the unit, design and revision, plan,
//! station, operator and date, the instruments with their identities and calibration due
//! dates (from the bench file, when it gives them), the key metrics against their limits and
//! a signature line. Rendering is pure (generic writer); [`write_certificate`] reads the
//! record's snapshots and writes the page. No scripts, no external files.

use super::html::{banner_html, escape, BANNER_STYLE};
use super::{ReportError, Summary};
use crate::quantity::eng;
use crate::record::{self, RunInfo};
use crate::station::{
    calibration_dates, design_revision, read_station_stamp, FloorResult, StationStamp,
};
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
    if let Some(cmp) = c.summary.and_then(|s| s.comparison.as_ref()) {
        if cmp.judged_as_built() {
            writeln!(
                w,
                "<p class=\"basis\">Limits: the design's as-built worst case (part tolerances at \
its room and input), taken at the temperatures the record gives.</p>"
            )?;
        }
    }

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
    fn the_banner_shows_the_word_and_never_pass_for_incomplete() {
        let b = banner_html(FloorResult::Incomplete, "U<1>", "design D");
        assert!(b.contains(">INCOMPLETE<") && !b.contains("PASS"));
        assert!(b.contains("U&lt;1&gt;"));
    }
}
