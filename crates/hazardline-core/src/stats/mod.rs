//! Statistics for the backtest: binomial intervals and tests, the Jeffreys test, the
//! Hosmer-Lemeshow test with given forecasts, the exact (Garwood) Poisson interval and the
//! traffic-light zone.
//!
//! Plain functions over counts and probabilities: no tables, no I/O. Every function checks its
//! input and returns a [`StatsError`] instead of panicking. Tail probabilities reach 1e-70 and
//! far below in a backtest (a handful of defaults in a bucket forecast at a few basis points),
//! so every tail is computed directly from a regularized incomplete beta or gamma function,
//! never as `1 - cdf`; see [`special`] for which routine computes what and why.

pub mod auc;
pub mod binomial;
pub mod hosmer_lemeshow;
pub mod poisson;
pub mod scores;
pub mod special;
pub mod survival;
pub mod vasicek;
pub mod zone;

pub use auc::{
    area_under, auc_delong, auc_difference_independent, auc_no_power_p, auc_paired, ranking_curves, Auc, PairedAuc,
    RankingCurves,
};
pub use binomial::{
    binomial_lower_tail, binomial_upper_tail, clopper_pearson, jeffreys_interval, jeffreys_p_value, wilson_interval,
};
pub use hosmer_lemeshow::{hosmer_lemeshow, BucketForecast, HosmerLemeshow};
pub use poisson::{garwood_interval, poisson_lower_tail, poisson_upper_tail};
pub use scores::{herfindahl, spiegelhalter, CalibrationScore};
pub use survival::{kaplan_meier, SurvivalCurve};
pub use vasicek::{supervisory_corporate_correlation, vasicek_count_interval, vasicek_lower_tail, vasicek_upper_tail};
pub use zone::{traffic_light, Zone, ZoneThresholds};

/// A two-sided interval `[lo, hi]`.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Interval {
    pub lo: f64,
    pub hi: f64,
}

/// Why a statistic cannot be computed; each message quotes the offending values.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum StatsError {
    #[error("no observations: the number of obligors n is 0")]
    NoObservations,
    #[error("{d} defaults out of {n} obligors: defaults cannot exceed obligors")]
    DefaultsExceedObligors { d: u64, n: u64 },
    #[error("{name} = {value} is not a probability in [0, 1]")]
    ProbabilityOutOfRange { name: &'static str, value: f64 },
    #[error("confidence level {0} must lie strictly between 0 and 1")]
    LevelOutOfRange(f64),
    #[error("exposure {0} years must be a positive finite number")]
    BadExposure(f64),
    #[error("{name} = {value} must be a finite number >= 0")]
    BadValue { name: &'static str, value: f64 },
    #[error("the Hosmer-Lemeshow test needs at least one bucket")]
    NoBuckets,
    #[error("bucket {index}: forecast {p} must lie strictly between 0 and 1 for the Hosmer-Lemeshow test (its variance n p (1 - p) divides)")]
    DegenerateForecast { index: usize, p: f64 },
    #[error("bucket {index}: {source}")]
    Bucket { index: usize, source: Box<StatsError> },
    #[error("zone thresholds must satisfy 0 < red ({red}) < yellow ({yellow}) < 1")]
    BadThresholds { yellow: f64, red: f64 },
    #[error("{what}: lengths differ ({a} and {b})")]
    LengthMismatch { what: &'static str, a: usize, b: usize },
    #[error("the AUC needs defaulters and survivors: {defaults} defaults, {survivors} survivors")]
    OneClass { defaults: u64, survivors: u64 },
    #[error("{what} did not converge after {iterations} iterations at a = {a}, b = {b}, x = {x}")]
    NoConvergence { what: &'static str, iterations: usize, a: f64, b: f64, x: f64 },
}

/// Checks a two-sided confidence level and returns alpha / 2.
pub(crate) fn half_alpha(level: f64) -> Result<f64, StatsError> {
    if level > 0.0 && level < 1.0 {
        Ok((1.0 - level) / 2.0)
    } else {
        Err(StatsError::LevelOutOfRange(level))
    }
}

/// Checks a count pair (d out of n, n > 0).
pub(crate) fn check_counts(d: u64, n: u64) -> Result<(), StatsError> {
    if n == 0 {
        return Err(StatsError::NoObservations);
    }
    if d > n {
        return Err(StatsError::DefaultsExceedObligors { d, n });
    }
    Ok(())
}

/// Checks a probability in [0, 1] (NaN fails).
pub(crate) fn check_probability(name: &'static str, p: f64) -> Result<(), StatsError> {
    if (0.0..=1.0).contains(&p) {
        Ok(())
    } else {
        Err(StatsError::ProbabilityOutOfRange { name, value: p })
    }
}
