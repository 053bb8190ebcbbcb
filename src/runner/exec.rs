//! Executing the steps of a plan: settings, settle times, points (samples, interlocks, flags),
//! and each step kind (sweeps, line sweeps, knee search, short circuit, soak).

use super::interlocks::check_interlocks;
use super::types::{CancelToken, Observer, Recovery, StepResult, Stop, POLL, RECOVERY_TOLERANCE};
use crate::control::{BenchControl, ControlError};
use crate::measure::{LoadMode, Measurement, Quantity, Reading, Role};
use crate::plan::{
    recovery_readings, short_readings, Action, KneeRequest, KneeSearch, LoadSetting, Plan,
    ShortCircuit, Step,
};
use crate::record::{utc_string, Cell, Cells, Flag, Flags, LoadState, RecordWriter, Row, StepKind};
use chrono::Utc;
use std::time::{Duration, Instant};

/// During a wait longer than this with the load on (a long settle, a soak interval, a short
/// circuit's dwell), the bench is read in between and the interlocks checked (no row is
/// written for these readings).
pub(super) const WATCH: Duration = Duration::from_secs(1);

pub(super) struct Exec<'a, B, O> {
    pub bench: &'a mut B,
    pub plan: &'a Plan,
    pub writer: &'a mut RecordWriter,
    pub observer: &'a mut O,
    pub cancel: &'a CancelToken,
    pub t0: Instant,
    pub load_on: bool,
    pub source_v: Option<f64>,
    /// When the current short was applied (for the dwell interlock).
    pub short_since: Option<Instant>,
    /// Current load setting (None while the input is off).
    pub setting: Option<LoadSetting>,
}

/// Where a point belongs in the record.
#[derive(Clone, Copy)]
struct At {
    step: usize,
    kind: StepKind,
    samples: u32,
}

impl<B: BenchControl, O: Observer> Exec<'_, B, O> {
    pub async fn all(&mut self, results: &mut Vec<StepResult>) -> Result<(), Stop> {
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
            let stressful = matches!(step.action, Action::ShortCircuit(_) | Action::KneeSearch(_));
            if stressful {
                self.ctl("arm the instruments' own limits", |b| b.limits(true))
                    .await?;
            }
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
            if stressful {
                self.ctl("disarm the instruments' own limits", |b| b.limits(false))
                    .await?;
            }
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

    /// Sleep in short slices, watching the cancellation flag (and the interlocks, see
    /// [`WATCH`]).
    async fn wait(&mut self, d: Duration) -> Result<(), Stop> {
        self.wait_until(Instant::now() + d).await
    }

    async fn wait_until(&mut self, deadline: Instant) -> Result<(), Stop> {
        let mut next_watch = Instant::now() + WATCH;
        loop {
            self.check_cancel()?;
            let now = Instant::now();
            if now >= deadline {
                return Ok(());
            }
            if self.load_on && now >= next_watch && deadline - now > WATCH / 2 {
                self.watch().await?;
                next_watch = Instant::now() + WATCH;
                continue;
            }
            let mut nap = (deadline - now).min(POLL);
            if self.load_on && next_watch > now {
                nap = nap.min(next_watch - now);
            }
            tokio::time::sleep(nap).await;
        }
    }

    /// A reading between recorded points: only the interlocks look at it.
    async fn watch(&mut self) -> Result<(), Stop> {
        let m = self.measure_bounded("between readings").await?;
        match check_interlocks(
            &m,
            &self.plan.interlocks,
            self.setting,
            self.short_since,
            self.bench.has_role(Role::Thermometer),
        ) {
            Some(reason) => Err(Stop::Interlock(format!("{reason} (between readings)"))),
            None => Ok(()),
        }
    }

    /// One measurement of every role; during a short a hung meter must not hold the short
    /// beyond its dwell limit: the reading is abandoned when the limit passes and the run
    /// stops there (the reader stays with its port: the link is resynchronised before the
    /// safe state's exchanges).
    async fn measure_bounded(&mut self, what: &str) -> Result<Measurement, Stop> {
        let reading = self.bench.measure();
        match self.short_since {
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
        .map_err(|e| Stop::Instrument(format!("{e} (while reading {what})")))
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
            let m = self
                .measure_bounded(&format!("step {}, point {point}", at.step + 1))
                .await?;
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
        // A retry or a resynchronisation since the last row (of a setting this reading
        // depends on, or of the reading itself): the row says so.
        if self.bench.take_retries() > 0 {
            row.flags.insert(Flag::Retried);
        }
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
