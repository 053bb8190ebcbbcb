//! The `usbtmc` link table as written (checked by `usbtmc_checks`).

use serde::Deserialize;

/// The `usbtmc` table as written.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub(crate) struct RawUsbTmc {
    pub path: String,
}
