//! `probe`: connect to each instrument on its own, ask who it is, take one reading per
//! measuring role, time the round trip; once every instrument has been read, send each its
//! safe state (so that no meter reads while a source is being switched off). One instrument
//! failing does not hide the others. The table writer takes any `Write`.

use super::{connect, BenchConfig, BenchError, Instrument, InstrumentConfig};
use crate::measure::{Reading, Role};
use crate::quantity::eng;
use std::io::Write;
use std::sync::Arc;
use std::time::Duration;
use tokio::task::JoinSet;
use tokio::time::Instant;

/// One line of the probe table.
#[derive(Debug, Clone, PartialEq)]
pub struct ProbeRow {
    pub instrument: String,
    pub link: String,
    /// `None` when the instrument failed before any role could be read.
    pub role: Option<Role>,
    /// The reading and round-trip time, `Ok(None)` for a role that takes no reading (load,
    /// source), or the error.
    pub outcome: Result<Option<(Reading, Duration)>, BenchError>,
}

/// What `probe` found.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct ProbeReport {
    /// (instrument, identity reply) for each instrument whose identity was queried.
    pub identities: Vec<(String, String)>,
    pub rows: Vec<ProbeRow>,
}

impl ProbeReport {
    /// True when any instrument or reading failed.
    pub fn failed(&self) -> bool {
        self.rows.iter().any(|r| r.outcome.is_err())
    }
}

/// One instrument probed: the open instrument (for its safe state), its identity reply, its
/// rows.
type Probed = (Option<Arc<Instrument>>, Option<String>, Vec<ProbeRow>);

async fn probe_one(cfg: InstrumentConfig) -> Probed {
    let name = cfg.name.clone();
    let link = cfg.link_description();
    let fail = |e: BenchError| ProbeRow {
        instrument: name.clone(),
        link: link.clone(),
        role: None,
        outcome: Err(e),
    };
    let io = match connect(&cfg).await {
        Ok(io) => io,
        Err(e) => return (None, None, vec![fail(e)]),
    };
    let inst = match Instrument::new(cfg.clone(), io) {
        Ok(i) => Arc::new(i),
        Err(e) => return (None, None, vec![fail(e)]),
    };
    if let Err(e) = inst.initialise().await {
        return (Some(inst.clone()), inst.identity(), vec![fail(e)]);
    }
    let mut rows = Vec::new();
    for role in cfg.roles.iter().copied() {
        let outcome = if role.quantity().is_none() {
            Ok(None)
        } else {
            let t0 = Instant::now();
            match inst.read(role).await {
                Ok(r) => Ok(Some((r, t0.elapsed()))),
                Err(e) => Err(e),
            }
        };
        rows.push(ProbeRow {
            instrument: name.clone(),
            link: link.clone(),
            role: Some(role),
            outcome,
        });
    }
    let id = inst.identity();
    (Some(inst), id, rows)
}

/// Probe every instrument (or only `only`), all at the same time. Fails only when `only`
/// names no instrument; instrument failures are rows of the report.
pub async fn probe(cfg: &BenchConfig, only: Option<&str>) -> Result<ProbeReport, BenchError> {
    let chosen: Vec<InstrumentConfig> = match only {
        Some(n) => {
            let i = cfg
                .instruments
                .iter()
                .find(|i| i.name == n)
                .ok_or_else(|| BenchError::NoInstrument {
                    name: n.to_string(),
                    known: cfg
                        .instruments
                        .iter()
                        .map(|i| i.name.as_str())
                        .collect::<Vec<_>>()
                        .join(", "),
                })?;
            vec![i.clone()]
        }
        None => cfg.instruments.clone(),
    };
    let mut set = JoinSet::new();
    for (i, c) in chosen.into_iter().enumerate() {
        set.spawn(async move { (i, probe_one(c).await) });
    }
    let mut results = Vec::new();
    while let Some(done) = set.join_next().await {
        match done {
            Ok(r) => results.push(r),
            Err(e) if e.is_panic() => std::panic::resume_unwind(e.into_panic()),
            Err(_) => {}
        }
    }
    results.sort_by_key(|(i, _)| *i);
    // Every reading is in: now each instrument's safe state, all at once.
    let mut safe = JoinSet::new();
    for (i, (_, (inst, _, _))) in results.iter().enumerate() {
        if let Some(inst) = inst.clone() {
            safe.spawn(async move {
                (
                    i,
                    inst.name().to_string(),
                    inst.cfg.link_description(),
                    inst.safe_state().await,
                )
            });
        }
    }
    let mut failures: Vec<(usize, ProbeRow)> = Vec::new();
    while let Some(done) = safe.join_next().await {
        if let Ok((i, instrument, link, errors)) = done {
            failures.extend(errors.into_iter().map(|e| {
                (
                    i,
                    ProbeRow {
                        instrument: instrument.clone(),
                        link: link.clone(),
                        role: None,
                        outcome: Err(e),
                    },
                )
            }));
        }
    }
    let mut report = ProbeReport::default();
    for (k, (_, (_, id, rows))) in results.into_iter().enumerate() {
        if let (Some(id), Some(first)) = (id, rows.first()) {
            report.identities.push((first.instrument.clone(), id));
        }
        report.rows.extend(rows);
        report.rows.extend(
            failures
                .iter()
                .filter(|(i, _)| *i == k)
                .map(|(_, r)| r.clone()),
        );
    }
    Ok(report)
}

