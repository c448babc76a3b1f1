//! Calibration scores over individual obligors: the Brier (1950) score and the Spiegelhalter
//! (1986, "Probabilistic prediction in patient management and clinical trials", Statistics in
//! Medicine 5, 421-433) test, and the Herfindahl-Hirschman index of a count vector.
//!
//! Spiegelhalter's z: under the forecasts p_i, E[sum (y_i - p_i)^2] = sum p_i (1 - p_i) and
//! z = sum (y_i - p_i)(1 - 2 p_i) / sqrt(sum (1 - 2 p_i)^2 p_i (1 - p_i)), asymptotically
//! standard normal; the p-value is two-sided.

use super::special::normal_upper_tail;
use super::{check_probability, StatsError};

/// The Brier score and the Spiegelhalter test of one set of forecasts.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct CalibrationScore {
    pub n: u64,
    pub brier: f64,
    /// None when every forecast is 0, 1/2 or 1 (the variance vanishes).
    pub z: Option<f64>,
    pub p_value: Option<f64>,
}

/// Brier score and Spiegelhalter test of forecasts `p` against outcomes `y` (true = default).
pub fn spiegelhalter(p: &[f64], y: &[bool]) -> Result<CalibrationScore, StatsError> {
    if p.len() != y.len() {
        return Err(StatsError::LengthMismatch { what: "forecasts and outcomes", a: p.len(), b: y.len() });
    }
    if p.is_empty() {
        return Err(StatsError::NoObservations);
    }
    let (mut brier, mut num, mut var) = (0.0, 0.0, 0.0);
    for (&pi, &yi) in p.iter().zip(y) {
        check_probability("forecast", pi)?;
        let o = if yi { 1.0 } else { 0.0 };
        brier += (o - pi) * (o - pi);
        num += (o - pi) * (1.0 - 2.0 * pi);
        var += (1.0 - 2.0 * pi).powi(2) * pi * (1.0 - pi);
    }
    let z = (var > 0.0).then(|| num / var.sqrt());
    Ok(CalibrationScore {
        n: p.len() as u64,
        brier: brier / p.len() as f64,
        z,
        p_value: z.map(|z| 2.0 * normal_upper_tail(z.abs())),
    })
}

/// The Herfindahl-Hirschman index sum (c_i / sum c)^2 of counts (1 / k for k equal counts);
/// None when every count is 0.
pub fn herfindahl(counts: &[u64]) -> Option<f64> {
    let total: u64 = counts.iter().sum();
    (total > 0).then(|| counts.iter().map(|&c| (c as f64 / total as f64).powi(2)).sum())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn hand_example() {
        let s = spiegelhalter(&[0.1, 0.2, 0.5], &[false, true, true]).unwrap();
        assert!((s.brier - (0.01 + 0.64 + 0.25) / 3.0).abs() < 1e-15);
        let num = -0.1 * 0.8 + 0.8 * 0.6 + 0.0;
        let var = 0.64 * 0.09 + 0.36 * 0.16;
        assert!((s.z.unwrap() - num / f64::sqrt(var)).abs() < 1e-15);
        assert_eq!(herfindahl(&[1, 1, 1, 1]), Some(0.25));
        assert_eq!(herfindahl(&[0, 0]), None);
        assert!(spiegelhalter(&[0.5], &[true]).unwrap().z.is_none());
    }
}
