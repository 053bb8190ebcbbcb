//! Record layout shared by the writer (runner) and the readers (analysis, report, history).
//! See docs/ARCHITECTURE.md "Record layout". The layout and its types live in `schema`, the
//! writer (folder creation, snapshots, rows appended and flushed one by one, run.json replaced
//! atomically) in `writer`, the readers (rows, one run, its state) in `reader` and a unit's
//! history in `history`. It never rewrites or deletes readings and knows nothing about
//! instruments or plans.

mod error;
mod history;
mod reader;
mod schema;
mod writer;

pub use error::{FileAction, RecordError};
pub use history::{list_runs, HistoryEntry};
pub use reader::{read_info, read_rows, read_run, record_state, RecordState, RunRecord};
pub use schema::{
    check_component, folder_name, utc_string, Cell, Cells, DesignRef, Flag, Flags, LoadState,
    Outcome, Row, RunInfo, Snapshots, StepKind, BENCH_SNAPSHOT, DESIGN_SNAPSHOT, PLAN_SNAPSHOT,
    READINGS_FILE, READINGS_HEADER, RUN_FILE, SCHEMA_VERSION,
};
pub use writer::{row_fields, sync_dir, RecordWriter};
