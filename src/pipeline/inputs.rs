//! The inputs of a run, read once: each file's bytes are kept for the record's snapshot and its
//! hash, and parsed from those same bytes. [`prepare`] turns a [`RunRequest`] into a
//! [`Prepared`] run (design model, expectation, plan, bench file, all checked) before any port
//! opens. Reads files; opens no port and writes nothing.

use super::PipelineError;
use crate::bench::BenchConfig;
use crate::design::{self, Design, DesignError};
use crate::plan::{DesignTargets, Plan};
use crate::record::{check_component, DesignRef, Snapshots};
use sha2::{Digest, Sha256};
use std::path::{Path, PathBuf};

/// What a run needs from its caller: the three input files, the unit and where records go.
#[derive(Debug, Clone)]
pub struct RunRequest {
    pub bench: PathBuf,
    pub design: PathBuf,
    pub plan: PathBuf,
    /// Unit identifier (serial); names the unit's record folder.
    pub unit: String,
    /// Records root folder.
    pub records: PathBuf,
    pub operator: Option<String>,
    pub note: Option<String>,
}

/// One input file as read from disk, once.
#[derive(Debug, Clone)]
pub struct InputFile {
    pub path: PathBuf,
    pub bytes: Vec<u8>,
}

impl InputFile {
    /// Read `path`; `what` names the file in the message (`design file`, `plan file`...).
    pub fn read(path: &Path, what: &'static str) -> Result<InputFile, PipelineError> {
        let bytes = std::fs::read(path).map_err(|source| PipelineError::Read {
            what,
            path: path.to_path_buf(),
            source,
        })?;
        Ok(InputFile {
            path: path.to_path_buf(),
            bytes,
        })
    }

    /// The path as it is named in messages and in the record.
    pub fn label(&self) -> String {
        self.path.display().to_string()
    }

    /// The bytes as UTF-8 text, if they are.
    pub fn text(&self) -> Option<&str> {
        std::str::from_utf8(&self.bytes).ok()
    }

    /// SHA-256 of the bytes, lowercase hex (FIPS 180-4).
    pub fn sha256(&self) -> String {
        format!("{:x}", Sha256::digest(&self.bytes))
    }
}

/// The error `read_to_string` gives for bytes that are not UTF-8 (what a file reader says).
fn not_utf8() -> std::io::Error {
    std::io::Error::new(
        std::io::ErrorKind::InvalidData,
        "stream did not contain valid UTF-8",
    )
}

/// Everything checked before any port opens.
#[derive(Debug, Clone)]
pub struct Prepared {
    pub plan: Plan,
    pub design: Design,
    pub expectation: design::Expectation,
    pub targets: DesignTargets,
    pub design_ref: DesignRef,
    pub bench: BenchConfig,
    pub design_file: InputFile,
    pub bench_file: InputFile,
    pub plan_file: InputFile,
    /// Whether the unloaded output is checked against the design before the plan runs.
    pub preflight: super::Preflight,
}

impl Prepared {
    /// Byte-for-byte copies of the inputs for the record.
    pub fn snapshots(&self) -> Snapshots<'_> {
        Snapshots {
            design: &self.design_file.bytes,
            bench: &self.bench_file.bytes,
            plan: &self.plan_file.bytes,
        }
    }
}

/// Read and check the unit id, the design, the bench file and the plan, and check that the
/// bench holds every role the plan needs. Every failure is a configuration problem naming the
/// file (and line and column where there is one).
pub fn prepare(req: &RunRequest) -> Result<Prepared, PipelineError> {
    check_component("unit id", &req.unit).map_err(PipelineError::Unit)?;
    let design_file = InputFile::read(&req.design, "design file")?;
    let bench_file = InputFile::read(&req.bench, "bench file")?;
    let plan_file = InputFile::read(&req.plan, "plan file")?;

    let design_text = design_file.text().ok_or_else(|| DesignError::Read {
        path: design_file.label(),
        source: not_utf8(),
    })?;
    let d = Design::parse(design_text, &design_file.label())?;
    let e = design::expect(&d);
    let targets = DesignTargets::from_design(&d, &e);
    let plan_text = plan_file.text().ok_or_else(|| PipelineError::NotText {
        path: req.plan.clone(),
    })?;
    // Checked against the design's worst case before any port opens.
    let bounds = crate::plan::DesignBounds::from_design(&e);
    let plan = Plan::parse_for_design(plan_text, &plan_file.label(), &targets, &bounds)?;
    crate::plan::check_short_dwell(&plan, plan_text, &plan_file.label(), &e)?;
    let bench_text = bench_file.text().ok_or_else(|| {
        PipelineError::from(crate::bench::BenchError::ReadFile {
            path: bench_file.label(),
            error: crate::transport::IoCause::new(not_utf8()),
        })
    })?;
    let bench = BenchConfig::parse_file(bench_text, &req.bench)?;
    plan.check_roles(|r| bench.instruments.iter().any(|i| i.roles.contains(&r)))
        .map_err(|message| PipelineError::BenchRoles {
            message,
            bench: req.bench.clone(),
        })?;
    crate::runner::check_bench_for_plan(&bench, &plan)?;
    let design_ref = DesignRef {
        path: design_file.label(),
        sha256: design_file.sha256(),
        name: d.design.name.clone(),
    };
    Ok(Prepared {
        plan,
        design: d,
        expectation: e,
        targets,
        design_ref,
        bench,
        design_file,
        bench_file,
        plan_file,
        preflight: super::Preflight::Check,
    })
}
