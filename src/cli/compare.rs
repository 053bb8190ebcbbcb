//! `regulus compare --design D RECORD...`: re-evaluate records against a design (for instance a
//! new revision) without rewriting them, and judge units: by default each unit's latest
//! finished run, saying how many records were left out and why. Across several units, flag
//! outliers and give Cpk. Each record is judged by the same rule as `run` and `report`; the
//! exit code is the worst outcome's (see `--help`).

use super::options::AnalysisArgs;
use super::present::Console;
use super::report::load_expectation;
use super::usage;
use crate::compare::{self, KeyMetric, KeyValues, Selection, Verdict};
use anyhow::Context;
use std::io::Write;
use std::path::{Path, PathBuf};

/// Options of `regulus compare`.
#[derive(Debug, clap::Args)]
#[command(after_help = super::exit::exit_codes_help())]
pub struct Args {
    /// Design file to judge the records against.
    #[arg(long, value_name = "FILE")]
    pub design: PathBuf,
    /// Record folders, unit folders (every record in them) or a records folder (every unit).
    #[arg(required_unless_present_any = ["index", "store"], value_name = "RECORD")]
    pub records: Vec<PathBuf>,
    /// Judge every record given, not only each unit's latest finished run.
    #[arg(long)]
    pub every_record: bool,
    /// Judge the runs this records folder's index lists (all, or those of --unit).
    #[arg(long, value_name = "DIR")]
    pub index: Option<PathBuf>,
    /// Judge the runs of every station in this store instead (PostgreSQL URL).
    #[arg(long, value_name = "URL", conflicts_with = "index")]
    pub store: Option<String>,
    /// With --index or --store: only this unit's runs.
    #[arg(long, value_name = "SERIAL")]
    pub unit: Option<String>,
    /// Outlier limit on |z| across units.
    #[arg(long, default_value_t = compare::DEFAULT_OUTLIER_Z)]
    pub z_limit: f64,
    /// Smallest difference from the other units worth an outlier flag, as METRIC=VALUE in
    /// the metric's unit (e.g. output_resistance=0.002); repeatable. Default: 5 % of the
    /// design's tolerance band, at least a few meter counts.
    #[arg(long, value_name = "METRIC=VALUE")]
    pub floor: Vec<String>,
    /// Print JSON instead of a table.
    #[arg(long)]
    pub json: bool,
    /// Draw a histogram of each specified metric across the records into DIR (SVG).
    #[arg(long, value_name = "DIR")]
    pub plot_dir: Option<PathBuf>,
    #[command(flatten)]
    pub analysis: AnalysisArgs,
}

/// One judged record.
#[derive(Debug, serde::Serialize)]
pub struct Judged {
    pub record: String,
    pub unit: String,
    /// The overall outcome by the one rule (pass, marginal, fail, incomplete, error).
    pub verdict: Option<Verdict>,
    pub reasons: Vec<String>,
    pub comparison: Option<compare::Comparison>,
}

/// What `regulus compare` prints.
#[derive(Debug, serde::Serialize)]
pub struct Output {
    pub design: String,
    /// Records offered (after expanding unit and records folders).
    pub offered: usize,
    pub units: usize,
    pub records: Vec<Judged>,
    pub left_out: Vec<compare::LeftOut>,
    pub population: compare::Population,
}

/// A record offered for judging, and how it is judged once chosen (only the records that
/// stand for a unit are judged).
struct Offered {
    candidate: compare::Candidate,
    work: Work,
}

enum Work {
    /// Judged from its folder already (its candidate needed the folder).
    Done { judged: Judged, values: KeyValues },
    /// To judge from metrics without the folder.
    Fileless(Box<FilelessRun>),
    /// To judge from the judgement the index made against this design.
    Prejudged(Box<PrejudgedRun>),
}

impl Work {
    fn judge(self, exp: &compare::DesignExpectation) -> (Judged, KeyValues) {
        match self {
            Work::Done { judged, values } => (judged, values),
            Work::Fileless(r) => without_files(*r, exp),
            Work::Prejudged(r) => prejudged(*r),
        }
    }
}

/// An indexed run with the judgement the index made against the design it is judged against.
struct PrejudgedRun {
    record: String,
    unit: String,
    outcome: crate::record::Outcome,
    state: crate::record::RecordState,
    prejudged: crate::index::Prejudged,
}

