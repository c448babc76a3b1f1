//! Binomial intervals for d defaults out of n obligors and binomial tail tests.
//!
//! Intervals follow Brown, Cai and DasGupta (2001, Statistical Science 16(2), "Interval
//! estimation for a binomial proportion"): Clopper-Pearson exact (beta quantiles), Jeffreys
//! (equal-tailed Beta(d + 1/2, n - d + 1/2) quantiles, lower bound 0 at d = 0 and upper bound 1
//! at d = n) and Wilson score. Tails use the identity P[D >= d] = I_p(d, n - d + 1) for
//! D ~ Binomial(n, p) (e.g. Abramowitz and Stegun 26.5.24), so the small side is never
//! formed as a difference.

use super::special::{beta_quantile, beta_reg, normal_quantile};
use super::{check_counts, check_probability, half_alpha, Interval, StatsError};

/// Clopper-Pearson exact interval at two-sided `level`:
/// lo = Beta(d, n - d + 1) quantile at alpha/2 (0 when d = 0),
/// hi = Beta(d + 1, n - d) quantile at 1 - alpha/2 (1 when d = n).
pub fn clopper_pearson(d: u64, n: u64, level: f64) -> Result<Interval, StatsError> {
    check_counts(d, n)?;
    let ha = half_alpha(level)?;
    let (df, nf) = (d as f64, n as f64);
    let lo = if d == 0 { 0.0 } else { beta_quantile(df, nf - df + 1.0, ha)? };
    let hi = if d == n { 1.0 } else { beta_quantile(df + 1.0, nf - df, 1.0 - ha)? };
    Ok(Interval { lo, hi })
}

/// Jeffreys interval at two-sided `level`: the equal-tailed quantiles of the Beta(d + 1/2,
/// n - d + 1/2) posterior, with lo = 0 at d = 0 and hi = 1 at d = n (Brown, Cai and DasGupta
/// 2001, section 4.1.2; without that modification the interval would exclude p = 0 at d = 0).
pub fn jeffreys_interval(d: u64, n: u64, level: f64) -> Result<Interval, StatsError> {
    check_counts(d, n)?;
    let ha = half_alpha(level)?;
    let (a, b) = jeffreys_shapes(d, n);
    let lo = if d == 0 { 0.0 } else { beta_quantile(a, b, ha)? };
    let hi = if d == n { 1.0 } else { beta_quantile(a, b, 1.0 - ha)? };
    Ok(Interval { lo, hi })
}

/// Wilson score interval at two-sided `level` (Wilson 1927, JASA; Brown, Cai and DasGupta
/// 2001, eq. 4). Each bound is written in a form without cancellation:
/// lo = 2 d^2 (1 + z^2/n) / ((n + z^2) (2d + z^2 + z sqrt(z^2 + 4 d (n - d) / n))),
/// which equals the textbook (2d + z^2 - z sqrt(...)) / (2 (n + z^2)) and is exactly 0 at
/// d = 0; hi is 1 minus the same expression with d replaced by n - d.
pub fn wilson_interval(d: u64, n: u64, level: f64) -> Result<Interval, StatsError> {
    check_counts(d, n)?;
    let ha = half_alpha(level)?;
    let z = -normal_quantile(ha)?;
    let (df, nf) = (d as f64, n as f64);
    let z2 = z * z;
    let root = (z2 + 4.0 * df * (nf - df) / nf).sqrt();
    let near = |k: f64| 2.0 * k * k * (1.0 + z2 / nf) / ((nf + z2) * (2.0 * k + z2 + z * root));
    Ok(Interval { lo: near(df), hi: 1.0 - near(nf - df) })
}

/// P[D >= d] for D ~ Binomial(n, p), as I_p(d, n - d + 1); 1 at d = 0.
pub fn binomial_upper_tail(d: u64, n: u64, p: f64) -> Result<f64, StatsError> {
    check_counts(d, n)?;
    check_probability("p", p)?;
    if d == 0 || p == 1.0 {
        return Ok(1.0);
    }
    if p == 0.0 {
        return Ok(0.0);
    }
    beta_reg(d as f64, (n - d) as f64 + 1.0, p)
}

/// P[D <= d] for D ~ Binomial(n, p), as I_{1-p}(n - d, d + 1); 1 at d = n.
pub fn binomial_lower_tail(d: u64, n: u64, p: f64) -> Result<f64, StatsError> {
    check_counts(d, n)?;
    check_probability("p", p)?;
    if d == n || p == 0.0 {
        return Ok(1.0);
    }
    if p == 1.0 {
        return Ok(0.0);
    }
    beta_reg((n - d) as f64, d as f64 + 1.0, 1.0 - p)
}

/// Jeffreys test p-value: the Beta(d + 1/2, n - d + 1/2) cdf at the forecast `p`, the
/// posterior probability (Jeffreys prior) that the true PD is at most p. Small values say the
/// forecast is too low (as used in European supervisory PD back-testing instructions).
pub fn jeffreys_p_value(d: u64, n: u64, p: f64) -> Result<f64, StatsError> {
    check_counts(d, n)?;
    check_probability("p", p)?;
    let (a, b) = jeffreys_shapes(d, n);
    beta_reg(a, b, p)
}

fn jeffreys_shapes(d: u64, n: u64) -> (f64, f64) {
    (d as f64 + 0.5, (n - d) as f64 + 0.5)
}
