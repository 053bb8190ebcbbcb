//! The record readers: rows of a readings.csv (a last line cut short is skipped), run.json,
//! one run folder, and whether a record is finished, running or incomplete. Read only.

use super::error::{io_err, FileAction, RecordError};
use super::schema::{
    Cell, Cells, Flag, Flags, LoadState, Outcome, Row, RunInfo, StepKind, READINGS_FILE,
    READINGS_HEADER, RUN_FILE,
};
use super::writer::lock;
use crate::measure::Quantity;
use std::fs::{self, File};
use std::path::{Path, PathBuf};
use std::sync::OnceLock;

/// Index of a quantity's value column (its spread follows it) in the readings header, found
/// once from the header itself.
pub(super) fn value_column(q: Quantity) -> usize {
    static COLUMNS: OnceLock<Vec<(Quantity, usize)>> = OnceLock::new();
    let columns = COLUMNS.get_or_init(|| {
        Quantity::ALL
            .iter()
            .map(|&q| {
                let name = format!("{} [{}]", q.as_str(), q.unit());
                let at = READINGS_HEADER
                    .split(',')
                    .position(|h| h == name)
                    .expect("every quantity has a column in the readings header");
                (q, at)
            })
            .collect()
    });
    columns
        .iter()
        .find(|(c, _)| *c == q)
        .map(|(_, at)| *at)
        .expect("every quantity has a column in the readings header")
}

/// Number of fields of a readings row (the header's).
fn field_count() -> usize {
    static COUNT: OnceLock<usize> = OnceLock::new();
    *COUNT.get_or_init(|| READINGS_HEADER.split(',').count())
}

fn parse_row(rec: &csv::StringRecord) -> Result<Row, String> {
    let n_fields = field_count();
    if rec.len() != n_fields {
        return Err(format!("expected {n_fields} fields, found {}", rec.len()));
    }
    let field = |i: usize| rec.get(i).unwrap_or("");
    let f64_at = |i: usize, name: &str| -> Result<f64, String> {
        field(i)
            .parse::<f64>()
            .map_err(|_| format!("`{name}` is not a number: '{}'", field(i)))
    };
    let opt_at = |i: usize, name: &str| -> Result<Option<f64>, String> {
        if field(i).is_empty() {
            Ok(None)
        } else {
            f64_at(i, name).map(Some)
        }
    };
    let usize_at = |i: usize, name: &str| -> Result<usize, String> {
        field(i)
            .parse::<usize>()
            .map_err(|_| format!("`{name}` is not a whole number: '{}'", field(i)))
    };
    let cell_at = |i: usize, name: &str| -> Result<Option<Cell>, String> {
        match field(i) {
            "" => Ok(None),
            "overrange" => Ok(Some(Cell::Overrange)),
            _ => Ok(Some(Cell::Value {
                mean: f64_at(i, name)?,
                spread: opt_at(i + 1, name)?.unwrap_or(0.0),
            })),
        }
    };
    let step_kind =
        StepKind::parse_row(field(3)).ok_or_else(|| format!("unknown step_kind '{}'", field(3)))?;
    let samples = field(8)
        .parse::<u32>()
        .map_err(|_| format!("`samples` is not a whole number: '{}'", field(8)))?;
    // Fields are checked in the order the reader always used; the words of the load mode and
    // the flags, checked since they became types, come last.
    let elapsed_s = f64_at(1, "elapsed_s")?;
    let step = usize_at(2, "step")?;
    let point = usize_at(4, "point")?;
    let setpoint = opt_at(6, "setpoint")?;
    let source_volts = opt_at(7, "source_volts")?;
    let mut cells = Cells::new();
    for q in Quantity::ALL {
        cells.set(q, cell_at(value_column(q), q.as_str())?);
    }
    let load_mode = LoadState::parse(field(5)).ok_or_else(|| {
        format!(
            "unknown load_mode '{}' (expected cc, cv, cr or off)",
            field(5)
        )
    })?;
    let flags = field(19)
        .split(';')
        .filter(|s| !s.is_empty())
        .map(|w| {
            Flag::parse(w).ok_or_else(|| {
                format!(
                    "unknown flag '{w}' (expected overrange, interlock, recovery, dwell_start or dwell_end)"
                )
            })
        })
        .collect::<Result<Flags, String>>()?;
    Ok(Row {
        utc: field(0).to_string(),
        elapsed_s,
        step,
        step_kind,
        point,
        load_mode,
        setpoint,
        source_volts,
        samples,
        cells,
        flags,
    })
}