/// Judge an indexed run by the one rule from the comparison and the missing metrics the index
/// made against this very design (as [`without_files`] decides from the metrics).
fn prejudged(r: PrejudgedRun) -> (Judged, KeyValues) {
    let p = r.prejudged;
    let facts = compare::RecordFacts {
        outcome: r.outcome,
        state: Some(r.state),
        reason: p.reason.as_deref(),
    };
    let judgement = compare::judge(facts, Some(&p.comparison), &p.missing);
    (
        Judged {
            record: r.record,
            unit: r.unit,
            verdict: judgement.verdict,
            reasons: judgement.reasons,
            comparison: Some(p.comparison),
        },
        p.values,
    )
}

/// A run judged from what an index or a store holds, without its folder.
struct FilelessRun {
    record: String,
    unit: String,
    started_utc: String,
    outcome: crate::record::Outcome,
    state: crate::record::RecordState,
    metrics: Option<Box<crate::analysis::Metrics>>,
    judging: Option<compare::Judging>,
    /// The run was analysed against the design it is judged against.
    same_design: bool,
}

impl FilelessRun {
    fn candidate(&self) -> compare::Candidate {
        compare::Candidate {
            record: self.record.clone(),
            unit: self.unit.clone(),
            started_utc: self.started_utc.clone(),
            finished: compare::finished(self.outcome, Some(self.state)),
        }
    }
}

/// Judge a run by the one rule from its metrics and what its plan promised. Without its
/// metrics every promised metric is missing; without knowing what its plan promised the run
/// cannot pass (INCOMPLETE, with the reason).
fn without_files(r: FilelessRun, exp: &compare::DesignExpectation) -> (Judged, KeyValues) {
    let summarised = r.metrics.is_some();
    let m = r.metrics.map(|m| *m).unwrap_or_default();
    let known = r.judging.is_some();
    let j = r.judging.unwrap_or_default();
    let facts = compare::RecordFacts {
        outcome: r.outcome,
        state: Some(r.state),
        reason: j.reason.as_deref(),
    };
    let (comparison, _, mut judgement) =
        compare::judge_metrics(&m, Some(exp), &j.limits, &j.promised, facts);
    if !known {
        judgement.verdict = Some(
            judgement
                .verdict
                .map_or(Verdict::Incomplete, |v| v.max(Verdict::Incomplete)),
        );
        judgement.reasons.push(
            "what the run's plan promised is not known here (no plan snapshot that reads, or \
             a summary analysed with settings other than the defaults): judge its folder"
                .to_string(),
        );
    }
    if !summarised {
        judgement
            .reasons
            .push("no summary of the run is held here (its metrics are unknown)".to_string());
    }
    if !r.same_design {
        judgement.reasons.push(
            "its metrics were analysed against the design it ran with, not this one".to_string(),
        );
    }
    (
        Judged {
            record: r.record,
            unit: r.unit,
            verdict: judgement.verdict,
            reasons: judgement.reasons,
            comparison,
        },
        KeyValues::from_metrics(&m),
    )
}

/// What precedes `<unit>/<folder>` in the name of a record under `root`: the name is then
/// the one `root.join(unit).join(folder)` displays, without building a path per record.
fn record_prefix(root: &Path) -> String {
    root.join("").display().to_string()
}

/// Record folders under `path`: the folder itself when it holds run.json, else its
/// subfolders that do (a unit folder), else those of its subfolders (a records folder).
fn expand(path: &Path) -> anyhow::Result<Vec<PathBuf>> {
    if path.join("run.json").is_file() {
        return Ok(vec![path.to_path_buf()]);
    }
    let subdirs = |p: &Path| -> Vec<PathBuf> {
        let mut v: Vec<PathBuf> = std::fs::read_dir(p)
            .map(|rd| {
                rd.filter_map(|e| e.ok())
                    .map(|e| e.path())
                    .filter(|p| p.is_dir())
                    .collect()
            })
            .unwrap_or_default();
        v.sort();
        v
    };
    if !path.is_dir() {
        return Err(usage(format!(
            "{}: not a record folder (no run.json), a unit folder or a records folder",
            path.display()
        )));
    }
    let direct: Vec<PathBuf> = subdirs(path)
        .into_iter()
        .filter(|d| d.join("run.json").is_file())
        .collect();
    if !direct.is_empty() {
        return Ok(direct);
    }
    let nested: Vec<PathBuf> = subdirs(path)
        .iter()
        .flat_map(|u| subdirs(u))
        .filter(|d| d.join("run.json").is_file())
        .collect();
    if nested.is_empty() {
        return Err(usage(format!(
            "{}: no records found (no run.json in it, its folders or theirs)",
            path.display()
        )));
    }
    Ok(nested)
}

