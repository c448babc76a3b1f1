//! Binomial intervals for d defaults out of n obligors and binomial tail tests.
//!
//! Intervals follow Brown, Cai and DasGupta (2001, Statistical Science 16(2), "Interval
//! estimation for a binomial proportion"): Clopper-Pearson exact (beta quantiles), Jeffreys
//! (equal-tailed Beta(d + 1/2, n - d + 1/2) quantiles, lower bound 0 at d = 0 and upper bound 1
//! at d = n) and Wilson score. Tails use the identity P[D >= d] = I_p(d, n - d + 1) for
//! D ~ Binomial(n, p) (e.g. Abramowitz and Stegun 26.5.24), so the small side is never
//! formed as a difference.

use super::special::{beta_quantile, beta_quantile_upper, beta_reg, beta_reg_xy, normal_quantile};
use super::{check_counts, check_probability, half_alpha, Interval, StatsError};

/// Clopper-Pearson exact interval at two-sided `level`:
/// lo = Beta(d, n - d + 1) quantile at alpha/2 (0 when d = 0),
/// hi = Beta(d + 1, n - d) upper quantile at alpha/2 (1 when d = n).
pub fn clopper_pearson(d: u64, n: u64, level: f64) -> Result<Interval, StatsError> {
    check_counts(d, n)?;
    let ha = half_alpha(level)?;
    let (df, nf) = (d as f64, n as f64);
    let lo = if d == 0 { 0.0 } else { beta_quantile(df, nf - df + 1.0, ha)? };
    let hi = if d == n { 1.0 } else { beta_quantile_upper(df + 1.0, nf - df, ha)? };
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
    let hi = if d == n { 1.0 } else { beta_quantile_upper(a, b, ha)? };
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
    // x = 1 - p and its complement p exactly.
    beta_reg_xy((n - d) as f64, d as f64 + 1.0, 1.0 - p, p)
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

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn invalid_inputs_are_errors() {
        assert_eq!(clopper_pearson(0, 0, 0.95), Err(StatsError::NoObservations));
        assert_eq!(jeffreys_interval(6, 5, 0.95), Err(StatsError::DefaultsExceedObligors { d: 6, n: 5 }));
        assert_eq!(wilson_interval(1, 5, 1.0), Err(StatsError::LevelOutOfRange(1.0)));
        assert!(wilson_interval(1, 5, 0.0).is_err());
        assert!(clopper_pearson(1, 5, f64::NAN).is_err());
        assert!(binomial_upper_tail(1, 5, -0.01).is_err());
        assert!(binomial_lower_tail(1, 5, 1.01).is_err());
        assert!(jeffreys_p_value(1, 5, f64::NAN).is_err());
        assert!(binomial_upper_tail(3, 2, 0.5).is_err());
    }

    /// Boundary conventions: CP and Jeffreys lo = 0 at d = 0 and hi = 1 at d = n; Wilson's
    /// lower bound is exactly 0 at d = 0 in the cancellation-free form.
    #[test]
    fn boundary_conventions() {
        for n in [1u64, 10, 1000] {
            for f in [clopper_pearson, jeffreys_interval, wilson_interval] {
                let i0 = f(0, n, 0.95).unwrap();
                assert_eq!(i0.lo, 0.0);
                assert!(i0.hi > 0.0 && i0.hi < 1.0);
                let i1 = f(n, n, 0.95).unwrap();
                assert!((i1.hi - 1.0).abs() < 1e-15);
                assert!(i1.lo > 0.0 && i1.lo < 1.0);
            }
        }
    }

    /// Tails of n = 1: P[D >= 1] = p and P[D <= 0] = 1 - p; degenerate p.
    #[test]
    fn tails_small_cases() {
        assert!((binomial_upper_tail(1, 1, 0.3).unwrap() - 0.3).abs() < 1e-14);
        assert!((binomial_lower_tail(0, 1, 0.3).unwrap() - 0.7).abs() < 1e-15);
        assert_eq!(binomial_upper_tail(0, 7, 0.3).unwrap(), 1.0);
        assert_eq!(binomial_upper_tail(2, 7, 0.0).unwrap(), 0.0);
        assert_eq!(binomial_lower_tail(2, 7, 1.0).unwrap(), 0.0);
        assert_eq!(binomial_lower_tail(7, 7, 0.4).unwrap(), 1.0);
        // P[D >= n] = p^n directly, far below 1e-70.
        let t = binomial_upper_tail(20, 20, 1e-5).unwrap();
        assert!((t / 1e-100 - 1.0).abs() < 1e-12, "{t}");
    }

    /// The two tails overlap in exactly P[D = d]: P[D >= d] + P[D <= d] = 1 + P[D = d].
    #[test]
    fn tails_add_up() {
        let (n, p) = (12u64, 0.2f64);
        for d in 0..=n {
            let pmf = (1..=d).fold(1.0, |c, k| c * (n - k + 1) as f64 / k as f64)
                * p.powi(d as i32)
                * (1.0 - p).powi((n - d) as i32);
            let s = binomial_upper_tail(d, n, p).unwrap() + binomial_lower_tail(d, n, p).unwrap();
            assert!((s - 1.0 - pmf).abs() < 1e-13, "d={d}: {s} vs {}", 1.0 + pmf);
        }
    }
}