/// Read every complete row of a readings.csv. A last line cut short by a killed process
/// (no final newline) is skipped: it is the reading that was in flight.
pub fn read_rows(path: &Path) -> Result<Vec<Row>, RecordError> {
    let bytes = fs::read(path).map_err(io_err(FileAction::Read, path))?;
    let complete = match bytes.iter().rposition(|b| *b == b'\n') {
        Some(p) => &bytes[..=p],
        None => &bytes[..0],
    };
    let mut rdr = csv::ReaderBuilder::new()
        .has_headers(true)
        .flexible(true)
        .from_reader(complete);
    let header = rdr.headers().map_err(|e| RecordError::Csv {
        path: path.to_path_buf(),
        line: 1,
        message: e.to_string(),
    })?;
    let expected: Vec<&str> = READINGS_HEADER.split(',').collect();
    if header.iter().collect::<Vec<_>>() != expected {
        return Err(RecordError::Csv {
            path: path.to_path_buf(),
            line: 1,
            message: "the header is not a regulus readings header (schema version 1)".into(),
        });
    }
    let mut rows = Vec::new();
    for rec in rdr.records() {
        let rec = rec.map_err(|e| RecordError::Csv {
            path: path.to_path_buf(),
            line: e.position().map(|p| p.line()).unwrap_or(0),
            message: e.to_string(),
        })?;
        let line = rec.position().map(|p| p.line()).unwrap_or(0);
        rows.push(parse_row(&rec).map_err(|message| RecordError::Csv {
            path: path.to_path_buf(),
            line,
            message,
        })?);
    }
    Ok(rows)
}

/// Whether a record is finished, still being written, or was left behind by a dead process.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum RecordState {
    /// run.json holds a final outcome.
    Finished(Outcome),
    /// Outcome `running` and a live writer holds the record.
    Running,
    /// Outcome `running` but no writer is alive: the run was cut short.
    Incomplete,
}

impl RecordState {
    /// The word a summary, the index and the store keep: `finished`, `running` or
    /// `incomplete`.
    pub fn as_str(self) -> &'static str {
        match self {
            RecordState::Finished(_) => "finished",
            RecordState::Running => "running",
            RecordState::Incomplete => "incomplete",
        }
    }

    /// The outcome and state from their kept words ([`Outcome::as_str`], [`Self::as_str`]);
    /// a state word it does not know reads as incomplete.
    pub fn from_words(outcome: &str, state: &str) -> (Outcome, RecordState) {
        let outcome = Outcome::from_word(outcome);
        let state = match state {
            "finished" => RecordState::Finished(outcome),
            "running" => RecordState::Running,
            _ => RecordState::Incomplete,
        };
        (outcome, state)
    }
}

/// One run read back from disk.
#[derive(Debug, Clone)]
pub struct RunRecord {
    pub dir: PathBuf,
    pub info: RunInfo,
    pub state: RecordState,
    pub rows: Vec<Row>,
}

/// The state of a record from its run.json and the writer's lock.
pub fn record_state(dir: &Path, info: &RunInfo) -> RecordState {
    if info.outcome != Outcome::Running {
        return RecordState::Finished(info.outcome);
    }
    let Ok(f) = File::open(dir.join(READINGS_FILE)) else {
        return RecordState::Incomplete;
    };
    // A process that forks (any program starting another) briefly shares the writer's open
    // file, lock included, until the child execs: only a lock held on three looks spaced
    // 20 ms apart is a live writer.
    for look in 0..3 {
        if look > 0 {
            std::thread::sleep(std::time::Duration::from_millis(20));
        }
        if !lock::held_elsewhere(&f) {
            return RecordState::Incomplete;
        }
    }
    RecordState::Running
}

/// Read run.json of a run folder.
pub fn read_info(dir: &Path) -> Result<RunInfo, RecordError> {
    let path = dir.join(RUN_FILE);
    let bytes = fs::read(&path).map_err(io_err(FileAction::Read, &path))?;
    serde_json::from_slice(&bytes).map_err(|e| RecordError::Invalid {
        path,
        message: format!("not a regulus run.json: {e}"),
    })
}

