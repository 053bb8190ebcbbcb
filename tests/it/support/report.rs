//! SYNTHETIC TEST DATA (not measurements, not the simulated bench): records made from a small
//! design model of a 12 V supply with a transistor current limiter, with component values
//! drawn within tolerance from a seed. Used by the report tests and benchmarks until the
//! simulated unit exists. Invented serials only.
#![allow(dead_code)]

use regulus::compare::{Clamp, DesignExpectation, ExpectedBand, LimitModel, Limits, MonteCarlo};
use regulus::control::InstrumentIdentity;
use regulus::measure::{Quantity, Role};
use regulus::record::{
    Cell, DesignRef, Flag, Flags, LoadState, Outcome, Row, RunInfo, StepKind, READINGS_HEADER,
};
use regulus::rng::Rng;
use std::io::Write;
use std::path::{Path, PathBuf};

/// Nominal design: 12 V out, 0.6 V clamp junction over a 0.47 ohm sense resistor.
pub const V_NOM: f64 = 12.0;
pub const R_SENSE: f64 = 0.47;
pub const V_BE: f64 = 0.6;
/// Tolerance half-widths (read as 3 sigma by `Rng::within`).
pub const TOL_REF: f64 = 0.02;
pub const TOL_DIV: f64 = 0.01;
pub const TOL_RS: f64 = 0.05;
pub const TOL_VBE: f64 = 0.05; // volts

/// One synthetic as-built unit.
#[derive(Debug, Clone, Copy)]
pub struct Unit {
    pub v_set: f64,
    pub r_sense: f64,
    pub v_be: f64,
    pub r_out: f64,
    /// Junction heating during the short: fractional fall of the limit at equilibrium.
    pub sc_fall: f64,
    pub tau: f64,
}

impl Unit {
    /// Draw a unit from the design's tolerances.
    pub fn draw(rng: &mut Rng) -> Unit {
        let v_set = V_NOM * rng.within(1.0, TOL_REF) * rng.within(1.0, TOL_DIV);
        Unit {
            v_set,
            r_sense: rng.within(R_SENSE, R_SENSE * TOL_RS),
            v_be: rng.within(V_BE, TOL_VBE),
            r_out: rng.within(0.02, 0.005),
            sc_fall: rng.within(0.06, 0.01),
            tau: rng.within(6.0, 0.6),
        }
    }
    /// The same unit with a different sense resistor fitted (a wrong part).
    pub fn with_sense(mut self, r: f64) -> Unit {
        self.r_sense = r;
        self
    }
    pub fn i_lim(&self) -> f64 {
        self.v_be / self.r_sense
    }
    /// Output voltage at load current `i`: regulation line, then a steep limit line joined by
    /// a soft knee (softplus of width 0.05 % of the limit: about 0.2 V of rounding at the
    /// corner). The limit line falls 400 V per ampere of limit current.
    pub fn v_at(&self, i: f64) -> f64 {
        let w = 0.0005 * self.i_lim();
        let x = (i - self.i_lim()) / w;
        let softplus = if x > 30.0 { x } else { x.exp().ln_1p() };
        (self.v_set - self.r_out * i - 400.0 / self.i_lim() * w * softplus).max(0.0)
    }
    /// Load current at output voltage `v` (CV load), by bisection on `v_at`.
    pub fn i_at(&self, v: f64) -> f64 {
        let (mut lo, mut hi) = (0.0, self.i_lim() * 2.0);
        for _ in 0..80 {
            let mid = 0.5 * (lo + hi);
            if self.v_at(mid) > v {
                lo = mid;
            } else {
                hi = mid;
            }
        }
        0.5 * (lo + hi)
    }
    /// Short-circuit current t seconds into the dwell.
    pub fn i_sc(&self, t: f64) -> f64 {
        let i0 = self.i_at(0.0);
        let inf = i0 * (1.0 - self.sc_fall);
        inf + (i0 - inf) * (-t / self.tau).exp()
    }
}

