//! The pass device against its safe operating area and its case-temperature derating: the
//! DC SOA line read between the datasheet's points on log-log axes, derated with the case
//! temperature, and the operating points that stress the device (the settled short, the
//! hardest point, full load at the lowest output, and for foldback the limit line). Pure.
//!
//! Relations (datasheet practice; common practice): between SOA points
//! log I = log I_1 + (log V - log V_1) (log I_2 - log I_1) / (log V_2 - log V_1); power and the
//! DC line derate linearly from 25 degC case to zero at T_j max:
//! factor = (T_j,max - T_case) / (T_j,max - 25); T_case = T_a + P (theta_cs + theta_sa).

use super::file::{Design, Soa};
use serde::{Deserialize, Serialize};

/// Current the DC SOA line allows at `vce` (case at 25 degC). Below the first point: the
/// first point's current; above the last point: 0 (outside the device's rating).
pub fn soa_current(soa: &Soa, vce: f64) -> f64 {
    let pts = &soa.points;
    let Some(first) = pts.first() else {
        return 0.0;
    };
    if vce <= first[0] {
        return first[1];
    }
    for w in pts.windows(2) {
        let ([v1, i1], [v2, i2]) = (w[0], w[1]);
        if vce <= v2 {
            let t = (vce.ln() - v1.ln()) / (v2.ln() - v1.ln());
            return (i1.ln() + t * (i2.ln() - i1.ln())).exp();
        }
    }
    0.0
}

/// Linear derating of power (and the DC SOA line) with case temperature: 1 up to 25 degC
/// case, 0 at T_j max.
pub fn case_factor(d: &Design, case_c: f64) -> f64 {
    let tj = d.pass.tj_max_c;
    ((tj - case_c) / (tj - 25.0)).clamp(0.0, 1.0)
}

/// Case temperature at a pass dissipation `watts` and ambient `ta`.
pub fn case_temperature(d: &Design, ta: f64, watts: f64) -> f64 {
    ta + watts * (d.pass.theta_cs + d.pass.theta_sa.unwrap_or(0.0))
}

/// One operating point against the SOA.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct SoaPoint {
    pub condition: String,
    pub vce: f64,
    pub current_a: f64,
    pub case_c: f64,
    /// What the derated DC line allows at this V_CE and case temperature.
    pub allowed_a: f64,
}

/// An operating point to check: (condition, V_CE, I, ambient).
pub type Candidate = (String, f64, f64, f64);

/// Judge candidate points against the design's SOA (None without an SOA in the file).
pub fn soa_points(d: &Design, candidates: &[Candidate]) -> Option<Vec<SoaPoint>> {
    let soa = d.pass.soa.as_ref()?;
    Some(
        candidates
            .iter()
            .filter(|(_, vce, i, _)| *i > 0.0 && *vce > 0.0)
            .map(|(condition, vce, i, ta)| {
                let case_c = case_temperature(d, *ta, vce * i);
                SoaPoint {
                    condition: condition.clone(),
                    vce: *vce,
                    current_a: *i,
                    case_c,
                    allowed_a: soa_current(soa, *vce) * case_factor(d, case_c),
                }
            })
            .collect(),
    )
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn soa_line_is_straight_on_log_log_axes() {
        // A 115 W device: thermal limit from 10 V (11.5 A) to 40 V (2.875 A) is the constant
        // power hyperbola, a straight line of slope -1 on log-log axes; second breakdown
        // bends it to 0.3 A at 100 V (datasheet practice).
        let soa = Soa {
            points: vec![[10.0, 11.5], [40.0, 2.875], [100.0, 0.3]],
        };
        assert!((soa_current(&soa, 20.0) - 5.75).abs() < 1e-9);
        assert!((soa_current(&soa, 20.0) * 20.0 - 115.0).abs() < 1e-9);
        // Between 40 and 100 V: exponent ln(0.3 / 2.875) / ln(100 / 40) = -2.467.
        let slope = (0.3f64 / 2.875).ln() / (100.0f64 / 40.0).ln();
        let want = 2.875 * (63.0f64 / 40.0).powf(slope);
        assert!((soa_current(&soa, 63.0) - want).abs() < 1e-9);
        assert_eq!(soa_current(&soa, 120.0), 0.0);
        assert_eq!(soa_current(&soa, 5.0), 11.5);
    }
}
