//! The runner: executes an expanded [`Plan`] on any [`BenchControl`], checks the interlocks
//! on every reading, writes the record row by row, reports progress to an [`Observer`], and
//! always ends with the bench's safe state (load input off first, then the source) whether
//! the run completed, tripped an interlock, lost an instrument or was interrupted. It never
//! parses instrument replies and never opens ports itself.

use crate::control::{BenchControl, ControlError};
use crate::measure::{LoadMode, Measurement, Quantity, Reading, Role};
use crate::plan::{
    recovery_readings, short_readings, Action, Interlocks, KneeRequest, KneeResult, KneeSearch,
    LoadSetting, Plan, ShortCircuit, Step,
};
use crate::record::{
    utc_string, Cell, Cells, DesignRef, Flag, Flags, LoadState, Outcome, RecordError, RecordWriter,
    Row, RunInfo, Snapshots, StepKind, SCHEMA_VERSION,
};
use chrono::Utc;
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::Arc;
use std::time::{Duration, Instant};

/// Recovery after a short counts as confirmed when the output is back within this fraction
/// of its value before the short (2 %, common practice for a pass/fail recovery check).
pub const RECOVERY_TOLERANCE: f64 = 0.02;

/// Longest sleep between two looks at the cancellation flag.
const POLL: Duration = Duration::from_millis(20);

/// A cancellation flag shared between the runner and whoever may stop it (Ctrl-C handler,
/// a test). Cheap to clone; all clones share one flag.
#[derive(Debug, Clone, Default)]
pub struct CancelToken(Arc<AtomicBool>);

impl CancelToken {
    pub fn new() -> CancelToken {
        CancelToken::default()
    }
    /// Ask the runner to stop; it reaches the safe state within about 20 ms of its next wait
    /// or after the instrument command in flight.
    pub fn cancel(&self) {
        self.0.store(true, Ordering::SeqCst);
    }
    pub fn is_cancelled(&self) -> bool {
        self.0.load(Ordering::SeqCst)
    }
}

/// What a step found, reported when it finishes.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct StepResult {
    pub rows: usize,
    /// Knee search answer.
    pub knee: Option<KneeResult>,
    /// Short circuit: output voltage before the short, last reading after release, and
    /// whether it came back within [`RECOVERY_TOLERANCE`].
    pub recovery: Option<Recovery>,
}

/// Recovery check after a short circuit.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Recovery {
    pub before_v: f64,
    pub after_v: f64,
    pub recovered: bool,
}

/// Progress callbacks. All methods have empty defaults.
pub trait Observer {
    fn step_started(&mut self, _index: usize, _step: &Step) {}
    fn point_taken(&mut self, _index: usize, _row: &Row) {}
    fn step_finished(&mut self, _index: usize, _step: &Step, _result: &StepResult) {}
    /// The run is stopping; `reason` says why. Called before the safe state runs.
    fn stopping(&mut self, _reason: &str) {}
}

/// An observer that ignores everything.
#[derive(Debug, Default)]
pub struct Silent;
impl Observer for Silent {}

/// Everything about a run that is not in the plan or the bench.
#[derive(Debug, Clone)]
pub struct RunSetup<'a> {
    /// Records root; the run goes to `<records>/<unit>/<UTC>_<plan>/`.
    pub records: &'a Path,
    pub unit: String,
    pub operator: Option<String>,
    pub note: Option<String>,
    pub design: DesignRef,
    pub snapshots: Snapshots<'a>,
}

/// How a run went.
#[derive(Debug)]
pub struct RunReport {
    pub outcome: Outcome,
    pub reason: Option<String>,
    pub dir: PathBuf,
    pub rows: u64,
    pub steps: Vec<StepResult>,
    /// Failures while putting the bench in its safe state (each names the instrument).
    pub safe_state_errors: Vec<ControlError>,
    /// The final run.json content, when it could be written.
    pub info: Option<RunInfo>,
    /// Set when the final run.json could not be written.
    pub finish_error: Option<RecordError>,
}