/// The expectation of the nominal design: worst case from tolerance corners, Monte Carlo
/// from 4000 seeded draws (0.135 % and 99.865 % percentiles, i.e. +-3 sigma).
pub fn expectation() -> DesignExpectation {
    let mut rng = Rng::new(0x00DE_516E);
    let mut vs = Vec::new();
    let mut is = Vec::new();
    let mut iscs = Vec::new();
    for _ in 0..4000 {
        let u = Unit::draw(&mut rng);
        vs.push(u.v_set);
        is.push(u.i_lim());
        iscs.push(u.i_at(0.0));
    }
    let band = |xs: &mut Vec<f64>, nominal: f64, wc: Limits| {
        xs.sort_by(|a, b| a.total_cmp(b));
        let n = xs.len() as f64;
        let mean = xs.iter().sum::<f64>() / n;
        let sigma = (xs.iter().map(|x| (x - mean).powi(2)).sum::<f64>() / (n - 1.0)).sqrt();
        let pct = |p: f64| xs[((p * (n - 1.0)).round() as usize).min(xs.len() - 1)];
        ExpectedBand {
            nominal,
            worst_case: wc,
            monte_carlo: MonteCarlo {
                samples: xs.len(),
                mean,
                sigma,
                p_low: pct(0.00135),
                p_high: pct(0.99865),
            },
        }
    };
    let vwc = Limits {
        min: V_NOM * (1.0 - TOL_REF) * (1.0 - TOL_DIV),
        max: V_NOM * (1.0 + TOL_REF) * (1.0 + TOL_DIV),
    };
    let iwc = Limits {
        min: (V_BE - TOL_VBE) / (R_SENSE * (1.0 + TOL_RS)),
        max: (V_BE + TOL_VBE) / (R_SENSE * (1.0 - TOL_RS)),
    };
    // The short-circuit current of this model sits a little above the knee (soft limit line).
    let nominal_unit = Unit {
        v_set: V_NOM,
        r_sense: R_SENSE,
        v_be: V_BE,
        r_out: 0.02,
        sc_fall: 0.06,
        tau: 6.0,
    };
    let k = nominal_unit.i_at(0.0) / nominal_unit.i_lim();
    let iscwc = Limits {
        min: iwc.min * k,
        max: iwc.max * k,
    };
    DesignExpectation {
        design_name: "synthetic 12 V / 1.28 A (test data)".into(),
        vout: band(&mut vs, V_NOM, vwc),
        limit_current: band(&mut is, V_BE / R_SENSE, iwc),
        short_circuit_current: Some(band(&mut iscs, nominal_unit.i_at(0.0), iscwc)),
        limit: Some(LimitModel {
            sense_ohms: R_SENSE,
            clamp: Clamp::Transistor { v_be: V_BE },
            tempco_v_per_c: -0.002,
            pass_theta_jc: None,
        }),
        curve: vec![],
        curve_low: vec![],
        curve_high: vec![],
        rated_load_a: None,
        design: None,
        as_built: None,
        envelope: None,
    }
}

fn cell(v: f64) -> Option<Cell> {
    Some(Cell::Value {
        mean: v,
        spread: 0.0,
    })
}

fn utc(start: chrono::DateTime<chrono::Utc>, t: f64) -> String {
    (start + chrono::Duration::milliseconds((t * 1000.0).round() as i64))
        .format("%Y-%m-%dT%H:%M:%S%.3fZ")
        .to_string()
}