pub fn run(args: Args) -> anyhow::Result<u8> {
    let out = evaluate(&args)?;
    let code = super::for_verdicts(out.records.iter().map(|j| j.verdict));
    // Buffered: a comparison of many runs is many lines (stdout alone writes each line).
    let mut w = Console::new(std::io::BufWriter::new(std::io::stdout().lock()));
    let _ = write_output(&mut w, &out, args.json);
    let _ = w.flush();
    // The process ends here: what was judged is left to its exit, not freed piece by piece
    // (a comparison of many runs holds many small allocations).
    std::mem::forget(out);
    Ok(code)
}

/// Print what [`evaluate`] decided: the table, or JSON with `json` (pretty, as
/// `serde_json::to_writer_pretty` writes it, and a newline).
pub fn write_output<W: Write>(mut w: W, out: &Output, json: bool) -> std::io::Result<()> {
    if json {
        write_json(&mut w, out)
    } else {
        write_table(&mut w, out)
    }
}

/// Records rendered per part, and parts per batch for each core (bounds the memory held).
const PART: usize = 1024;

/// `render` over the records on every core, a batch at a time, written in order.
fn write_records<W: Write>(
    w: &mut W,
    records: &[Judged],
    render: impl Fn(&mut Vec<u8>, usize, &Judged) -> std::io::Result<()> + Sync,
) -> std::io::Result<()> {
    let threads = std::thread::available_parallelism().map_or(1, |n| n.get());
    let mut first = 0;
    for batch in records.chunks(PART * threads.max(1)) {
        let parts: Vec<(usize, &[Judged])> = batch
            .chunks(PART)
            .enumerate()
            .map(|(k, c)| (first + k * PART, c))
            .collect();
        first += batch.len();
        let rendered = crate::par::map(parts, |(start, part)| {
            let mut buf = Vec::with_capacity(part.len() * 512);
            for (i, j) in part.iter().enumerate() {
                render(&mut buf, start + i, j)?;
            }
            Ok::<_, std::io::Error>(buf)
        });
        for r in rendered {
            w.write_all(&r?)?;
        }
    }
    Ok(())
}

/// `value` pretty-printed as JSON nested `depth` levels deep: serde_json's pretty form
/// (two spaces a level) as it prints inside `depth` enclosing objects or arrays.
fn pretty_at<T: serde::Serialize + ?Sized>(
    buf: &mut Vec<u8>,
    value: &T,
    depth: usize,
) -> std::io::Result<()> {
    let mut ser = serde_json::Serializer::with_formatter(
        buf,
        Nested {
            level: depth,
            has_value: false,
        },
    );
    value.serialize(&mut ser)?;
    Ok(())
}

/// serde_json's pretty formatter (`PrettyFormatter` with its default two-space indent),
/// starting `level` levels deep.
struct Nested {
    level: usize,
    has_value: bool,
}

impl Nested {
    fn indent<W: ?Sized + Write>(&self, w: &mut W) -> std::io::Result<()> {
        for _ in 0..self.level {
            w.write_all(b"  ")?;
        }
        Ok(())
    }
    fn open<W: ?Sized + Write>(&mut self, w: &mut W, bracket: &[u8]) -> std::io::Result<()> {
        self.level += 1;
        self.has_value = false;
        w.write_all(bracket)
    }
    fn close<W: ?Sized + Write>(&mut self, w: &mut W, bracket: &[u8]) -> std::io::Result<()> {
        self.level = self.level.saturating_sub(1);
        if self.has_value {
            w.write_all(b"\n")?;
            self.indent(w)?;
        }
        w.write_all(bracket)
    }
    fn item<W: ?Sized + Write>(&mut self, w: &mut W, first: bool) -> std::io::Result<()> {
        w.write_all(if first { b"\n" } else { b",\n" })?;
        self.indent(w)
    }
}