/// Problems found before anything on the bench was switched on.
#[derive(Debug, thiserror::Error)]
pub enum RunError {
    #[error("{0}")]
    Roles(String),
    #[error(transparent)]
    Record(#[from] RecordError),
}

/// Why a run stopped early.
#[derive(Debug)]
enum Stop {
    Interlock(String),
    Cancelled,
    Instrument(String),
    Record(String),
}

impl Stop {
    fn outcome_reason(&self) -> (Outcome, String) {
        match self {
            Stop::Interlock(r) => (Outcome::Aborted, format!("interlock: {r}")),
            Stop::Cancelled => (Outcome::Aborted, "interrupted by the operator".to_string()),
            Stop::Instrument(r) => (Outcome::Error, format!("instrument failure: {r}")),
            Stop::Record(r) => (Outcome::Error, format!("record could not be written: {r}")),
        }
    }
}

/// Run `plan` on `bench`: check roles, create the record, execute every step, put the bench
/// in its safe state, and close the record. Errors before the record exists (missing roles,
/// record folder not writable) come back as `Err` with nothing switched on.
pub async fn run<B: BenchControl, O: Observer>(
    bench: &mut B,
    plan: &Plan,
    setup: RunSetup<'_>,
    observer: &mut O,
    cancel: &CancelToken,
) -> Result<RunReport, RunError> {
    plan.check_roles(|r| bench.has_role(r))
        .map_err(RunError::Roles)?;
    let started = Utc::now();
    let info = RunInfo {
        schema_version: SCHEMA_VERSION,
        tool_version: env!("CARGO_PKG_VERSION").to_string(),
        unit: setup.unit.clone(),
        plan_name: plan.name.clone(),
        design: setup.design.clone(),
        instruments: bench.identities(),
        operator: setup.operator.clone(),
        note: setup.note.clone(),
        started_utc: String::new(),
        ended_utc: None,
        outcome: Outcome::Running,
        reason: None,
        rows: 0,
    };
    let mut writer = RecordWriter::create(setup.records, started, info, &setup.snapshots)?;
    let dir = writer.dir().to_path_buf();

    let mut steps = Vec::new();
    let stop = {
        let mut ex = Exec {
            bench,
            plan,
            writer: &mut writer,
            observer,
            cancel,
            t0: Instant::now(),
            load_on: false,
            source_v: None,
            short_since: None,
            setting: None,
        };
        let r = ex.all(&mut steps).await;
        if let Err(stop) = &r {
            let (_, reason) = stop.outcome_reason();
            ex.observer.stopping(&reason);
        }
        r.err()
    };
    // Always end in the safe state, whatever happened above: the load input off first, then
    // the source output (even when a bench file's safe-state sequences forget them), then
    // every instrument's own safe-state sequence.
    let mut safe_state_errors = Vec::new();
    if bench.has_role(Role::Load) {
        if let Err(e) = bench.set_load_input(false).await {
            safe_state_errors.push(e);
        }
    }
    if bench.has_role(Role::InputSource) {
        if let Err(e) = bench.set_source_output(false).await {
            safe_state_errors.push(e);
        }
    }
    safe_state_errors.extend(bench.safe_state().await);

    let (mut outcome, mut reason) = match &stop {
        None => (Outcome::Completed, None),
        Some(s) => {
            let (o, r) = s.outcome_reason();
            (o, Some(r))
        }
    };
    if !safe_state_errors.is_empty() {
        let list: Vec<String> = safe_state_errors.iter().map(|e| e.to_string()).collect();
        let text = format!(
            "safe state incomplete, check the bench by hand: {}",
            list.join("; ")
        );
        reason = Some(match reason {
            Some(r) => format!("{r}; {text}"),
            None => text,
        });
        outcome = Outcome::Error;
    }
    let rows = writer.rows();
    let (info, finish_error) = match writer.finish(Utc::now(), outcome, reason.clone()) {
        Ok(i) => (Some(i), None),
        Err(e) => (None, Some(e)),
    };
    Ok(RunReport {
        outcome,
        reason,
        dir,
        rows,
        steps,
        safe_state_errors,
        info,
        finish_error,
    })
}

struct Exec<'a, B, O> {
    bench: &'a mut B,
    plan: &'a Plan,
    writer: &'a mut RecordWriter,
    observer: &'a mut O,
    cancel: &'a CancelToken,
    t0: Instant,
    load_on: bool,
    source_v: Option<f64>,
    /// When the current short was applied (for the dwell interlock).
    short_since: Option<Instant>,
    /// Current load setting (None while the input is off).
    setting: Option<LoadSetting>,
}

