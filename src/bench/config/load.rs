//! Reading a bench file: its text through the raw layout, every instrument through the rules
//! of [`super::checks`], then the rules between instruments (unique names, one instrument per
//! role). [`BenchConfig::load`] reads the file; nothing else here does I/O.

use super::checked::{BenchConfig, InstrumentConfig};
use super::checks::check_instrument;
use super::context::FileCtx;
use super::raw::RawFile;
use crate::bench::{BenchError, IoCause};
use crate::measure::Role;
use std::collections::BTreeMap;
use std::ops::Range;
use std::path::Path;

impl BenchConfig {
    /// Read and check a bench file.
    pub fn load(path: &Path) -> Result<BenchConfig, BenchError> {
        let text = std::fs::read_to_string(path).map_err(|e| BenchError::ReadFile {
            path: path.display().to_string(),
            error: IoCause::new(e),
        })?;
        BenchConfig::parse_file(&text, path)
    }

    /// Check the text of the bench file at `path` (already read): the path names it in
    /// messages, and relative traffic log paths are relative to the file's folder.
    pub fn parse_file(text: &str, path: &Path) -> Result<BenchConfig, BenchError> {
        let mut cfg = BenchConfig::parse(text, &path.display().to_string())?;
        if let Some(dir) = path.parent() {
            for inst in &mut cfg.instruments {
                if let Some(log) = &inst.traffic_log {
                    if log.is_relative() {
                        inst.traffic_log = Some(dir.join(log));
                    }
                }
            }
        }
        Ok(cfg)
    }

    /// Check bench file text; `label` names it in messages (usually the path).
    pub fn parse(text: &str, label: &str) -> Result<BenchConfig, BenchError> {
        let file = FileCtx {
            file: label,
            src: text,
        };
        let raw: RawFile =
            toml::from_str(text).map_err(|e| file.at(e.span(), e.message().trim()))?;
        check_some_instrument(file, &raw)?;
        let mut instruments: Vec<InstrumentConfig> = Vec::new();
        let mut role_owner: BTreeMap<Role, String> = BTreeMap::new();
        for sp in raw.instrument {
            let span = sp.span();
            let inst = check_instrument(file, sp.into_inner(), span.clone())?;
            check_unique_name(file, &instruments, &inst, &span)?;
            check_one_instrument_per_role(file, &mut role_owner, &inst, &span)?;
            instruments.push(inst);
        }
        let (name, note) = raw.bench.map(|b| (b.name, b.note)).unwrap_or((None, None));
        Ok(BenchConfig {
            label: label.to_string(),
            name,
            note,
            instruments,
        })
    }
}

/// Rule: a bench file has at least one instrument.
fn check_some_instrument(file: FileCtx<'_>, raw: &RawFile) -> Result<(), BenchError> {
    if raw.instrument.is_empty() {
        return Err(file.at(
            None,
            "no instruments: add at least one [[instrument]] table (see config/bench-template.toml)",
        ));
    }
    Ok(())
}

/// Rule: instrument names are unique.
fn check_unique_name(
    file: FileCtx<'_>,
    earlier: &[InstrumentConfig],
    inst: &InstrumentConfig,
    span: &Range<usize>,
) -> Result<(), BenchError> {
    if earlier.iter().any(|i| i.name == inst.name) {
        return Err(file.at(
            Some(span.clone()),
            format!(
                "instrument name '{}' is used twice; give each instrument its own name",
                inst.name
            ),
        ));
    }
    Ok(())
}

/// Rule: one instrument per role.
fn check_one_instrument_per_role(
    file: FileCtx<'_>,
    owner: &mut BTreeMap<Role, String>,
    inst: &InstrumentConfig,
    span: &Range<usize>,
) -> Result<(), BenchError> {
    for r in &inst.roles {
        if let Some(prev) = owner.insert(*r, inst.name.clone()) {
            return Err(file.at(
                Some(span.clone()),
                format!(
                    "role '{r}' is held by both '{prev}' and '{}'; one instrument per role",
                    inst.name
                ),
            ));
        }
    }
    Ok(())
}
