//! The shared record store on a real PostgreSQL server (the system's server that `.ci/run`
//! starts, a database per test; a private cluster where a test stops the server): uploads,
//! idempotent reruns, history across stations, the station's upload after each unit, and
//! eight stations syncing at once while syncs are killed and the server is stopped.

mod autosync;
mod roundtrip;
mod stations;