/// Where a point belongs in the record.
#[derive(Clone, Copy)]
struct At {
    step: usize,
    kind: StepKind,
    samples: u32,
}

impl<B: BenchControl, O: Observer> Exec<'_, B, O> {
    async fn all(&mut self, results: &mut Vec<StepResult>) -> Result<(), Stop> {
        self.check_cancel()?;
        // Start from a known state: the unit powers up (or is found) unloaded.
        self.ctl("switch the load input off", |b| b.set_load_input(false))
            .await?;
        if self.bench.has_role(Role::InputSource) {
            if let Some(v) = self.plan.source_volts {
                self.ctl("set the source voltage", |b| b.set_source_voltage(v))
                    .await?;
                self.ctl("switch the source on", |b| b.set_source_output(true))
                    .await?;
                self.source_v = Some(v);
                let first = self.plan.steps.first().map(|s| s.settle);
                self.wait(first.unwrap_or(Duration::from_millis(500)))
                    .await?;
            }
        }
        for (index, step) in self.plan.steps.iter().enumerate() {
            self.check_cancel()?;
            self.observer.step_started(index, step);
            let at = At {
                step: index,
                kind: step.kind,
                samples: step.samples,
            };
            let result = match &step.action {
                Action::Sweep { mode, setpoints } => self.sweep(at, step, *mode, setpoints).await,
                Action::LineSweep { load, source_volts } => {
                    self.line_sweep(at, step, *load, source_volts).await
                }
                Action::KneeSearch(cfg) => self.knee(at, step, KneeSearch::new(*cfg)).await,
                Action::ShortCircuit(sc) => self.short(at, step, sc).await,
                Action::Soak {
                    load,
                    duration,
                    interval,
                } => self.soak(at, step, *load, *duration, *interval).await,
            }?;
            self.load_off().await?;
            self.observer.step_finished(index, step, &result);
            results.push(result);
        }
        Ok(())
    }

    fn check_cancel(&self) -> Result<(), Stop> {
        if self.cancel.is_cancelled() {
            Err(Stop::Cancelled)
        } else {
            Ok(())
        }
    }

    /// Sleep in short slices, watching the cancellation flag.
    async fn wait(&self, d: Duration) -> Result<(), Stop> {
        self.wait_until(Instant::now() + d).await
    }

    async fn wait_until(&self, deadline: Instant) -> Result<(), Stop> {
        loop {
            self.check_cancel()?;
            let now = Instant::now();
            if now >= deadline {
                return Ok(());
            }
            tokio::time::sleep((deadline - now).min(POLL)).await;
        }
    }

    async fn ctl<'b, F, Fut>(&'b mut self, what: &str, f: F) -> Result<(), Stop>
    where
        F: FnOnce(&'b mut B) -> Fut,
        Fut: std::future::Future<Output = Result<(), ControlError>> + 'b,
    {
        f(self.bench)
            .await
            .map_err(|e| Stop::Instrument(format!("{e} (while trying to {what})")))
    }

    /// Set the load (value first, then the input on if it was off).
    async fn apply(&mut self, s: LoadSetting) -> Result<(), Stop> {
        self.ctl("set the load", |b| b.set_load(s.mode, s.value))
            .await?;
        if !self.load_on {
            self.ctl("switch the load input on", |b| b.set_load_input(true))
                .await?;
            self.load_on = true;
        }
        self.setting = Some(s);
        Ok(())
    }

    async fn load_off(&mut self) -> Result<(), Stop> {
        if self.load_on {
            self.ctl("switch the load input off", |b| b.set_load_input(false))
                .await?;
            self.load_on = false;
        }
        self.setting = None;
        Ok(())
    }

    /// Take `samples` readings, check interlocks on each, write and report one row.
    async fn point(&mut self, at: At, point: usize, flags: &[Flag]) -> Result<Row, Stop> {
        let mut readings: Vec<Measurement> = Vec::with_capacity(at.samples as usize);
        let mut trip: Option<String> = None;
        for _ in 0..at.samples.max(1) {
            self.check_cancel()?;
            let reading = self.bench.measure();
            let m = match self.short_since {
                // During a short a hung meter must not hold the short beyond its dwell limit:
                // the reading is abandoned when the limit passes and the run stops there.
                Some(t) => {
                    let limit = self.plan.interlocks.max_short_dwell;
                    match tokio::time::timeout_at((t + limit).into(), reading).await {
                        Ok(r) => r,
                        Err(_) => {
                            return Err(Stop::Interlock(format!(
                                "short circuit held beyond max_short_dwell {:.2} s while waiting for a reading",
                                limit.as_secs_f64()
                            )))
                        }
                    }
                }
                None => reading.await,
            }
            .map_err(|e| {
                Stop::Instrument(format!(
                    "{e} (while reading step {}, point {point})",
                    at.step + 1
                ))
            })?;
            trip = check_interlocks(
                &m,
                &self.plan.interlocks,
                self.setting,
                self.short_since,
                self.bench.has_role(Role::Thermometer),
            );
            readings.push(m);
            if trip.is_some() {
                break;
            }
        }
        let mut row = self.row(at, point, &readings, flags);
        if let Some(reason) = &trip {
            row.flags.insert(Flag::Interlock);
            // Keep the tripping reading in the record if at all possible.
            let _ = self.writer.append(&row);
            self.observer.point_taken(at.step, &row);
            return Err(Stop::Interlock(format!(
                "{reason} (step {}, point {point})",
                at.step + 1
            )));
        }
        self.writer
            .append(&row)
            .map_err(|e| Stop::Record(e.to_string()))?;
        self.observer.point_taken(at.step, &row);
        Ok(row)
    }

    fn row(&self, at: At, point: usize, readings: &[Measurement], extra: &[Flag]) -> Row {
        let cells: Cells = Quantity::ALL
            .into_iter()
            .map(|q| (q, aggregate(readings, q)))
            .collect();
        let mut flags = Flags::new();
        if cells.any_overrange() {
            flags.insert(Flag::Overrange);
        }
        extra.iter().for_each(|f| flags.insert(*f));
        Row {
            utc: utc_string(Utc::now()),
            // Milliseconds, as written to the record, so the row in memory equals the file's.
            elapsed_s: (self.t0.elapsed().as_secs_f64() * 1000.0).round() / 1000.0,
            step: at.step,
            step_kind: at.kind,
            point,
            load_mode: match self.setting {
                Some(s) if self.load_on => LoadState::On(s.mode),
                _ => LoadState::Off,
            },
            setpoint: self.setting.filter(|_| self.load_on).map(|s| s.value),
            source_volts: self.source_v,
            samples: readings.len() as u32,
            cells,
            flags,
        }
    }

    async fn sweep(
        &mut self,
        at: At,
        step: &Step,
        mode: LoadMode,
        setpoints: &[f64],
    ) -> Result<StepResult, Stop> {
        for (k, &value) in setpoints.iter().enumerate() {
            self.apply(LoadSetting { mode, value }).await?;
            self.wait(step.settle).await?;
            self.point(at, k, &[]).await?;
        }
        Ok(StepResult {
            rows: setpoints.len(),
            ..StepResult::default()
        })
    }

    async fn line_sweep(
        &mut self,
        at: At,
        step: &Step,
        load: LoadSetting,
        volts: &[f64],
    ) -> Result<StepResult, Stop> {
        self.apply(load).await?;
        for (k, &v) in volts.iter().enumerate() {
            self.ctl("set the source voltage", |b| b.set_source_voltage(v))
                .await?;
            self.source_v = Some(v);
            self.wait(step.settle).await?;
            self.point(at, k, &[]).await?;
        }
        if let Some(v) = self.plan.source_volts {
            self.ctl("restore the source voltage", |b| b.set_source_voltage(v))
                .await?;
            self.source_v = Some(v);
        }
        Ok(StepResult {
            rows: volts.len(),
            ..StepResult::default()
        })
    }

    async fn knee(&mut self, at: At, step: &Step, mut ks: KneeSearch) -> Result<StepResult, Stop> {
        let cfg = *ks.config();
        let mut k = 0;
        while let KneeRequest::Measure { mode, setpoint } = ks.next_setpoint() {
            // In CC mode, return to the reference load between probes so that a foldback
            // supply that latched low under the previous probe can recover.
            if k > 0 && mode == LoadMode::ConstantCurrent {
                self.apply(LoadSetting {
                    mode,
                    value: cfg.reference_a,
                })
                .await?;
                self.wait(step.settle).await?;
            }
            self.apply(LoadSetting {
                mode,
                value: setpoint,
            })
            .await?;
            self.wait(step.settle).await?;
            let row = self.point(at, k, &[]).await?;
            k += 1;
            let v = row.value(Quantity::OutputVoltage).unwrap_or(f64::NAN);
            let i = row.value(Quantity::OutputCurrent).unwrap_or(match mode {
                LoadMode::ConstantResistance => v / setpoint,
                _ => setpoint,
            });
            ks.observe(v, i);
        }
        Ok(StepResult {
            rows: k,
            knee: ks.result(),
            recovery: None,
        })
    }

    async fn short(&mut self, at: At, step: &Step, sc: &ShortCircuit) -> Result<StepResult, Stop> {
        // Output before the short, at the recovery load.
        self.apply(sc.recovery_load).await?;
        self.wait(step.settle).await?;
        let before = self.point(at, 0, &[]).await?;
        let mut k = 1;
        // Apply the short: input off, set the resistance, input on.
        self.load_off().await?;
        self.apply(LoadSetting {
            mode: LoadMode::ConstantResistance,
            value: sc.resistance_ohm,
        })
        .await?;
        let t_short = Instant::now();
        self.short_since = Some(t_short);
        let n = short_readings(sc.dwell, sc.interval);
        for j in 0..n {
            self.wait_until(t_short + sc.interval * j as u32).await?;
            let mut flags = Vec::new();
            if j == 0 {
                flags.push(Flag::DwellStart);
            }
            if j + 1 == n {
                flags.push(Flag::DwellEnd);
            }
            self.point(at, k, &flags).await?;
            k += 1;
        }
        // Release: input off at the end of the dwell (at once if the readings ran late).
        self.wait_until(t_short + sc.dwell).await?;
        self.load_off().await?;
        self.short_since = None;
        self.apply(sc.recovery_load).await?;
        let t_rel = Instant::now();
        let m = recovery_readings(sc);
        let mut last = None;
        for j in 1..=m {
            let due = if m == 1 && sc.recovery_time < sc.interval {
                sc.recovery_time
            } else {
                sc.interval * j as u32
            };
            self.wait_until(t_rel + due).await?;
            last = Some(self.point(at, k, &[Flag::Recovery]).await?);
            k += 1;
        }
        let recovery = match (
            before.value(Quantity::OutputVoltage),
            last.and_then(|r| r.value(Quantity::OutputVoltage)),
        ) {
            (Some(b), Some(a)) => Some(Recovery {
                before_v: b,
                after_v: a,
                recovered: a >= (1.0 - RECOVERY_TOLERANCE) * b,
            }),
            _ => None,
        };
        Ok(StepResult {
            rows: k,
            knee: None,
            recovery,
        })
    }

    async fn soak(
        &mut self,
        at: At,
        step: &Step,
        load: LoadSetting,
        duration: Duration,
        interval: Duration,
    ) -> Result<StepResult, Stop> {
        self.apply(load).await?;
        self.wait(step.settle).await?;
        let t = Instant::now();
        let n = (duration.as_secs_f64() / interval.as_secs_f64() + 1e-9).floor() as u32 + 1;
        for j in 0..n {
            self.wait_until(t + interval * j).await?;
            self.point(at, j as usize, &[]).await?;
        }
        Ok(StepResult {
            rows: n as usize,
            ..StepResult::default()
        })
    }
}