/// Read one run folder: run.json, its state, and its rows.
pub fn read_run(dir: &Path) -> Result<RunRecord, RecordError> {
    let info = read_info(dir)?;
    let state = record_state(dir, &info);
    let rows = read_rows(&dir.join(READINGS_FILE))?;
    Ok(RunRecord {
        dir: dir.to_path_buf(),
        info,
        state,
        rows,
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::measure::LoadMode;
    use crate::record::row_fields;

    fn record(fields: &[String]) -> csv::StringRecord {
        csv::StringRecord::from(fields.to_vec())
    }

    #[test]
    fn kept_words_read_back_as_what_was_kept() {
        // The words are the record layout's (docs/ARCHITECTURE.md "Record layout").
        for o in [
            Outcome::Running,
            Outcome::Completed,
            Outcome::Aborted,
            Outcome::Error,
            Outcome::Failed,
        ] {
            assert_eq!(Outcome::from_word(o.as_str()), o);
            for st in [
                RecordState::Finished(o),
                RecordState::Running,
                RecordState::Incomplete,
            ] {
                assert_eq!(RecordState::from_words(o.as_str(), st.as_str()), (o, st));
            }
        }
        // A word nobody wrote is never taken for a finished record.
        assert_eq!(
            RecordState::from_words("passed", "done"),
            (Outcome::Running, RecordState::Incomplete)
        );
    }

    #[test]
    fn value_columns_follow_the_documented_header() {
        // Header order: docs/ARCHITECTURE.md "Record layout".
        assert_eq!(value_column(Quantity::OutputVoltage), 9);
        assert_eq!(value_column(Quantity::OutputCurrent), 11);
        assert_eq!(value_column(Quantity::InputVoltage), 13);
        assert_eq!(value_column(Quantity::InputCurrent), 15);
        assert_eq!(value_column(Quantity::Temperature), 17);
    }

    #[test]
    fn a_written_row_reads_back_equal() {
        let row = Row {
            utc: "2026-12-01T22:40:01.123Z".into(),
            elapsed_s: 2.5,
            step: 1,
            step_kind: StepKind::ShortCircuit,
            point: 3,
            load_mode: LoadState::On(LoadMode::ConstantResistance),
            setpoint: Some(0.1),
            source_volts: None,
            samples: 2,
            cells: [
                (
                    Quantity::InputCurrent,
                    Some(Cell::Value {
                        mean: 0.25,
                        spread: 0.5,
                    }),
                ),
                (Quantity::Temperature, Some(Cell::Overrange)),
            ]
            .into(),
            flags: vec![Flag::DwellEnd, Flag::Overrange].into(),
        };
        let fields = row_fields(&row);
        assert_eq!(fields[15], "0.25");
        assert_eq!(fields[16], "0.5");
        assert_eq!(fields[17], "overrange");
        assert_eq!(fields[19], "dwell_end;overrange", "flags keep their order");
        assert_eq!(parse_row(&record(&fields)), Ok(row));
    }

    #[test]
    fn unknown_words_are_refused_with_the_expected_ones() {
        let mut fields: Vec<String> = READINGS_HEADER.split(',').map(|_| String::new()).collect();
        fields[1] = "0.0".into();
        fields[2] = "0".into();
        fields[3] = "soak".into();
        fields[4] = "0".into();
        fields[5] = "off".into();
        fields[8] = "1".into();
        fields[19] = "dwell".into();
        let e = parse_row(&record(&fields)).unwrap_err();
        assert!(e.contains("unknown flag 'dwell'"), "{e}");
        fields[19] = String::new();
        // The pre-flight reading's kind reads back (a record row, not a plan step).
        fields[3] = "preflight".into();
        assert_eq!(
            parse_row(&record(&fields)).map(|r| r.step_kind),
            Ok(StepKind::Preflight)
        );
        fields[3] = "soak".into();
        fields[5] = "xx".into();
        let e = parse_row(&record(&fields)).unwrap_err();
        assert!(e.contains("unknown load_mode 'xx'"), "{e}");
        fields[5] = "off".into();
        assert!(parse_row(&record(&fields)).is_ok());
    }

    #[test]
    fn a_recorded_file_reads_by_quantity_and_writes_back_the_same_rows() {
        // tests/report_golden/readings.csv: invented data in the documented layout.
        let path = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/report_golden/readings.csv");
        let rows = read_rows(&path).expect("the golden readings read");
        let first = &rows[0];
        assert_eq!(first.load_mode, LoadState::On(LoadMode::ConstantCurrent));
        assert_eq!(first.value(Quantity::OutputVoltage), Some(12.0));
        assert_eq!(
            first.cell(Quantity::Temperature),
            Some(Cell::Value {
                mean: 25.0,
                spread: 0.1
            })
        );
        assert_eq!(first.cell(Quantity::InputCurrent), None);
        assert!(rows.iter().any(|r| r.has_flag(Flag::DwellStart)));
        assert!(rows.iter().any(|r| r.has_flag("recovery")));
        // Written with the writer's own field formatting, the rows read back equal.
        for r in &rows {
            assert_eq!(parse_row(&record(&row_fields(r))).as_ref(), Ok(r));
        }
    }
}