impl serde_json::ser::Formatter for Nested {
    fn begin_array<W: ?Sized + Write>(&mut self, w: &mut W) -> std::io::Result<()> {
        self.open(w, b"[")
    }
    fn end_array<W: ?Sized + Write>(&mut self, w: &mut W) -> std::io::Result<()> {
        self.close(w, b"]")
    }
    fn begin_array_value<W: ?Sized + Write>(
        &mut self,
        w: &mut W,
        first: bool,
    ) -> std::io::Result<()> {
        self.item(w, first)
    }
    fn end_array_value<W: ?Sized + Write>(&mut self, _w: &mut W) -> std::io::Result<()> {
        self.has_value = true;
        Ok(())
    }
    fn begin_object<W: ?Sized + Write>(&mut self, w: &mut W) -> std::io::Result<()> {
        self.open(w, b"{")
    }
    fn end_object<W: ?Sized + Write>(&mut self, w: &mut W) -> std::io::Result<()> {
        self.close(w, b"}")
    }
    fn begin_object_key<W: ?Sized + Write>(
        &mut self,
        w: &mut W,
        first: bool,
    ) -> std::io::Result<()> {
        self.item(w, first)
    }
    fn begin_object_value<W: ?Sized + Write>(&mut self, w: &mut W) -> std::io::Result<()> {
        w.write_all(b": ")
    }
    fn end_object_value<W: ?Sized + Write>(&mut self, _w: &mut W) -> std::io::Result<()> {
        self.has_value = true;
        Ok(())
    }
}

/// The JSON of [`Output`] byte for byte as `serde_json::to_writer_pretty` writes it (and a
/// newline), with the records rendered on every core.
fn write_json<W: Write>(mut w: W, out: &Output) -> std::io::Result<()> {
    let mut head = Vec::new();
    head.extend_from_slice(b"{\n  \"design\": ");
    pretty_at(&mut head, &out.design, 1)?;
    head.extend_from_slice(b",\n  \"offered\": ");
    pretty_at(&mut head, &out.offered, 1)?;
    head.extend_from_slice(b",\n  \"units\": ");
    pretty_at(&mut head, &out.units, 1)?;
    head.extend_from_slice(b",\n  \"records\": ");
    w.write_all(&head)?;
    if out.records.is_empty() {
        w.write_all(b"[]")?;
    } else {
        w.write_all(b"[")?;
        write_records(&mut w, &out.records, |buf, i, j| {
            buf.extend_from_slice(if i == 0 { b"\n    " } else { b",\n    " });
            pretty_at(buf, j, 2)
        })?;
        w.write_all(b"\n  ]")?;
    }
    let mut tail = Vec::new();
    tail.extend_from_slice(b",\n  \"left_out\": ");
    pretty_at(&mut tail, &out.left_out, 1)?;
    tail.extend_from_slice(b",\n  \"population\": ");
    pretty_at(&mut tail, &out.population, 1)?;
    tail.extend_from_slice(b"\n}\n");
    w.write_all(&tail)
}

