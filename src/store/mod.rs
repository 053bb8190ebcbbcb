//! The shared record store on a PostgreSQL server the site runs: its schema, applied by
//! numbered migrations (`migrations`); uploading one finished record in one transaction,
//! readings by bulk COPY (`upload`); syncing a records folder, idempotently and safely from
//! several stations at once, with a local queue of what is not yet in the store (`sync`);
//! and the queries history, compare and the dashboard make across stations (`query`).
//! Never writes into a record folder except the sync's own list of uploaded runs in the
//! records root.
//! This file only declares and re-exports.

mod error;
mod migrations;
mod query;
mod sync;
mod upload;

pub use error::StoreError;
pub use migrations::{migrate, MIGRATIONS};
pub use query::{design_content, store_metrics, store_runs, StoreMetrics, StoreRun};
pub use sync::{connect, pending, sync_folder, SyncReport, SYNCED_FILE};
pub use upload::{run_id, upload_record, Uploaded};
