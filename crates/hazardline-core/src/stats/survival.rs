//! The product-limit (Kaplan-Meier 1958) estimator of a survival function under right
//! censoring, with Greenwood's (1926) variance.
//!
//! Subjects enter at time 0 and leave at their time, with an event (a default) or censored.
//! At each distinct event time t_i with d_i events among the n_i subjects still at risk (those
//! whose time is >= t_i: a subject censored at t_i counts as at risk at t_i, the usual
//! convention), S(t) = prod over t_i <= t of (1 - d_i / n_i), and
//! Var S(t) = S(t)^2 sum over t_i <= t of d_i / (n_i (n_i - d_i)).
//! The pointwise interval on S uses the log-log (complementary log-log) transform:
//! g(S) = ln(-ln S), so lo = S^exp(w) and hi = S^exp(-w) with w = z se / (S |ln S|). It stays
//! inside (0, 1) without clipping (the log transform's upper end passes 1 and is cut there,
//! which puts a rate's lower end at 0 even after defaults), and it is the transform
//! statsmodels' `SurvfuncRight.quantile_ci` uses by default; tests/reference/backtest_scipy.py
//! writes it as `lo` / `hi` and checks it against that method, and
//! tests/all/backtest_reference.rs compares this module with it. Where S = 1 (no event yet) or
//! S = 0 the transform is undefined and the interval is the point.

use super::{special, Interval, StatsError};

/// One step of the estimate: at `time`, `events` of `at_risk`, survival just after.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Step {
    pub time: f64,
    pub at_risk: u64,
    pub events: u64,
    pub survival: f64,
    /// Greenwood's sum up to and including this step.
    pub greenwood: f64,
}

/// A Kaplan-Meier estimate.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct SurvivalCurve {
    pub subjects: u64,
    pub events: u64,
    /// Steps at the event times, in time order.
    pub steps: Vec<Step>,
}

impl SurvivalCurve {
    /// S(t) and its Greenwood standard error (1 and 0 before the first event). After the
    /// last step the estimate stays at its last value; [`SurvivalCurve::at_risk_beyond`]
    /// says whether anyone was still observed there.
    pub fn at(&self, t: f64) -> (f64, f64) {
        let i = self.steps.partition_point(|s| s.time <= t);
        match i.checked_sub(1).map(|k| self.steps[k]) {
            None => (1.0, 0.0),
            Some(s) => (s.survival, s.survival * s.greenwood.max(0.0).sqrt()),
        }
    }

    /// The interval on S(t) at the two-sided `level` (log-log transform, see the module
    /// notes); the point itself where the transform is undefined (S = 1 or S = 0, or a
    /// standard error of 0).
    pub fn interval(&self, t: f64, level: f64) -> Result<Interval, StatsError> {
        let z = special::normal_quantile(1.0 - super::half_alpha(level)?)?;
        let (s, se) = self.at(t);
        if se == 0.0 || s <= 0.0 || s >= 1.0 {
            return Ok(Interval { lo: s, hi: s });
        }
        let w = z * se / (s * s.ln().abs());
        Ok(Interval { lo: s.powf(w.exp()), hi: s.powf((-w).exp()) })
    }
}

/// The Kaplan-Meier estimate from each subject's time (>= 0) and whether it ended in an
/// event.
pub fn kaplan_meier(times: &[f64], events: &[bool]) -> Result<SurvivalCurve, StatsError> {
    if times.len() != events.len() {
        return Err(StatsError::LengthMismatch { what: "times and events", a: times.len(), b: events.len() });
    }
    if let Some(&t) = times.iter().find(|t| !(t.is_finite() && **t >= 0.0)) {
        return Err(StatsError::BadValue { name: "time", value: t });
    }
    let mut order: Vec<(f64, bool)> = times.iter().copied().zip(events.iter().copied()).collect();
    order.sort_by(|a, b| a.0.total_cmp(&b.0));
    let mut out = SurvivalCurve { subjects: order.len() as u64, events: 0, steps: Vec::new() };
    let (mut at_risk, mut s, mut g) = (order.len() as u64, 1.0f64, 0.0f64);
    let mut i = 0;
    while i < order.len() {
        let t = order[i].0;
        let j = i + order[i..].partition_point(|x| x.0 == t);
        let d = order[i..j].iter().filter(|x| x.1).count() as u64;
        if d > 0 {
            s *= 1.0 - d as f64 / at_risk as f64;
            g += if d < at_risk { d as f64 / (at_risk as f64 * (at_risk - d) as f64) } else { 0.0 };
            out.events += d;
            out.steps.push(Step { time: t, at_risk, events: d, survival: s, greenwood: g });
        }
        at_risk -= (j - i) as u64;
        i = j;
    }
    Ok(out)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn without_censoring_it_is_the_empirical_proportion() {
        let t = [1.0, 2.0, 2.0, 3.0, 5.0];
        let e = [true, true, false, true, false];
        // At 2.0 the censored subject is at risk: S = (4/5) (3/4) = 0.6 after time 2.
        let km = kaplan_meier(&t, &e).unwrap();
        assert!((km.at(2.5).0 - 0.6).abs() < 1e-15);
        let no_censoring = kaplan_meier(&[1.0, 2.0, 4.0, 4.0], &[true, false, true, false]).unwrap();
        assert_eq!(no_censoring.at(0.5), (1.0, 0.0));
        let all_observed = kaplan_meier(&[1.0, 2.0, 3.0, 9.0], &[true, true, false, false]);
        // Censoring only after the evaluation time: S(2.5) = 2/4.
        assert!((all_observed.unwrap().at(2.5).0 - 0.5).abs() < 1e-15);
    }

    #[test]
    fn greenwood_without_censoring_is_the_binomial_variance() {
        let t = [1.0, 2.0, 3.0, 4.0, 6.0, 7.0, 8.0, 9.0];
        let e = [true, false, true, false, false, false, false, false];
        // Censoring at 2 changes the risk set; compare instead a set censored only at the end.
        let t2 = [1.0, 3.0, 9.0, 9.0, 9.0, 9.0, 9.0, 9.0];
        let e2 = [true, true, false, false, false, false, false, false];
        let km = kaplan_meier(&t2, &e2).unwrap();
        let (s, se) = km.at(5.0);
        assert!((s - 6.0 / 8.0).abs() < 1e-15);
        assert!((se * se - s * (1.0 - s) / 8.0).abs() < 1e-15);
        assert!(kaplan_meier(&t, &e).unwrap().at(5.0).0 < 1.0);
        assert!(kaplan_meier(&[1.0], &[true, false]).is_err());
        assert!(kaplan_meier(&[-1.0], &[true]).is_err());
    }
}
