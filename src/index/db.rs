//! The SQLite side of the index: the schema (versioned with `user_version`), adding or
//! replacing a record's row, rebuilding from the folders, checking one unit's rows against its
//! folders, and the queries history, compare and the dashboard use. Several processes may
//! write at once (WAL journal, a busy timeout).

use super::prejudged::{prejudged_key, Expectations, Prejudged};
use super::scan::{mtime_ns, scan_record};
use super::types::{IndexError, IndexedRun, JudgingRow, MetricsRow};
use crate::compare::Judging;
use crate::compare::{KeyMetric, KeyValues, Verdict};
use crate::record::{self, RecordError};
use crate::station::FloorResult;
use rusqlite::{params, Connection, OptionalExtension};
use std::path::{Path, PathBuf};
use std::time::Duration;

/// File name of the index in a records root.
pub const INDEX_FILE: &str = ".regulus-index.sqlite";
/// Schema version of the index (a different version is rebuilt). A change to how a run is
/// compared with its design (the judgements the index keeps, `Prejudged`) comes with a new
/// version, so they are made again from the folders. 6: the metrics gained the pre-flight
/// reading, and the diagnosis changed.
const SCHEMA: i64 = 6;

/// Where the index of a records root lives.
pub fn index_path(records: &Path) -> PathBuf {
    records.join(INDEX_FILE)
}

/// Which runs a query wants (all conditions must hold; `None` is any).
#[derive(Debug, Clone, Default)]
pub struct RunFilter {
    pub unit: Option<String>,
    /// A design by name or by content hash (SHA-256 hex).
    pub design: Option<String>,
    pub station: Option<String>,
}

/// What a rebuild found.
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub struct Rebuilt {
    pub indexed: usize,
    /// Folders that could not be read, with the reason.
    pub skipped: Vec<String>,
}

/// An open index of one records root.
pub struct Index {
    conn: Connection,
    root: PathBuf,
    path: PathBuf,
}

const COLUMNS: &str = "unit, folder, station, operator, design_name, design_sha256, plan_name, \
started_utc, ended_utc, outcome, state, verdict, result, rows, output_voltage, load_regulation, \
output_resistance, limit_current, short_circuit_current, short_circuit_drift, metrics_json, \
run_mtime, summary_mtime, judging_json, metrics_bin, prejudged_key, prejudged_bin";

impl Index {
    /// Open (creating when missing) the index of a records root; the root must exist.
    pub fn open(records: &Path) -> Result<Index, IndexError> {
        let path = index_path(records);
        let sq = |source| IndexError::Sqlite {
            path: path.clone(),
            source,
        };
        if !records.is_dir() {
            return Err(IndexError::List {
                path: records.to_path_buf(),
                source: std::io::Error::new(std::io::ErrorKind::NotFound, "no such folder"),
            });
        }
        let conn = Connection::open(&path).map_err(sq)?;
        conn.busy_timeout(Duration::from_secs(10)).map_err(sq)?;
        conn.pragma_update(None, "journal_mode", "WAL")
            .map_err(sq)?;
        conn.pragma_update(None, "synchronous", "NORMAL")
            .map_err(sq)?;
        // Reads through a memory map (up to 1 GiB of the file) instead of a copy per page.
        conn.pragma_update(None, "mmap_size", 1i64 << 30)
            .map_err(sq)?;
        let version: i64 = conn
            .pragma_query_value(None, "user_version", |r| r.get(0))
            .map_err(sq)?;
        let made_anew = version != SCHEMA;
        if made_anew {
            conn.execute_batch(&format!(
                "BEGIN IMMEDIATE;
                 DROP VIEW IF EXISTS runs_all;
                 DROP TABLE IF EXISTS runs;
                 DROP TABLE IF EXISTS run_data;
                 -- what is read for many runs at once: small rows, several to a page
                 CREATE TABLE runs (
                   unit TEXT NOT NULL, folder TEXT NOT NULL, station TEXT, operator TEXT,
                   design_name TEXT NOT NULL, design_sha256 TEXT NOT NULL, plan_name TEXT NOT NULL,
                   started_utc TEXT NOT NULL, ended_utc TEXT, outcome TEXT NOT NULL,
                   state TEXT NOT NULL, verdict TEXT, result TEXT NOT NULL, rows INTEGER NOT NULL,
                   output_voltage REAL, load_regulation REAL, output_resistance REAL,
                   limit_current REAL, short_circuit_current REAL, short_circuit_drift REAL,
                   run_mtime INTEGER NOT NULL, summary_mtime INTEGER NOT NULL,
                   -- read for every run by `compare --index` against the run's own design
                   prejudged_key TEXT, prejudged_bin BLOB,
                   PRIMARY KEY (unit, folder));
                 -- the large columns, read only for the runs that need them
                 CREATE TABLE run_data (
                   unit TEXT NOT NULL, folder TEXT NOT NULL,
                   judging_json TEXT, metrics_bin BLOB,
                   -- last: a row's large text goes to overflow pages that reading the
                   -- columns before it never touches
                   metrics_json TEXT,
                   PRIMARY KEY (unit, folder));
                 CREATE VIEW runs_all AS SELECT * FROM runs JOIN run_data USING (unit, folder);
                 CREATE INDEX runs_by_design ON runs (design_sha256, started_utc);
                 CREATE INDEX runs_by_design_name ON runs (design_name, started_utc);
                 CREATE INDEX runs_by_started ON runs (started_utc);
                 PRAGMA user_version = {SCHEMA};
                 COMMIT;"
            ))
            .map_err(sq)?;
        }
        let mut idx = Index {
            conn,
            root: records.to_path_buf(),
            path,
        };
        // A new index, or one of another schema (dropped above), is filled from the folders
        // at once: an empty index would read as a records folder without runs.
        if made_anew {
            idx.rebuild()?;
        }
        Ok(idx)
    }

