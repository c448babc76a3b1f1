//! Exact Poisson interval for an intensity: d events over an exposure of E years.
//!
//! Garwood (1936, Biometrika 28, "Fiducial limits for the Poisson distribution"):
//! lo = chi2_quantile(alpha/2, 2d) / (2E), 0 at d = 0; hi = chi2_quantile(1 - alpha/2, 2d + 2) / (2E).
//! A chi-square quantile with 2k degrees of freedom is twice the Gamma(k, 1) quantile, so the
//! bounds are Gamma(d, 1) and Gamma(d + 1, 1) quantiles over E.

use super::special::gamma_quantile;
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

#[cfg(test)]
mod tests {
    use super::*;

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
