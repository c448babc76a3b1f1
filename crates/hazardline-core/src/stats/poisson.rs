//! Exact Poisson interval for an intensity: d events over an exposure of E years.
//!
//! Garwood (1936, Biometrika 28, "Fiducial limits for the Poisson distribution"):
//! lo = chi2_quantile(alpha/2, 2d) / (2E), 0 at d = 0; hi = chi2_quantile(1 - alpha/2, 2d + 2) / (2E).
//! A chi-square quantile with 2k degrees of freedom is twice the Gamma(k, 1) quantile, so the
//! bounds are Gamma(d, 1) and Gamma(d + 1, 1) quantiles over E.

use super::special::{gamma_quantile, gamma_reg_lower, gamma_reg_upper};
use super::{half_alpha, Interval, StatsError};

/// Garwood exact interval for the rate of `d` events over `exposure` years at two-sided `level`.
pub fn garwood_interval(d: u64, exposure: f64, level: f64) -> Result<Interval, StatsError> {
    if !(exposure > 0.0 && exposure.is_finite()) {
        return Err(StatsError::BadExposure(exposure));
    }
    let ha = half_alpha(level)?;
    let df = d as f64;
    let lo = if d == 0 { 0.0 } else { gamma_quantile(df, ha)? / exposure };
    let hi = gamma_quantile(df + 1.0, 1.0 - ha)? / exposure;
    Ok(Interval { lo, hi })
}

/// P[X >= k] for X ~ Poisson(mean): 1 at k = 0, else the regularized lower incomplete gamma
/// P(k, mean) (the standard identity between the Poisson and gamma distributions).
pub fn poisson_upper_tail(k: u64, mean: f64) -> Result<f64, StatsError> {
    if !(mean >= 0.0 && mean.is_finite()) {
        return Err(StatsError::BadValue { name: "Poisson mean", value: mean });
    }
    if k == 0 {
        return Ok(1.0);
    }
    if mean == 0.0 {
        return Ok(0.0);
    }
    gamma_reg_lower(k as f64, mean)
}

/// P[X <= k] for X ~ Poisson(mean): Q(k + 1, mean).
pub fn poisson_lower_tail(k: u64, mean: f64) -> Result<f64, StatsError> {
    if !(mean >= 0.0 && mean.is_finite()) {
        return Err(StatsError::BadValue { name: "Poisson mean", value: mean });
    }
    if mean == 0.0 {
        return Ok(1.0);
    }
    gamma_reg_upper(k as f64 + 1.0, mean)
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Closed forms: P[X <= 0] = exp(-m), P[X >= 1] = 1 - exp(-m), P[X <= 1] = (1 + m) exp(-m).
    #[test]
    fn poisson_tails_closed_forms() {
        let m = 2.5f64;
        assert!((poisson_lower_tail(0, m).unwrap() - (-m).exp()).abs() < 1e-15);
        assert!((poisson_upper_tail(1, m).unwrap() + (-m).exp_m1()).abs() < 1e-15);
        assert!((poisson_lower_tail(1, m).unwrap() - (1.0 + m) * (-m).exp()).abs() < 1e-15);
        assert_eq!(poisson_upper_tail(0, m).unwrap(), 1.0);
        assert_eq!((poisson_upper_tail(3, 0.0).unwrap(), poisson_lower_tail(3, 0.0).unwrap()), (0.0, 1.0));
        assert!(poisson_upper_tail(1, -1.0).is_err());
    }

    /// d = 0: hi solves exp(-lambda E) = alpha / 2, so hi = -ln(alpha/2) / E (closed form).
    #[test]
    fn zero_events_closed_form() {
        let g = garwood_interval(0, 200.0, 0.95).unwrap();
        assert_eq!(g.lo, 0.0);
        assert!((g.hi - (-(0.025f64).ln() / 200.0)).abs() < 1e-12 * g.hi);
    }

    #[test]
    fn invalid_inputs_are_errors() {
        assert_eq!(garwood_interval(1, 0.0, 0.95), Err(StatsError::BadExposure(0.0)));
        assert!(garwood_interval(1, -1.0, 0.95).is_err());
        assert!(garwood_interval(1, f64::INFINITY, 0.95).is_err());
        assert!(garwood_interval(1, f64::NAN, 0.95).is_err());
        assert!(garwood_interval(1, 1.0, 1.5).is_err());
    }
}