    fn sq(&self) -> impl Fn(rusqlite::Error) -> IndexError + '_ {
        move |source| IndexError::Sqlite {
            path: self.path.clone(),
            source,
        }
    }

    /// Add or replace the row of one record folder.
    pub fn add_record(&mut self, dir: &Path) -> Result<(), IndexError> {
        let run = scan_record(dir, &mut Expectations::default())?;
        self.upsert(&[run])
    }

    /// Add or replace rows, in one transaction.
    pub fn upsert(&mut self, runs: &[IndexedRun]) -> Result<(), IndexError> {
        let path = self.path.clone();
        let sq = |source| IndexError::Sqlite {
            path: path.clone(),
            source,
        };
        let tx = self.conn.transaction().map_err(sq)?;
        {
            let mut st = tx
                .prepare_cached(
                    "INSERT OR REPLACE INTO runs (unit, folder, station, operator, design_name, \
                     design_sha256, plan_name, started_utc, ended_utc, outcome, state, verdict, \
                     result, rows, output_voltage, load_regulation, output_resistance, \
                     limit_current, short_circuit_current, short_circuit_drift, run_mtime, \
                     summary_mtime, prejudged_key, prejudged_bin) VALUES (?1, ?2, ?3, ?4, ?5, \
                     ?6, ?7, ?8, ?9, ?10, ?11, ?12, ?13, ?14, ?15, ?16, ?17, ?18, ?19, ?20, ?21, \
                     ?22, ?23, ?24)",
                )
                .map_err(sq)?;
            let mut data = tx
                .prepare_cached(
                    "INSERT OR REPLACE INTO run_data (unit, folder, judging_json, metrics_bin, \
                     metrics_json) VALUES (?1, ?2, ?3, ?4, ?5)",
                )
                .map_err(sq)?;
            for r in runs {
                let v = |k| r.values.get(k);
                st.execute(params![
                    r.unit,
                    r.folder,
                    r.station,
                    r.operator,
                    r.design_name,
                    r.design_sha256,
                    r.plan_name,
                    r.started_utc,
                    r.ended_utc,
                    r.outcome,
                    r.state,
                    r.verdict.map(|v| v.as_str()),
                    r.result.as_str(),
                    r.rows,
                    v(KeyMetric::OutputVoltage),
                    v(KeyMetric::LoadRegulation),
                    v(KeyMetric::OutputResistance),
                    v(KeyMetric::LimitCurrent),
                    v(KeyMetric::ShortCircuitCurrent),
                    v(KeyMetric::ShortCircuitDrift),
                    r.run_mtime,
                    r.summary_mtime,
                    r.prejudged_key,
                    r.prejudged_bin,
                ])
                .map_err(sq)?;
                data.execute(params![
                    r.unit,
                    r.folder,
                    r.judging_json,
                    r.metrics_bin,
                    r.metrics_json,
                ])
                .map_err(sq)?;
            }
        }
        tx.commit().map_err(sq)
    }

    /// Make the index again from the folders: every `<unit>/<run>` folder with a run.json.
    pub fn rebuild(&mut self) -> Result<Rebuilt, IndexError> {
        let mut out = Rebuilt::default();
        let mut runs = Vec::new();
        let mut designs = Expectations::default();
        for unit in list_dirs(&self.root)? {
            for dir in list_dirs(&unit)? {
                match scan_record(&dir, &mut designs) {
                    Ok(r) => runs.push(r),
                    Err(e) => out.skipped.push(format!("{}: {e}", dir.display())),
                }
            }
        }
        out.indexed = runs.len();
        let sq = self.sq();
        self.conn
            .execute_batch("DELETE FROM runs; DELETE FROM run_data;")
            .map_err(&sq)?;
        drop(sq);
        self.upsert(&runs)?;
        Ok(out)
    }

    /// Check a unit's rows against its folders: add folders that are new or changed (run.json
    /// or summary.json rewritten, or still running when indexed), drop rows whose folder is
    /// gone. Returns folders that could not be read.
    pub fn refresh_unit(&mut self, unit: &str) -> Result<Vec<String>, IndexError> {
        record::check_component("unit id", unit).map_err(|m| {
            IndexError::Record(Box::new(RecordError::Invalid {
                path: self.root.clone(),
                message: m,
            }))
        })?;
        let unit_dir = self.root.join(unit);
        let dirs = if unit_dir.is_dir() {
            list_dirs(&unit_dir)?
        } else {
            Vec::new()
        };
        let known: Vec<(String, i64, i64, String)> = {
            let sq = self.sq();
            let mut st = self
                .conn
                .prepare_cached(
                    "SELECT folder, run_mtime, summary_mtime, state FROM runs WHERE unit = ?1",
                )
                .map_err(&sq)?;
            let rows = st
                .query_map([unit], |r| Ok((r.get(0)?, r.get(1)?, r.get(2)?, r.get(3)?)))
                .map_err(&sq)?;
            rows.collect::<Result<_, _>>().map_err(&sq)?
        };
        let mut fresh = Vec::new();
        let mut skipped = Vec::new();
        let mut designs = Expectations::default();
        let mut names = Vec::new();
        for dir in &dirs {
            let name = dir
                .file_name()
                .map(|n| n.to_string_lossy().into_owned())
                .unwrap_or_default();
            let run_m = mtime_ns(&dir.join(record::RUN_FILE));
            let sum_m = mtime_ns(&dir.join("summary.json"));
            let current = known.iter().any(|(f, rm, sm, state)| {
                f == &name && *rm == run_m && *sm == sum_m && state != "running"
            });
            names.push(name);
            if !current {
                match scan_record(dir, &mut designs) {
                    Ok(r) => fresh.push(r),
                    Err(e) => skipped.push(format!("{}: {e}", dir.display())),
                }
            }
        }
        let gone: Vec<&String> = known
            .iter()
            .map(|k| &k.0)
            .filter(|f| !names.contains(f))
            .collect();
        if !gone.is_empty() {
            let sq = self.sq();
            for f in gone {
                for table in ["runs", "run_data"] {
                    self.conn
                        .execute(
                            &format!("DELETE FROM {table} WHERE unit = ?1 AND folder = ?2"),
                            [unit, f],
                        )
                        .map_err(&sq)?;
                }
            }
        }
        if !fresh.is_empty() {
            self.upsert(&fresh)?;
        }
        Ok(skipped)
    }

    /// Runs matching a filter, oldest first.
    pub fn runs(&self, filter: &RunFilter) -> Result<Vec<IndexedRun>, IndexError> {
        let sq = self.sq();
        let mut sql = format!("SELECT {COLUMNS} FROM runs_all WHERE 1=1");
        let mut args: Vec<String> = Vec::new();
        if let Some(u) = &filter.unit {
            args.push(u.clone());
            sql.push_str(&format!(" AND unit = ?{}", args.len()));
        }
        if let Some(d) = &filter.design {
            args.push(d.clone());
            sql.push_str(&format!(
                " AND (design_name = ?{n} OR design_sha256 = ?{n})",
                n = args.len()
            ));
        }
        if let Some(s) = &filter.station {
            args.push(s.clone());
            sql.push_str(&format!(" AND station = ?{}", args.len()));
        }
        sql.push_str(" ORDER BY started_utc, unit, folder");
        let mut st = self.conn.prepare(&sql).map_err(&sq)?;
        let rows = st
            .query_map(rusqlite::params_from_iter(args.iter()), row_to_run)
            .map_err(&sq)?;
        rows.collect::<Result<Vec<_>, _>>().map_err(&sq)
    }

    /// For re-judging runs: (unit, folder, outcome, state, metrics) of every run with
    /// metrics (optionally one unit's), oldest first. Only the columns needed are read and
    /// the metrics are parsed on every core.
    pub fn metrics_of_runs(&self, unit: Option<&str>) -> Result<Vec<MetricsRow>, IndexError> {
        let sq = self.sq();
        let mut st = self
            .conn
            .prepare(
                "SELECT unit, folder, outcome, state, metrics_json FROM runs_all \
                 WHERE metrics_json IS NOT NULL AND (?1 IS NULL OR unit = ?1) \
                 ORDER BY started_utc, unit, folder",
            )
            .map_err(&sq)?;
        let raw: Vec<(String, String, String, String, String)> = st
            .query_map([unit], |r| {
                Ok((r.get(0)?, r.get(1)?, r.get(2)?, r.get(3)?, r.get(4)?))
            })
            .map_err(&sq)?
            .collect::<Result<_, _>>()
            .map_err(&sq)?;
        let parsed = crate::par::map(raw, |(u, f, o, st, m)| {
            let metrics = serde_json::from_str(&m).ok()?;
            let (outcome, state) = IndexedRun::outcome_of(&o, &st);
            Some((u, f, outcome, state, metrics))
        });
        Ok(parsed.into_iter().flatten().collect())
    }

    /// Every run (optionally one unit's) as `compare --index` re-judges it against the design
    /// whose content hash is `design_sha256`, oldest first. A run judged against that very
    /// design when it was indexed ([`Prejudged`], under [`prejudged_key`]) comes with that
    /// judgement and nothing else is read for it; for every other run the compact metrics
    /// (without notes) are read, and the notes only for a run that lacks a metric its plan
    /// promised (they say why). Parsed on every core.
    pub fn judging_rows(
        &self,
        unit: Option<&str>,
        design_sha256: &str,
    ) -> Result<Vec<JudgingRow>, IndexError> {
        type Raw = (
            String,
            String,
            String,
            String,
            String,
            String,
            Option<Vec<u8>>,
            Option<Vec<u8>>,
            Option<String>,
        );
        let sq = self.sq();
        let key = prejudged_key(design_sha256);
        // No ORDER BY: sorting in SQL would carry every row's blobs through the sort. A run
        // with a usable judgement skips its metrics and judging (in the other table).
        let mut st = self
            .conn
            .prepare(
                "SELECT unit, folder, started_utc, design_sha256, outcome, state, \
                 CASE WHEN prejudged_key = ?2 THEN prejudged_bin END, \
                 CASE WHEN prejudged_key IS NOT ?2 OR prejudged_bin IS NULL THEN (SELECT \
                 metrics_bin FROM run_data d WHERE d.unit = r.unit AND d.folder = r.folder) END, \
                 CASE WHEN prejudged_key IS NOT ?2 OR prejudged_bin IS NULL THEN (SELECT \
                 judging_json FROM run_data d WHERE d.unit = r.unit AND d.folder = r.folder) END \
                 FROM runs r WHERE (?1 IS NULL OR unit = ?1)",
            )
            .map_err(&sq)?;
        let raw: Vec<Raw> = st
            .query_map(params![unit, key], |r| {
                Ok((
                    r.get(0)?,
                    r.get(1)?,
                    r.get(2)?,
                    r.get(3)?,
                    r.get(4)?,
                    r.get(5)?,
                    r.get(6)?,
                    r.get(7)?,
                    r.get(8)?,
                ))
            })
            .map_err(&sq)?
            .collect::<Result<_, _>>()
            .map_err(&sq)?;
        let parse = |(unit, folder, started_utc, design_sha256, o, s, p, m, j): Raw| {
            let (outcome, state) = IndexedRun::outcome_of(&o, &s);
            let prejudged = p.as_deref().and_then(Prejudged::decode);
            // A judgement that does not decode: judged from the metrics instead (read below).
            let undecoded = p.is_some() && prejudged.is_none();
            let row = JudgingRow {
                unit,
                folder,
                started_utc,
                design_sha256,
                outcome,
                state,
                metrics: m.and_then(|m| postcard::from_bytes(&m).ok()).map(Box::new),
                judging: j.and_then(|j| serde_json::from_str::<Judging>(&j).ok()),
                prejudged,
            };
            (row, undecoded)
        };
        // Sorted before parsing: the raw rows are small to move.
        let mut raw = raw;
        raw.sort_unstable_by(|a, b| (&a.2, &a.0, &a.1).cmp(&(&b.2, &b.0, &b.1)));
        let mut rows = crate::par::map(raw, parse);
        let mut notes = self
            .conn
            .prepare(
                "SELECT metrics_json, judging_json FROM run_data WHERE unit = ?1 AND folder = ?2",
            )
            .map_err(&sq)?;
        for (r, undecoded) in &mut rows {
            let lacking = match (&r.metrics, &r.judging) {
                (Some(m), Some(j)) => !crate::compare::missing_metrics(m, &j.promised).is_empty(),
                _ => false,
            };
            if lacking || *undecoded {
                let (full, judging): (Option<String>, Option<String>) = notes
                    .query_row([&r.unit, &r.folder], |row| Ok((row.get(0)?, row.get(1)?)))
                    .optional()
                    .map_err(&sq)?
                    .unwrap_or_default();
                r.metrics = full
                    .and_then(|t| serde_json::from_str(&t).ok())
                    .map(Box::new);
                if *undecoded {
                    r.judging = judging.and_then(|j| serde_json::from_str(&j).ok());
                }
            }
        }
        Ok(rows.into_iter().map(|(r, _)| r).collect())
    }

    /// Number of indexed runs.
    pub fn len(&self) -> Result<usize, IndexError> {
        let sq = self.sq();
        let n: i64 = self
            .conn
            .query_row("SELECT COUNT(*) FROM runs", [], |r| r.get(0))
            .map_err(&sq)?;
        Ok(n as usize)
    }

    pub fn is_empty(&self) -> Result<bool, IndexError> {
        Ok(self.len()? == 0)
    }

    /// The row of one record, if indexed.
    pub fn get(&self, unit: &str, folder: &str) -> Result<Option<IndexedRun>, IndexError> {
        let sq = self.sq();
        self.conn
            .query_row(
                &format!("SELECT {COLUMNS} FROM runs_all WHERE unit = ?1 AND folder = ?2"),
                [unit, folder],
                row_to_run,
            )
            .optional()
            .map_err(&sq)
    }
}

