//! Piecewise-flat hazard curve: lambda(t) = h_k on (t_{k-1}, t_k], with t_0 = 0 the
//! reference date; flat extrapolation of the last hazard beyond the last node.
//! Survival S(t) = exp(-integral of lambda), default density lambda(t) S(t).

use super::year_time;
use chrono::NaiveDate;

/// A piecewise-flat hazard curve on the Act/365F axis.
#[derive(Debug, Clone, PartialEq)]
pub struct HazardCurve {
    reference: NaiveDate,
    /// Node (segment end) times, strictly increasing and positive.
    times: Vec<f64>,
    /// Flat hazard of each segment.
    hazards: Vec<f64>,
    /// Integrated hazard at each node.
    cumulative: Vec<f64>,
}

/// Why a hazard curve cannot be built.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum HazardCurveError {
    #[error("hazard curve needs at least one node")]
    Empty,
    #[error("hazard curve nodes must be strictly increasing and after the reference date; node {index} at t = {time} breaks that")]
    BadNode { index: usize, time: f64 },
    #[error("hazard {value} on segment {index} is not a finite number")]
    BadHazard { index: usize, value: f64 },
    #[error("{times} node times but {hazards} hazards")]
    LengthMismatch { times: usize, hazards: usize },
}

impl HazardCurve {
    /// Builds the curve from node times and the flat hazard of the segment ending at each.
    /// Negative hazards are accepted (a bootstrap may report them), but survival then rises.
    pub fn new(reference: NaiveDate, times: Vec<f64>, hazards: Vec<f64>) -> Result<HazardCurve, HazardCurveError> {
        if times.is_empty() {
            return Err(HazardCurveError::Empty);
        }
        if times.len() != hazards.len() {
            return Err(HazardCurveError::LengthMismatch { times: times.len(), hazards: hazards.len() });
        }
        let mut prev = 0.0;
        for (i, &t) in times.iter().enumerate() {
            if !(t > prev) || !t.is_finite() {
                return Err(HazardCurveError::BadNode { index: i, time: t });
            }
            prev = t;
        }
        if let Some((i, &h)) = hazards.iter().enumerate().find(|(_, h)| !h.is_finite()) {
            return Err(HazardCurveError::BadHazard { index: i, value: h });
        }
        let mut cumulative = Vec::with_capacity(times.len());
        let (mut acc, mut t_prev) = (0.0, 0.0);
        for (&t, &h) in times.iter().zip(&hazards) {
            acc += h * (t - t_prev);
            cumulative.push(acc);
            t_prev = t;
        }
        Ok(HazardCurve { reference, times, hazards, cumulative })
    }

    /// Builds the curve from node dates.
    pub fn from_dates(
        reference: NaiveDate,
        dates: &[NaiveDate],
        hazards: Vec<f64>,
    ) -> Result<HazardCurve, HazardCurveError> {
        let times = dates.iter().map(|&d| year_time(reference, d)).collect();
        HazardCurve::new(reference, times, hazards)
    }

    /// A flat hazard.
    pub fn flat(reference: NaiveDate, hazard: f64) -> HazardCurve {
        HazardCurve::new(reference, vec![1.0], vec![hazard]).expect("one finite node")
    }

    pub fn reference(&self) -> NaiveDate {
        self.reference
    }
    pub fn node_times(&self) -> &[f64] {
        &self.times
    }
    pub fn hazards(&self) -> &[f64] {
        &self.hazards
    }

    /// Integrated hazard from 0 to t; zero for t <= 0 (survival is 1 up to the reference date).
    #[inline]
    pub fn integrated_hazard(&self, t: f64) -> f64 {
        if t <= 0.0 {
            return 0.0;
        }
        self.integrated_in(self.times.partition_point(|&x| x < t), t)
    }

    /// The integrated hazard to t > 0, with `i` the number of nodes before t.
    #[inline]
    fn integrated_in(&self, i: usize, t: f64) -> f64 {
        if i == 0 {
            return self.hazards[0] * t;
        }
        // Segment i covers (times[i-1], times[i]]; beyond the last node the last hazard holds.
        let seg = i.min(self.times.len() - 1);
        self.cumulative[seg] - self.hazards[seg] * (self.times[seg] - t)
    }

    /// [`HazardCurve::log_survival_at`] at each of `times`, which must be in increasing order:
    /// the same numbers, the nodes walked once instead of searched per time.
    pub fn log_survival_at_sorted(&self, times: &[f64]) -> Vec<f64> {
        let mut out = Vec::with_capacity(times.len());
        self.log_survival_at_sorted_into(times, &mut out);
        out
    }

    /// [`HazardCurve::log_survival_at_sorted`] into `out` (cleared first), for callers that
    /// keep the vector from one curve to the next.
    pub fn log_survival_at_sorted_into(&self, times: &[f64], out: &mut Vec<f64>) {
        debug_assert!(times.windows(2).all(|w| w[0] <= w[1]), "times out of order");
        out.clear();
        let mut i = 0;
        out.extend(times.iter().map(|&t| {
            if t <= 0.0 {
                return -0.0;
            }
            while i < self.times.len() && self.times[i] < t {
                i += 1;
            }
            -self.integrated_in(i, t)
        }));
    }

    /// ln S(t).
    #[inline]
    pub fn log_survival_at(&self, t: f64) -> f64 {
        -self.integrated_hazard(t)
    }

    /// Survival probability S(t).
    #[inline]
    pub fn survival_at(&self, t: f64) -> f64 {
        self.log_survival_at(t).exp()
    }

