//! The store's schema as numbered migrations, applied in order and once: each runs in a
//! transaction that first takes an advisory lock, so stations starting together do not race,
//! and is recorded in `regulus_migration`. A migration, once released, is never edited: a
//! change is a new migration.

use super::error::{sql, StoreError};
use tokio_postgres::Client;

/// Lock key of the migration step (any constant shared by every station).
const MIGRATION_LOCK: i64 = 0x0072_6567_756c_7573;

/// The migrations, in order: (version, what it does, SQL).
pub const MIGRATIONS: &[(i32, &str, &str)] = &[(
    1,
    "stations, designs, units, runs, instruments, readings, metrics, verdicts, artifacts",
    r#"
CREATE TABLE station (
    id          text PRIMARY KEY,
    first_seen  timestamptz NOT NULL DEFAULT now()
);
CREATE TABLE design (
    sha256      text PRIMARY KEY,
    name        text NOT NULL,
    revision    text,
    content     bytea
);
CREATE TABLE unit (
    serial      text PRIMARY KEY,
    first_seen  timestamptz NOT NULL DEFAULT now()
);
CREATE TABLE run (
    run_id        text PRIMARY KEY,
    station_id    text NOT NULL REFERENCES station (id),
    unit_serial   text NOT NULL REFERENCES unit (serial),
    design_sha256 text NOT NULL REFERENCES design (sha256),
    folder        text NOT NULL,
    plan_name     text NOT NULL,
    started_utc   timestamptz NOT NULL,
    ended_utc     timestamptz,
    outcome       text NOT NULL,
    record_state  text NOT NULL,
    verdict       text,
    result        text NOT NULL,
    operator      text,
    reason        text,
    row_count     bigint NOT NULL,
    tool_version  text NOT NULL,
    uploaded_at   timestamptz NOT NULL DEFAULT now()
);
CREATE INDEX run_by_unit ON run (unit_serial, started_utc);
CREATE INDEX run_by_design ON run (design_sha256, started_utc);
CREATE TABLE instrument (
    id        bigserial PRIMARY KEY,
    identity  text NOT NULL UNIQUE
);
CREATE TABLE run_instrument (
    run_id        text NOT NULL REFERENCES run (run_id) ON DELETE CASCADE,
    name          text NOT NULL,
    roles         text NOT NULL,
    link          text NOT NULL,
    instrument_id bigint REFERENCES instrument (id),
    PRIMARY KEY (run_id, name)
);
CREATE TABLE reading (
    run_id                 text NOT NULL REFERENCES run (run_id) ON DELETE CASCADE,
    seq                    integer NOT NULL,
    utc                    timestamptz NOT NULL,
    elapsed_s              double precision NOT NULL,
    step                   integer NOT NULL,
    step_kind              text NOT NULL,
    point                  integer NOT NULL,
    load_mode              text NOT NULL,
    setpoint               double precision,
    source_volts           double precision,
    samples                integer NOT NULL,
    output_voltage         double precision,
    output_voltage_spread  double precision,
    output_current         double precision,
    output_current_spread  double precision,
    input_voltage          double precision,
    input_voltage_spread   double precision,
    input_current          double precision,
    input_current_spread   double precision,
    temperature            double precision,
    temperature_spread     double precision,
    flags                  text NOT NULL,
    PRIMARY KEY (run_id, seq)
);
CREATE TABLE metric (
    run_id  text NOT NULL REFERENCES run (run_id) ON DELETE CASCADE,
    name    text NOT NULL,
    value   double precision,
    PRIMARY KEY (run_id, name)
);
CREATE TABLE verdict (
    run_id    text NOT NULL REFERENCES run (run_id) ON DELETE CASCADE,
    metric    text NOT NULL,
    measured  double precision NOT NULL,
    lower     double precision NOT NULL,
    upper     double precision NOT NULL,
    unit      text NOT NULL,
    verdict   text NOT NULL,
    PRIMARY KEY (run_id, metric)
);
CREATE TABLE artifact (
    run_id  text NOT NULL REFERENCES run (run_id) ON DELETE CASCADE,
    name    text NOT NULL,
    sha256  text NOT NULL,
    content bytea NOT NULL,
    PRIMARY KEY (run_id, name)
);
"#,
)];

/// Apply the migrations the store lacks; returns how many were applied.
pub async fn migrate(client: &mut Client) -> Result<usize, StoreError> {
    let tx = client
        .transaction()
        .await
        .map_err(sql("start a migration"))?;
    tx.execute("SELECT pg_advisory_xact_lock($1)", &[&MIGRATION_LOCK])
        .await
        .map_err(sql("lock the schema for migration"))?;
    tx.batch_execute(
        "CREATE TABLE IF NOT EXISTS regulus_migration (
             version integer PRIMARY KEY,
             what text NOT NULL,
             applied_at timestamptz NOT NULL DEFAULT now())",
    )
    .await
    .map_err(sql("create the migration table"))?;
    let done: Vec<i32> = tx
        .query("SELECT version FROM regulus_migration", &[])
        .await
        .map_err(sql("read the applied migrations"))?
        .iter()
        .map(|r| r.get(0))
        .collect();
    let mut applied = 0;
    for (version, what, text) in MIGRATIONS {
        if done.contains(version) {
            continue;
        }
        tx.batch_execute(text)
            .await
            .map_err(sql(format!("apply migration {version} ({what})")))?;
        tx.execute(
            "INSERT INTO regulus_migration (version, what) VALUES ($1, $2)",
            &[version, what],
        )
        .await
        .map_err(sql("record the migration"))?;
        applied += 1;
    }
    tx.commit().await.map_err(sql("commit the migrations"))?;
    Ok(applied)
}