fn row_to_run(r: &rusqlite::Row<'_>) -> rusqlite::Result<IndexedRun> {
    let verdict: Option<String> = r.get(11)?;
    let result: String = r.get(12)?;
    let mut values = Vec::with_capacity(KeyMetric::ALL.len());
    for (k, col) in KeyMetric::ALL.iter().zip(14..) {
        values.push((*k, r.get::<_, Option<f64>>(col)?));
    }
    Ok(IndexedRun {
        unit: r.get(0)?,
        folder: r.get(1)?,
        station: r.get(2)?,
        operator: r.get(3)?,
        design_name: r.get(4)?,
        design_sha256: r.get(5)?,
        plan_name: r.get(6)?,
        started_utc: r.get(7)?,
        ended_utc: r.get(8)?,
        outcome: r.get(9)?,
        state: r.get(10)?,
        verdict: verdict.as_deref().and_then(parse_verdict),
        result: FloorResult::parse(&result).unwrap_or(FloorResult::Incomplete),
        rows: r.get(13)?,
        values: KeyValues(values),
        metrics_json: r.get(20)?,
        run_mtime: r.get(21)?,
        summary_mtime: r.get(22)?,
        judging_json: r.get(23)?,
        metrics_bin: r.get(24)?,
        prejudged_key: r.get(25)?,
        prejudged_bin: r.get(26)?,
    })
}

fn parse_verdict(s: &str) -> Option<Verdict> {
    [
        Verdict::Pass,
        Verdict::Marginal,
        Verdict::Incomplete,
        Verdict::Fail,
        Verdict::Error,
    ]
    .into_iter()
    .find(|v| v.as_str() == s)
}

/// Sub-folders of a folder, sorted by name; names starting with a dot are not records.
fn list_dirs(dir: &Path) -> Result<Vec<PathBuf>, IndexError> {
    let err = |source| IndexError::List {
        path: dir.to_path_buf(),
        source,
    };
    let mut out = Vec::new();
    for e in std::fs::read_dir(dir).map_err(err)? {
        let e = e.map_err(err)?;
        let name = e.file_name();
        if name.to_string_lossy().starts_with('.') {
            continue;
        }
        if e.file_type().map(|t| t.is_dir()).unwrap_or(false) {
            out.push(e.path());
        }
    }
    out.sort();
    Ok(out)
}
