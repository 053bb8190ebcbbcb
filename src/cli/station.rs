//! Station runs, shared by `regulus run --station` and `regulus batch`: finding the station
//! file, turning it into a run request, and testing one unit end to end (the pipeline, then
//! the station stamp, the floor result, the certificate and its PDF, the index) with a large
//! verdict on screen. Thin: the logic lives in `station`, `index`, `report` and `pipeline`.

use super::present;
use super::usage;
use crate::control::BenchControl;
use crate::index;
use crate::pipeline::{self, PipelineError, Prepared, RunRequest};
use crate::report::{certificate, pdf};
use crate::runner::CancelToken;
use crate::station::{self, FloorResult, Station, StationStamp};
use std::io::Write;
use std::path::{Path, PathBuf};

/// Find and read the station file: `explicit`, then `REGULUS_STATION`, then the user's
/// configuration folder. `None` when there is none anywhere.
pub fn find(explicit: Option<&Path>) -> anyhow::Result<Option<Station>> {
    let Some(found) = station::locate_from_env(explicit) else {
        return Ok(None);
    };
    match Station::load(found.path()) {
        Ok(s) => Ok(Some(s)),
        Err(station::StationError::Invalid(l)) => Err(l.into()),
        Err(e) => Err(usage(e.to_string())),
    }
}

/// The station file, or a usage error saying where it is looked for.
pub fn require(explicit: Option<&Path>) -> anyhow::Result<Station> {
    find(explicit)?.ok_or_else(|| {
        usage(format!(
            "no station file: give --station FILE, set {} or write $XDG_CONFIG_HOME/regulus/station.toml (default ~/.config/regulus/station.toml)",
            station::STATION_ENV
        ))
    })
}

/// A run request for one unit at a station (`operator` overrides the station's).
pub fn request(
    st: &Station,
    unit: &str,
    operator: Option<String>,
    note: Option<String>,
) -> RunRequest {
    RunRequest {
        bench: st.bench.clone(),
        design: st.design.clone(),
        plan: st.plan.clone(),
        unit: unit.to_string(),
        records: st.records.clone(),
        operator: operator.or_else(|| st.operator.clone()),
        note,
    }
}

/// Whether a certificate is also printed to PDF.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum PdfMode {
    Print,
    Skip,
}

/// What testing one unit came to.
#[derive(Debug)]
pub struct UnitDone {
    pub result: FloorResult,
    pub dir: Option<PathBuf>,
    pub certificate: Option<PathBuf>,
    /// Key metrics with their limits `(name, value, lower, upper)`, for the tally.
    pub values: Vec<(String, f64, f64, f64)>,
    /// The exit code `regulus run` gives this run.
    pub code: u8,
}

/// Test one unit: run the plan through the pipeline, then stamp the record with the station,
/// write the certificate (and its PDF), add the run to the index and show a large verdict.
pub async fn test_unit<B: BenchControl>(
    bench: &mut B,
    prep: &Prepared,
    req: &RunRequest,
    st: &Station,
    cancel: &CancelToken,
    pdf_mode: PdfMode,
    out: &mut impl Write,
) -> anyhow::Result<UnitDone> {
    let mut progress = present::Progress::new(prep.plan.steps.len());
    let finished = match pipeline::execute(bench, prep, req, &mut progress, cancel).await {
        Ok(f) => f,
        Err(e) => {
            if let PipelineError::NotStarted { safe_state, .. } = &e {
                for f in safe_state {
                    writeln!(out, "warning: safe state: {f}")?;
                }
            }
            writeln!(out, "error: {}", present::chain_text(&e))?;
            for cause in present::preflight_causes(&e) {
                writeln!(
                    out,
                    "if the unit is built to this design, likely cause: {cause}"
                )?;
            }
            big_verdict(out, FloorResult::Error, &req.unit)?;
            return Ok(UnitDone {
                result: FloorResult::Error,
                dir: None,
                certificate: None,
                values: Vec::new(),
                code: super::exit_code_for(&e.into()),
            });
        }
    };
    let report = &finished.report;
    present::write_summary(out, report)?;
    let dir = report.dir.clone();
    let stamp = StationStamp {
        station: st.id.clone(),
        station_file: st.path.display().to_string(),
        operator: req.operator.clone(),
    };
    if let Err(e) = station::write_station_stamp(&dir, &stamp) {
        writeln!(
            out,
            "warning: {}: station stamp not written: {e}",
            dir.display()
        )?;
    }
    let summary = finished.written.as_ref().ok().map(|w| &w.summary);
    let result = crate::floor::from_verdict(finished.verdict());
    match &finished.written {
        Ok(w) => present::print_outcome(&mut *out, w)?,
        Err(e) => writeln!(
            out,
            "warning: the report of {} was not written: {}; the record is complete, retry with `regulus report {}`",
            dir.display(),
            present::chain_text(e),
            dir.display()
        )?,
    }
    let mut values = Vec::new();
    if let Some(c) = summary.and_then(|s| s.comparison.as_ref()) {
        for ch in &c.checks {
            values.push((
                ch.metric.clone(),
                ch.measured,
                ch.worst_case.min,
                ch.worst_case.max,
            ));
        }
    }
    let cert = match certificate::write_certificate(&dir, result, summary) {
        Ok(p) => Some(p),
        Err(e) => {
            writeln!(
                out,
                "warning: certificate not written: {}",
                present::chain_text(&e)
            )?;
            None
        }
    };
    if let Err(e) = index::run_finished(&dir) {
        writeln!(
            out,
            "warning: {} (the record itself is complete)",
            present::chain_text(&e)
        )?;
    }
    big_verdict(out, result, &req.unit)?;
    if let Some(c) = &cert {
        writeln!(out, "certificate: {}", c.display())?;
        if pdf_mode == PdfMode::Print {
            let pdf_path = c.with_extension("pdf");
            match pdf::print_to_pdf(c, &pdf_path) {
                Ok(()) => writeln!(out, "certificate PDF: {}", pdf_path.display())?,
                Err(e) => writeln!(out, "note: {e}")?,
            }
        }
    }
    if let Some(url) = &st.store {
        auto_sync(out, url, st).await?;
    }
    let verdict = finished.verdict();
    Ok(UnitDone {
        result,
        dir: Some(dir),
        certificate: cert,
        values,
        code: super::for_verdict(verdict),
    })
}