/// Everything `regulus compare` decides and writes (the histograms of `--plot-dir`), without
/// printing: the records chosen and judged, those left out, the population statistics.
pub fn evaluate(args: &Args) -> anyhow::Result<Output> {
    let aopts = args.analysis.options().map_err(usage)?;
    if args.z_limit.is_nan() || args.z_limit <= 0.0 {
        return Err(usage("--z-limit must be positive (default 3)"));
    }
    let mut floors = Vec::new();
    for f in &args.floor {
        let parsed = f
            .split_once('=')
            .and_then(|(k, v)| Some((KeyMetric::parse(k.trim())?, v.trim().parse::<f64>().ok()?)));
        match parsed {
            Some((k, v)) if v.is_finite() && v >= 0.0 => floors.push((k, v)),
            _ => {
                let names: Vec<&str> = KeyMetric::ALL.iter().map(|k| k.as_str()).collect();
                return Err(usage(format!(
                    "--floor {f}: give METRIC=VALUE with METRIC one of {} and VALUE a \
                     non-negative number in the metric's unit",
                    names.join(", ")
                )));
            }
        }
    }
    let exp = load_expectation(&args.design)?;
    let design_sha256 = crate::pipeline::InputFile::read(&args.design, "design file")?.sha256();
    let mut dirs = Vec::new();
    for r in &args.records {
        dirs.extend(expand(r)?);
    }
    let mut offered = Vec::new();
    // Indexed runs of this very design, with a summary analysed with the default settings
    // and a plan snapshot, are judged from the index alone: their metrics are those the
    // folder would give and the index holds what the plan promised, so the one rule decides
    // exactly as it would from the files. When the index compared the run with this design
    // already (from the record's own snapshot of it), the rule decides from that comparison.
    // Every other indexed run is judged from its folder.
    if let Some(root) = &args.index {
        let rows = super::index::judging_rows(root, args.unit.as_deref(), &aopts, &design_sha256)?;
        // Named as the folders would be (`<root>/<unit>/<folder>`), built on every core.
        let prefix = record_prefix(root);
        let (fast, slow): (Vec<_>, Vec<_>) = rows.into_iter().partition(|r| {
            r.design_sha256 == design_sha256
                && (r.prejudged.is_some() || (r.metrics.is_some() && r.judging.is_some()))
        });
        for r in slow {
            dirs.push(root.join(&r.unit).join(&r.folder));
        }
        offered.extend(crate::par::map(fast, |r| {
            let record = format!("{prefix}{}/{}", r.unit, r.folder);
            match r.prejudged {
                Some(p) => Offered {
                    candidate: compare::Candidate {
                        record: record.clone(),
                        unit: r.unit.clone(),
                        started_utc: r.started_utc,
                        finished: compare::finished(r.outcome, Some(r.state)),
                    },
                    work: Work::Prejudged(Box::new(PrejudgedRun {
                        record,
                        unit: r.unit,
                        outcome: r.outcome,
                        state: r.state,
                        prejudged: p,
                    })),
                },
                None => {
                    let run = FilelessRun {
                        record,
                        unit: r.unit,
                        started_utc: r.started_utc,
                        outcome: r.outcome,
                        state: r.state,
                        metrics: r.metrics,
                        judging: r.judging,
                        same_design: true,
                    };
                    Offered {
                        candidate: run.candidate(),
                        work: Work::Fileless(Box::new(run)),
                    }
                }
            }
        }));
    }
    let mut ao = aopts.clone();
    ao.nominal_voltage.get_or_insert(exp.vout.nominal);
    let opts = crate::report::ReportOptions {
        analysis: ao,
        ..Default::default()
    };
    for r in &dirs {
        let rec = crate::report::load_record(r)
            .with_context(|| format!("reading record {}", r.display()))?;
        let s = crate::report::evaluate_loaded(&rec, r, Some(&exp), &opts);
        offered.push(Offered {
            candidate: compare::Candidate {
                record: r.display().to_string(),
                unit: rec.info.unit.clone(),
                started_utc: rec.info.started_utc.clone(),
                finished: compare::finished(rec.info.outcome, Some(rec.state)),
            },
            work: Work::Done {
                values: KeyValues::from_metrics(&s.metrics),
                judged: Judged {
                    record: r.display().to_string(),
                    unit: s.unit,
                    verdict: s.verdict,
                    reasons: s.reasons,
                    comparison: s.comparison,
                },
            },
        });
    }
    // Runs from the store carry their summary and plan snapshot, not their readings: judged
    // by the one rule from the metrics the station analysed and what the plan promised.
    if let Some(url) = &args.store {
        for r in super::sync::store_metrics(url, args.unit.as_deref(), &aopts)? {
            let same_design = r.design_sha256 == design_sha256;
            let run = FilelessRun {
                record: r.run_id,
                unit: r.unit,
                started_utc: r.started_utc,
                outcome: r.outcome,
                state: r.state,
                metrics: r.metrics.map(Box::new),
                judging: r.judging,
                same_design,
            };
            offered.push(Offered {
                candidate: run.candidate(),
                work: Work::Fileless(Box::new(run)),
            });
        }
    }
    let selection = if args.every_record {
        Selection::Every
    } else {
        Selection::LatestFinished
    };
    let (candidates, works): (Vec<compare::Candidate>, Vec<Work>) =
        offered.into_iter().map(|o| (o.candidate, o.work)).unzip();
    let chosen = compare::choose_records(&candidates, selection);
    // Only the chosen records are judged, on every core (each judgement is pure), in order.
    let mut slots: Vec<Option<Work>> = works.into_iter().map(Some).collect();
    let picked: Vec<(bool, Work)> = chosen
        .judged
        .iter()
        .filter_map(|&i| Some((candidates.get(i)?.finished, slots.get_mut(i)?.take()?)))
        .collect();
    drop(slots);
    let mut judged = Vec::new();
    let mut units: Vec<(String, KeyValues)> = Vec::new();
    for (finished, (j, values)) in
        crate::par::map(picked, |(finished, w)| (finished, w.judge(&exp)))
    {
        // Only units judged on a finished run enter the population statistics.
        if finished {
            units.push((j.unit.clone(), values));
        }
        judged.push(j);
    }
    let specs = vec![
        (KeyMetric::OutputVoltage, exp.vout.worst_case),
        (KeyMetric::LimitCurrent, exp.limit_current.worst_case),
    ]
    .into_iter()
    .chain(
        exp.short_circuit_current
            .map(|b| (KeyMetric::ShortCircuitCurrent, b.worst_case)),
    )
    .collect::<Vec<_>>();
    let population = compare::population_with_floors(&units, &specs, args.z_limit, &floors);
    if let Some(dir) = &args.plot_dir {
        std::fs::create_dir_all(dir).with_context(|| format!("creating {}", dir.display()))?;
        for (metric, spec) in &specs {
            let values: Vec<f64> = units.iter().filter_map(|(_, kv)| kv.get(*metric)).collect();
            let chart = crate::report::plots::Chart::Histogram {
                metric: *metric,
                values: &values,
                spec: Some(*spec),
            };
            let svg = chart.to_svg(crate::report::plots::SIZE)?;
            let path = dir.join(format!("{}.svg", metric.as_str()));
            std::fs::write(&path, svg).with_context(|| format!("writing {}", path.display()))?;
        }
    }
    let mut unit_names: Vec<&str> = judged.iter().map(|j| j.unit.as_str()).collect();
    unit_names.sort();
    unit_names.dedup();
    let out = Output {
        design: exp.design_name.clone(),
        offered: candidates.len(),
        units: unit_names.len(),
        records: judged,
        left_out: chosen.left_out,
        population,
    };
    Ok(out)
}