    /// Survival probability to a date.
    pub fn survival(&self, date: NaiveDate) -> f64 {
        self.survival_at(year_time(self.reference, date))
    }

    /// Hazard rate in force at time t (right-continuous at 0, left-continuous at nodes).
    pub fn hazard_at(&self, t: f64) -> f64 {
        let i = self.times.partition_point(|&x| x < t);
        self.hazards[i.min(self.hazards.len() - 1)]
    }

    /// Default density lambda(t) S(t).
    pub fn default_density_at(&self, t: f64) -> f64 {
        self.hazard_at(t) * self.survival_at(t)
    }

    /// Default probability between two times, S(t1) - S(t2).
    pub fn default_probability(&self, t1: f64, t2: f64) -> f64 {
        self.survival_at(t1) - self.survival_at(t2)
    }

    /// ln S(t) on the curve of one segment, hazard `h` up to the node `t1` and beyond: the
    /// numbers [`HazardCurve::log_survival_at`] gives on `HazardCurve::new(_, vec![t1],
    /// vec![h])`, bit for bit (a unit test), without building the curve (the quote conversions
    /// ask this for tens of millions of one-segment curves).
    pub(crate) fn one_segment_log_survival(h: f64, t1: f64, t: f64) -> f64 {
        // The same operations as `new` and `integrated_hazard` on one node.
        let cumulative = 0.0 + h * (t1 - 0.0);
        -(if t <= 0.0 {
            0.0
        } else if t <= t1 {
            h * t
        } else {
            cumulative - h * (t1 - t)
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn r() -> NaiveDate {
        NaiveDate::from_ymd_opt(2024, 1, 2).unwrap()
    }

    #[test]
    fn flat_hazard_survival_is_exponential() {
        // Closed form: S(T) = exp(-lambda T) for a constant intensity.
        let c = HazardCurve::flat(r(), 0.02);
        for t in [0.0, 0.25, 1.0, 5.0, 30.0] {
            assert!((c.survival_at(t) - (-0.02f64 * t).exp()).abs() < 1e-15);
        }
    }

    #[test]
    fn log_survival_on_sorted_times_is_the_pointwise_one() {
        let c = HazardCurve::new(r(), vec![0.5, 1.0, 3.0, 5.0, 10.0], vec![0.01, 0.015, 0.02, 0.03, 0.025]).unwrap();
        let mut times = vec![-2.0, -0.0, 0.0, 1e-12, 0.25, 0.5, 0.5 + 1e-15, 0.75, 1.0, 1.0, 2.9999, 3.0, 4.0, 5.0];
        times.extend([7.5, 10.0, 10.0 + 1e-12, 12.0, 31.0]);
        let walked = c.log_survival_at_sorted(&times);
        assert_eq!(walked.len(), times.len());
        for (&t, w) in times.iter().zip(&walked) {
            assert_eq!(w.to_bits(), c.log_survival_at(t).to_bits(), "t = {t}");
        }
    }

    #[test]
    fn one_segment_log_survival_is_the_one_node_curves() {
        for (h, t1) in [(0.0123, 4.7), (0.0, 1.0), (0.85, 0.26), (3.3e-5, 10.01)] {
            let c = HazardCurve::new(r(), vec![t1], vec![h]).unwrap();
            for t in [-1.0, 0.0, 1e-9, 0.1, t1 * 0.5, t1, t1 + 1e-9, t1 + 0.3, 2.0 * t1, 40.0] {
                assert_eq!(
                    HazardCurve::one_segment_log_survival(h, t1, t).to_bits(),
                    c.log_survival_at(t).to_bits(),
                    "h {h} t1 {t1} t {t}"
                );
            }
        }
    }

    #[test]
    fn piecewise_integration() {
        let c = HazardCurve::new(r(), vec![1.0, 3.0], vec![0.01, 0.03]).unwrap();
        assert!((c.integrated_hazard(0.5) - 0.005).abs() < 1e-16);
        assert!((c.integrated_hazard(1.0) - 0.01).abs() < 1e-16);
        assert!((c.integrated_hazard(2.0) - 0.04).abs() < 1e-16);
        assert!((c.integrated_hazard(3.0) - 0.07).abs() < 1e-16);
        assert!((c.integrated_hazard(4.0) - 0.10).abs() < 1e-15);
        assert_eq!(c.hazard_at(1.0), 0.01);
        assert_eq!(c.hazard_at(1.0 + 1e-12), 0.03);
        assert!((c.default_density_at(2.0) - 0.03 * (-0.04f64).exp()).abs() < 1e-16);
    }

    #[test]
    fn survival_falls_with_non_negative_hazard() {
        let c = HazardCurve::new(r(), vec![0.5, 1.0, 2.0, 5.0], vec![0.0, 0.02, 0.5, 0.01]).unwrap();
        let mut prev = 1.0;
        for i in 0..100 {
            let s = c.survival_at(i as f64 * 0.07);
            assert!(s <= prev);
            prev = s;
        }
    }

    #[test]
    fn bad_nodes_are_refused() {
        assert!(HazardCurve::new(r(), vec![1.0, 1.0], vec![0.1, 0.1]).is_err());
        assert!(HazardCurve::new(r(), vec![0.0], vec![0.1]).is_err());
        assert!(HazardCurve::new(r(), vec![1.0], vec![f64::NAN]).is_err());
        assert!(HazardCurve::new(r(), vec![], vec![]).is_err());
    }
}