/// Rows of a standard run on `unit`: a CC load sweep to 85 % of the limit (`sweep` points),
/// a CV limit trace (`trace` points), a short-circuit dwell of `dwell` s sampled every
/// `dt` s, and one recovery row. Noise: 0.5 mV and 0.5 mA (1 sigma) from `rng`.
pub fn run_rows(
    unit: &Unit,
    rng: &mut Rng,
    start: chrono::DateTime<chrono::Utc>,
    sweep: usize,
    trace: usize,
    dwell: f64,
    dt: f64,
) -> Vec<Row> {
    let mut rows = Vec::new();
    let mut t = 0.0;
    let push = |rows: &mut Vec<Row>,
                t: f64,
                step: usize,
                kind: StepKind,
                point: usize,
                mode: &str,
                setpoint: f64,
                v: f64,
                i: f64,
                temp: f64,
                flags: Vec<Flag>| {
        rows.push(Row {
            utc: utc(start, t),
            elapsed_s: (t * 1000.0).round() / 1000.0,
            step,
            step_kind: kind,
            point,
            load_mode: LoadState::parse(mode).expect("a record load mode"),
            setpoint: Some(setpoint),
            source_volts: Some(18.0),
            samples: 4,
            cells: [
                (Quantity::OutputVoltage, cell(v)),
                (Quantity::OutputCurrent, cell(i)),
                (Quantity::InputVoltage, cell(18.0)),
                (Quantity::InputCurrent, cell(i + 0.004)),
                (Quantity::Temperature, cell(temp)),
            ]
            .into(),
            flags: Flags::from(flags),
        });
    };
    let ilim = unit.i_lim();
    for k in 0..sweep {
        let i = 0.85 * ilim * k as f64 / (sweep.max(2) - 1) as f64;
        let v = unit.v_at(i) + 0.0005 * rng.normal();
        let im = i + 0.0005 * rng.normal();
        push(
            &mut rows,
            t,
            0,
            StepKind::LoadSweep,
            k,
            "cc",
            i,
            v,
            im.max(0.0),
            25.0,
            vec![],
        );
        t += 0.5;
    }
    for k in 0..trace {
        let v_set = unit.v_set * (0.99 - 0.95 * k as f64 / (trace.max(2) - 1) as f64);
        let i = unit.i_at(v_set) + 0.0005 * rng.normal();
        let v = v_set + 0.0005 * rng.normal();
        push(
            &mut rows,
            t,
            1,
            StepKind::LimitTrace,
            k,
            "cv",
            v_set,
            v,
            i,
            26.0,
            vec![],
        );
        t += 0.5;
    }
    let n = (dwell / dt).round() as usize;
    let t0 = t;
    for k in 0..=n {
        let tt = k as f64 * dt;
        let i = unit.i_sc(tt) + 0.0005 * rng.normal();
        let mut flags = vec![];
        if k == 0 {
            flags.push(Flag::DwellStart);
        }
        if k == n {
            flags.push(Flag::DwellEnd);
        }
        let temp = 26.0 + 20.0 * (1.0 - (-tt / unit.tau).exp());
        push(
            &mut rows,
            t0 + tt,
            2,
            StepKind::ShortCircuit,
            k,
            "cv",
            0.0,
            0.002,
            i,
            temp,
            flags,
        );
    }
    let tr = t0 + dwell + 1.0;
    push(
        &mut rows,
        tr,
        2,
        StepKind::ShortCircuit,
        n + 1,
        "off",
        0.0,
        unit.v_set,
        0.0,
        40.0,
        vec![Flag::Recovery],
    );
    rows
}

/// Write rows as `readings.csv` text with the record module's own field formatting.
pub fn readings_csv(rows: &[Row]) -> String {
    let mut s = String::new();
    s.push_str(READINGS_HEADER);
    s.push('\n');
    for r in rows {
        s.push_str(&regulus::record::row_fields(r).join(","));
        s.push('\n');
    }
    s
}

/// run.json content for a synthetic run.
pub fn run_info(unit: &str, start: chrono::DateTime<chrono::Utc>, rows: &[Row]) -> RunInfo {
    RunInfo {
        schema_version: 1,
        tool_version: "0.1.0".into(),
        unit: unit.into(),
        plan_name: "standard".into(),
        design: DesignRef {
            path: "designs/bench12.toml".into(),
            sha256: "0".repeat(64),
            name: "synthetic 12 V".into(),
        },
        instruments: vec![InstrumentIdentity {
            name: "dmm".into(),
            roles: vec![Role::OutputVoltmeter],
            link: "tcp 127.0.0.1:5025".into(),
            identity: Some("Regulus Simulated Bench,SYN-1,SN0001,1.0".into()),
        }],
        operator: Some("test".into()),
        note: Some("synthetic data".into()),
        started_utc: start.format("%Y-%m-%dT%H:%M:%S%.3fZ").to_string(),
        ended_utc: Some(utc(start, rows.last().map(|r| r.elapsed_s).unwrap_or(0.0))),
        outcome: Outcome::Completed,
        reason: None,
        rows: rows.len() as u64,
    }
}

/// Write a record folder `<records>/<unit>/<stamp>_standard/` and return its path.
pub fn write_record(
    records: &Path,
    unit: &str,
    start: chrono::DateTime<chrono::Utc>,
    rows: &[Row],
) -> PathBuf {
    let dir = records
        .join(unit)
        .join(format!("{}_standard", start.format("%Y%m%dT%H%M%SZ")));
    std::fs::create_dir_all(&dir).expect("create record dir");
    let info = run_info(unit, start, rows);
    let mut f = std::fs::File::create(dir.join("run.json")).expect("run.json");
    serde_json::to_writer_pretty(&mut f, &info).expect("write run.json");
    f.write_all(b"\n").expect("newline");
    std::fs::write(dir.join("readings.csv"), readings_csv(rows)).expect("readings.csv");
    dir
}

/// A fixed start time.
pub fn day(n: i64) -> chrono::DateTime<chrono::Utc> {
    chrono::DateTime::parse_from_rfc3339("2026-11-02T09:00:00Z")
        .expect("fixed date")
        .with_timezone(&chrono::Utc)
        + chrono::Duration::days(n)
}