/// Mean and spread of one quantity over the samples; overrange if any sample was.
fn aggregate(readings: &[Measurement], q: Quantity) -> Option<Cell> {
    let mut vals = Vec::with_capacity(readings.len());
    for m in readings {
        match m.values.get(&q) {
            Some(Reading::Value(v)) => vals.push(*v),
            Some(Reading::Overrange) => return Some(Cell::Overrange),
            None => {}
        }
    }
    if vals.is_empty() {
        return None;
    }
    let mean = vals.iter().sum::<f64>() / vals.len() as f64;
    let max = vals.iter().cloned().fold(f64::NEG_INFINITY, f64::max);
    let min = vals.iter().cloned().fold(f64::INFINITY, f64::min);
    Some(Cell::Value {
        mean,
        spread: max - min,
    })
}

/// Check one reading against the interlocks; the reason when one trips.
///
/// Load power is the measured output voltage times the measured output current; without an
/// ammeter the current is taken from the CC setpoint or from V / R in CR mode. An overrange
/// output voltage or temperature trips (the value is unknown, so it may be unsafe).
pub fn check_interlocks(
    m: &Measurement,
    il: &Interlocks,
    setting: Option<LoadSetting>,
    short_since: Option<Instant>,
    has_thermometer: bool,
) -> Option<String> {
    let v = match m.values.get(&Quantity::OutputVoltage) {
        Some(Reading::Overrange) => {
            return Some("output voltmeter reads overrange (voltage unknown)".to_string())
        }
        Some(Reading::Value(v)) => Some(*v),
        None => None,
    };
    if let Some(v) = v {
        if v > il.max_output_voltage_v {
            return Some(format!(
                "output voltage {} exceeds max_output_voltage {}",
                crate::quantity::eng(v, "V"),
                crate::quantity::eng(il.max_output_voltage_v, "V")
            ));
        }
        let i = m.get(Quantity::OutputCurrent).or(match setting {
            Some(LoadSetting {
                mode: LoadMode::ConstantCurrent,
                value,
            }) => Some(value),
            Some(LoadSetting {
                mode: LoadMode::ConstantResistance,
                value,
            }) if value > 0.0 => Some(v / value),
            _ => None,
        });
        if let Some(i) = i {
            let p = v * i;
            if p > il.max_load_power_w {
                return Some(format!(
                    "load power {} exceeds max_load_power {}",
                    crate::quantity::eng(p, "W"),
                    crate::quantity::eng(il.max_load_power_w, "W")
                ));
            }
        }
    }
    if has_thermometer {
        match m.values.get(&Quantity::Temperature) {
            Some(Reading::Overrange) => {
                return Some("thermometer reads overrange (temperature unknown)".to_string())
            }
            Some(Reading::Value(t)) if *t > il.max_temperature_c => {
                return Some(format!(
                    "temperature {} exceeds max_temperature {}",
                    crate::quantity::eng(*t, "degC"),
                    crate::quantity::eng(il.max_temperature_c, "degC")
                ))
            }
            _ => {}
        }
    }
    if let Some(t) = short_since {
        let held = t.elapsed();
        if held > il.max_short_dwell {
            return Some(format!(
                "short circuit held {:.2} s, beyond max_short_dwell {:.2} s",
                held.as_secs_f64(),
                il.max_short_dwell.as_secs_f64()
            ));
        }
    }
    None
}