/// Write the probe report: identities, then a table of instrument, role, reading and
/// round-trip time; failures are listed after the table with what to check.
pub fn write_probe_table<W: Write>(w: &mut W, report: &ProbeReport) -> std::io::Result<()> {
    for (name, id) in &report.identities {
        match crate::protocol::parse_identity(id) {
            Some(i) => writeln!(
                w,
                "{name}: maker {}, model {}, serial {}, firmware {}",
                i.maker, i.model, i.serial, i.firmware
            )?,
            None => writeln!(w, "{name}: {id}")?,
        }
    }
    if !report.identities.is_empty() {
        writeln!(w)?;
    }
    let header = ["instrument", "role", "reading", "round trip", "link"];
    let mut table: Vec<[String; 5]> = Vec::new();
    for r in &report.rows {
        let role = r.role.map(|r| r.as_str().to_string()).unwrap_or("-".into());
        let (reading, rtt) = match &r.outcome {
            Ok(None) => ("(no reading: sets only)".to_string(), "-".to_string()),
            Ok(Some((reading, t))) => {
                let unit = r
                    .role
                    .and_then(|r| r.quantity())
                    .map(|q| q.unit())
                    .unwrap_or("");
                let text = match reading {
                    Reading::Value(v) => eng(*v, unit),
                    Reading::Overrange => "overrange".to_string(),
                };
                (text, eng(t.as_secs_f64(), "s"))
            }
            Err(_) => ("FAILED (see below)".to_string(), "-".to_string()),
        };
        table.push([r.instrument.clone(), role, reading, rtt, r.link.clone()]);
    }
    let mut width = header.map(|h| h.len());
    for row in &table {
        for (k, cell) in row.iter().enumerate() {
            width[k] = width[k].max(cell.chars().count());
        }
    }
    let line = |w: &mut W, cells: [&str; 5]| -> std::io::Result<()> {
        let mut s = String::new();
        for (k, c) in cells.iter().enumerate() {
            if k + 1 == cells.len() {
                s.push_str(c);
            } else {
                s.push_str(&format!("{c:<width$}  ", width = width[k]));
            }
        }
        writeln!(w, "{}", s.trim_end())
    };
    line(w, header)?;
    for row in &table {
        line(w, [&row[0], &row[1], &row[2], &row[3], &row[4]])?;
    }
    let failures: Vec<&BenchError> = report
        .rows
        .iter()
        .filter_map(|r| r.outcome.as_ref().err())
        .collect();
    if !failures.is_empty() {
        writeln!(w)?;
        for f in failures {
            writeln!(w, "failed: {f}")?;
        }
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn table_lists_readings_and_failures() {
        let report = ProbeReport {
            identities: vec![(
                "dmm".into(),
                "Regulus Simulated Bench,DMM-1,SN0042,1.0.3".into(),
            )],
            rows: vec![
                ProbeRow {
                    instrument: "dmm".into(),
                    link: "tcp 127.0.0.1:5025".into(),
                    role: Some(Role::OutputAmmeter),
                    outcome: Ok(Some((Reading::Value(0.583), Duration::from_micros(1250)))),
                },
                ProbeRow {
                    instrument: "dmm".into(),
                    link: "tcp 127.0.0.1:5025".into(),
                    role: Some(Role::OutputVoltmeter),
                    outcome: Ok(Some((Reading::Overrange, Duration::from_millis(2)))),
                },
                ProbeRow {
                    instrument: "eload".into(),
                    link: "serial /dev/pts/3 @ 9600 8N1".into(),
                    role: None,
                    outcome: Err(BenchError::Command {
                        instrument: "eload".into(),
                        detail: "connection closed".into(),
                    }),
                },
            ],
        };
        let mut out = Vec::new();
        write_probe_table(&mut out, &report).unwrap();
        let text = String::from_utf8(out).unwrap();
        let expected = "\
dmm: maker Regulus Simulated Bench, model DMM-1, serial SN0042, firmware 1.0.3

instrument  role              reading             round trip  link
dmm         output_ammeter    583 mA              1.25 ms     tcp 127.0.0.1:5025
dmm         output_voltmeter  overrange           2.00 ms     tcp 127.0.0.1:5025
eload       -                 FAILED (see below)  -           serial /dev/pts/3 @ 9600 8N1

failed: instrument 'eload': connection closed
";
        assert_eq!(text, expected);
        assert!(report.failed());
    }
}