/// Upload the station's finished runs that the store lacks, after each unit, when the
/// station file names a store. A store that is away or refuses leaves the runs queued
/// locally (the next unit or `regulus sync` catches up) and never changes the unit's result.
async fn auto_sync(out: &mut impl Write, url: &str, st: &Station) -> std::io::Result<()> {
    let result = async {
        let mut client = crate::store::connect(url).await?;
        crate::store::sync_folder(&mut client, &st.records, Some(&st.id)).await
    }
    .await;
    let queued = crate::store::pending(&st.records)
        .map(|p| p.len())
        .unwrap_or(0);
    match result {
        Ok(r) => writeln!(
            out,
            "store: {} run(s) uploaded ({} reading rows); {queued} queued",
            r.uploaded, r.readings
        ),
        Err(e) if e.is_unreachable() => writeln!(
            out,
            "store unreachable ({}): {queued} run(s) stay queued in {}; the next unit or \
             `regulus sync` catches up",
            present::chain_text(&e),
            st.records.display()
        ),
        Err(e) => writeln!(
            out,
            "warning: store: {} ({queued} run(s) stay queued; the record itself is complete)",
            present::chain_text(&e)
        ),
    }
}

/// The floor result in large letters, framed, with the unit.
pub fn big_verdict(out: &mut impl Write, result: FloorResult, unit: &str) -> std::io::Result<()> {
    let spaced: String = result
        .word()
        .chars()
        .map(|c| c.to_string())
        .collect::<Vec<_>>()
        .join(" ");
    let inner = format!("   {spaced}      unit {unit}   ");
    let width = inner.chars().count().max(40);
    let bar = "#".repeat(width + 4);
    let blank = format!("##{}##", " ".repeat(width));
    writeln!(out, "{bar}\n{blank}\n##{inner:<width$}##\n{blank}\n{bar}")
}

/// The options of `regulus run` that a station file can fill.
pub struct RunFiles<'a> {
    pub station: Option<&'a Path>,
    pub unit: &'a str,
    pub bench: &'a mut Option<PathBuf>,
    pub design: &'a mut Option<PathBuf>,
    pub plan: &'a mut Option<PathBuf>,
    pub records: &'a mut Option<PathBuf>,
    pub operator: &'a mut Option<String>,
}

/// The station of a `regulus run`: `--station`, or one found through the environment when
/// --bench, --design or --plan is missing. The station fills what the options leave out and
/// the unit serial is checked against its pattern. `None` when every file was given and no
/// station was asked for; a usage error when files are missing and no station is found.
pub fn for_run(f: RunFiles<'_>) -> anyhow::Result<Option<Station>> {
    let missing = f.bench.is_none() || f.design.is_none() || f.plan.is_none();
    if f.station.is_none() && !missing {
        return Ok(None);
    }
    let Some(st) = find(f.station)? else {
        let names: Vec<&str> = [
            ("--bench", f.bench.is_none()),
            ("--design", f.design.is_none()),
            ("--plan", f.plan.is_none()),
        ]
        .iter()
        .filter(|(_, m)| *m)
        .map(|(n, _)| *n)
        .collect();
        return Err(usage(format!(
            "missing {}: give them, or a station file (--station FILE, {} or $XDG_CONFIG_HOME/regulus/station.toml)",
            names.join(", "),
            station::STATION_ENV
        )));
    };
    if !st.serial_matches(f.unit) {
        return Err(usage(format!(
            "unit '{}' does not match the station's unit pattern {} ({})",
            f.unit,
            st.unit_pattern.as_deref().unwrap_or(""),
            st.path.display()
        )));
    }
    f.bench.get_or_insert_with(|| st.bench.clone());
    f.design.get_or_insert_with(|| st.design.clone());
    f.plan.get_or_insert_with(|| st.plan.clone());
    f.records.get_or_insert_with(|| st.records.clone());
    if f.operator.is_none() {
        *f.operator = st.operator.clone();
    }
    Ok(Some(st))
}

/// `regulus run` at a station, once the bench is open: test the unit as a batch does
/// (certificate, index, large verdict) and return the run's exit code.
pub async fn run_unit<B: BenchControl>(
    bench: &mut B,
    prep: &Prepared,
    req: &RunRequest,
    st: &Station,
    cancel: &CancelToken,
) -> anyhow::Result<u8> {
    let mut out = std::io::stdout().lock();
    let done = test_unit(bench, prep, req, st, cancel, PdfMode::Print, &mut out).await?;
    Ok(done.code)
}
