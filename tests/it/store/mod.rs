//! The shared record store on a real PostgreSQL server (a private cluster started by the test
//! support): uploads, idempotent reruns, history across stations, and eight stations syncing
//! at once while syncs are killed and the server is stopped.

mod roundtrip;
mod stations;