/// The table's lines of one judged record.
fn write_judged(mut w: impl Write, j: &Judged) -> std::io::Result<()> {
    let checks: Vec<String> = j
        .comparison
        .iter()
        .flat_map(|c| c.checks.iter())
        .map(|c| {
            format!(
                "{} {} ({})",
                c.metric,
                crate::quantity::eng(c.measured, &c.unit),
                c.verdict.as_str()
            )
        })
        .collect();
    writeln!(
        w,
        "{:<10} {}  {}: {}",
        j.verdict.map(|v| v.label()).unwrap_or("-"),
        j.unit,
        j.record,
        checks.join(", ")
    )?;
    if j.verdict != Some(Verdict::Pass) {
        for r in &j.reasons {
            writeln!(w, "           because: {r}")?;
        }
    }
    for cause in j.comparison.iter().flat_map(|c| c.likely_causes.iter()) {
        writeln!(w, "           likely cause: {cause}")?;
    }
    Ok(())
}

fn write_table<W: Write>(mut w: W, out: &Output) -> std::io::Result<()> {
    writeln!(w, "design {}", out.design)?;
    writeln!(
        w,
        "{} unit(s) judged on {} of {} record(s); {} left out",
        out.units,
        out.records.len(),
        out.offered,
        out.left_out.len()
    )?;
    write_records(&mut w, &out.records, |buf, _, j| write_judged(buf, j))?;
    for l in &out.left_out {
        writeln!(w, "left out  {}  {}: {}", l.unit, l.record, l.why)?;
    }
    for s in &out.population.stats {
        let cpk = match (s.cpk, s.spec) {
            (Some(c), _) => format!("Cpk {c:.2}"),
            (None, Some(_)) => format!("Cpk needs {}+ units", compare::MIN_UNITS_FOR_CPK),
            (None, None) => "no spec limits".to_string(),
        };
        writeln!(
            w,
            "{:<22} n {:>3}  mean {:>10}  sigma {:>10}  {cpk}",
            s.metric.as_str(),
            s.n,
            crate::quantity::eng(s.mean, s.metric.unit()),
            crate::quantity::eng(s.sigma, s.metric.unit())
        )?;
    }
    for o in &out.population.outliers {
        writeln!(
            w,
            "OUTLIER {}: {} = {} (z = {:+.1})",
            o.unit,
            o.metric.as_str(),
            crate::quantity::eng(o.value, o.metric.unit()),
            o.z
        )?;
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    fn judged(k: usize) -> Judged {
        let check = compare::Check {
            metric: "output_voltage".into(),
            unit: "V".into(),
            measured: 20.0 + k as f64 * 1e-4,
            nominal: 20.0,
            worst_case: compare::Limits {
                min: 19.2,
                max: 20.8,
            },
            monte_carlo_band: compare::Limits {
                min: 19.6,
                max: 20.4,
            },
            verdict: Verdict::Pass,
            margin: 0.8,
            margin_percent: 4.0,
            deviation_percent: 0.0,
            band_basis: None,
            envelope: None,
            note: (k % 3 == 0).then(|| "a \"quoted\"\nnote".to_string()),
        };
        Judged {
            record: format!("records/U-{k}/f"),
            unit: format!("U-{k}"),
            verdict: [None, Some(Verdict::Pass), Some(Verdict::Fail)][k % 3],
            reasons: (0..k % 2).map(|r| format!("reason {r}")).collect(),
            comparison: (k % 4 != 1).then(|| compare::Comparison {
                design_name: "lab".into(),
                checks: vec![check.clone(), check],
                verdict: Verdict::Pass,
                likely_causes: vec!["a cause".into()],
                not_measured: Vec::new(),
                joint_fit_names_a_part: false,
            }),
        }
    }

    fn output(n: usize) -> Output {
        let records: Vec<Judged> = (0..n).map(judged).collect();
        let units: Vec<(String, KeyValues)> = (0..n)
            .map(|k| {
                let v = KeyMetric::ALL
                    .iter()
                    .map(|m| (*m, Some(1.0 + k as f64 * 0.01)));
                (format!("U-{k}"), KeyValues(v.collect()))
            })
            .collect();
        let spec = compare::Limits { min: 0.5, max: 1.5 };
        Output {
            design: "lab \u{b5} \"demo\"".into(),
            offered: n + 1,
            units: n,
            records,
            left_out: vec![compare::LeftOut {
                record: "records/U-0/e".into(),
                unit: "U-0".into(),
                why: "an earlier run".into(),
            }],
            population: compare::population_with_floors(
                &units,
                &[(KeyMetric::OutputVoltage, spec)],
                3.0,
                &[],
            ),
        }
    }

    #[test]
    fn json_is_what_serde_json_pretty_prints() {
        // No record, one, and more than a part of them (rendered on several cores).
        for n in [0, 1, 2, PART + 3] {
            let out = output(n);
            let mut want = serde_json::to_vec_pretty(&out).unwrap();
            want.push(b'\n');
            let mut got = Vec::new();
            write_output(&mut got, &out, true).unwrap();
            assert!(
                got == want,
                "{n} records:\n{}",
                String::from_utf8_lossy(&got)
            );
        }
    }

    #[test]
    fn the_table_lists_every_record_in_order() {
        let out = output(PART + 3);
        let mut got = Vec::new();
        write_output(&mut got, &out, false).unwrap();
        let text = String::from_utf8(got).unwrap();
        let mut want = String::new();
        for j in &out.records {
            let mut b = Vec::new();
            write_judged(&mut b, j).unwrap();
            want.push_str(&String::from_utf8(b).unwrap());
        }
        assert!(text.contains(&want));
        assert!(text.starts_with("design lab"), "{text}");
        assert!(text.contains("left out  U-0  records/U-0/e: an earlier run"));
        assert!(text.contains("output_voltage"));
    }

    #[test]
    fn records_are_named_as_their_folder_paths_display() {
        for root in ["records", "records/", "/srv/regulus/records", "./r", ""] {
            let name = format!("{}{}/{}", record_prefix(Path::new(root)), "TLB-0001", "f_x");
            let path = Path::new(root).join("TLB-0001").join("f_x");
            assert_eq!(name, path.display().to_string(), "root {root:?}");
        }
    }
}
