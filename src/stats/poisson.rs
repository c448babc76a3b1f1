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