/// The cautions printed before a plan that shorts the unit's output. `vin` is the input
/// voltage if known; the pass device then dissipates about `vin * i_sc`.
pub fn short_circuit_cautions(plan: &Plan, vin: Option<f64>) -> Vec<String> {
    let mut lines = vec!["CAUTION: this plan shorts the unit's output.".to_string()];
    for s in &plan.steps {
        if let Action::ShortCircuit(sc) = &s.action {
            let dissipation = match vin {
                Some(v) => format!(
                    "about {} (V_in {} x I_sc {})",
                    crate::quantity::eng(v * sc.expected_current_a, "W"),
                    crate::quantity::eng(v, "V"),
                    crate::quantity::eng(sc.expected_current_a, "A")
                ),
                None => format!(
                    "about V_in x {} (input voltage unknown)",
                    crate::quantity::eng(sc.expected_current_a, "A")
                ),
            };
            lines.push(format!(
                "  step '{}': short of {} held for {:.1} s; the pass device dissipates {}.",
                s.label,
                crate::quantity::eng(sc.resistance_ohm, "ohm"),
                sc.dwell.as_secs_f64(),
                dissipation
            ));
        }
    }
    lines.extend([
        "  Heatsinks and the pass device get hot: do not touch them during or after the test."
            .to_string(),
        "  A unit powered from the mains carries dangerous voltages: keep covers on and hands \
         clear."
            .to_string(),
        "  Follow local codes and licensed practice; stop with Ctrl-C at any time (the load \
         input and then the source are switched off)."
            .to_string(),
    ]);
    lines
}
