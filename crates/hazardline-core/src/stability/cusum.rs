//! Structural-break tests on one entity's parameter series.
//!
//! The main test is the CUSUM of recursive residuals of Brown, Durbin and Evans (1975, Journal
//! of the Royal Statistical Society B 37, 149-192), for the constant-mean model x_t = mu + e_t
//! (k = 1 regressor). With T observations, the recursive residuals are
//! w_r = (x_r - mean(x_1..x_{r-1})) sqrt((r - 1) / r) for r = 2..T; sigma is estimated by
//! sqrt(sum w_r^2 / (T - k)) (the sum of squared recursive residuals equals the full-sample
//! residual sum of squares, so this is the sample standard deviation of x); the CUSUM is
//! W_r = sum_{j=2..r} w_j / sigma. A break is signalled where |W_r| crosses the line through
//! (k, a sqrt(T - k)) and (T, 3a sqrt(T - k)), i.e. |W_r| > a sqrt(T - k) + 2a (r - k) / sqrt(T - k),
//! with a = 0.948 at 5%, 1.143 at 1% and 0.850 at 10% (the values of the 1975 paper, recalled
//! from memory).
//!
//! A second statistic, the OLS-residual CUSUM of Ploberger and Kramer (1992, Econometrica 60,
//! 271-285), sup_r |sum_{t<=r} (x_t - mean x)| / (sigma sqrt(T)), is reported beside it; its
//! 5% critical value 1.358 (the Kolmogorov distribution's, recalled from memory) is not used
//! for flags.

use super::StabilityError;

/// Boundary constant of the Brown-Durbin-Evans CUSUM at 10% (recalled from memory).
pub const BDE_A_10: f64 = 0.850;
/// Boundary constant of the Brown-Durbin-Evans CUSUM at 5% (recalled from memory).
pub const BDE_A_5: f64 = 0.948;
/// Boundary constant of the Brown-Durbin-Evans CUSUM at 1% (recalled from memory).
pub const BDE_A_1: f64 = 1.143;
/// 5% critical value of the OLS-residual CUSUM (Ploberger and Kramer 1992; recalled from memory).
pub const OLS_CUSUM_CRIT_5: f64 = 1.358;

/// Significance level of the CUSUM boundary.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum CusumLevel {
    /// 10%: a = 0.850.
    Ten,
    /// 5%: a = 0.948.
    Five,
    /// 1%: a = 1.143.
    One,
}
crate::text_form!(CusumLevel { Ten => "10%", Five => "5%", One => "1%" });

impl CusumLevel {
    /// The boundary constant a.
    pub fn a(self) -> f64 {
        match self {
            CusumLevel::Ten => BDE_A_10,
            CusumLevel::Five => BDE_A_5,
            CusumLevel::One => BDE_A_1,
        }
    }
}

/// What series the CUSUM test runs on.
///
/// A level shift in a parameter (the break a reviewer cares about: the parameter jumps and stays
/// there) is, in daily changes, a single spike; the constant-mean CUSUM on changes sees a spike
/// only as one step of size shift / sigma_changes, which rarely crosses a boundary that starts at
/// a sqrt(T - 1), and a shift in the mean of the changes is a change of trend, not of level.
/// The test on levels (constant-mean model on the parameter itself) accumulates every day after
/// the shift and detects it. Levels is therefore the default; `DailyChanges` is kept for a
/// reviewer who wants to test for a change of drift.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum CusumTarget {
    /// The parameter's values (detects level shifts).
    Levels,
    /// The parameter's daily changes between consecutive observations within the gap limit
    /// (detects a change of drift).
    DailyChanges,
}

impl CusumTarget {
    /// `levels` or `daily_changes`.
    pub fn as_str(self) -> &'static str {
        match self {
            CusumTarget::Levels => "levels",
            CusumTarget::DailyChanges => "daily_changes",
        }
    }
}

/// The window one test covers.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum CusumScope {
    /// One test per entity, series and review period (the constant-mean model is more plausible
    /// over a quarter than over years, and every result belongs to one period).
    Period,
    /// One test per entity and series over the whole history.
    History,
}

impl CusumScope {
    /// `period` or `history`.
    pub fn as_str(self) -> &'static str {
        match self {
            CusumScope::Period => "period",
            CusumScope::History => "history",
        }
    }
}

/// Recursive residuals of the constant-mean model: w_r = (x_r - mean(x_1..x_{r-1})) sqrt((r-1)/r),
/// for r = 2..T (so T - 1 values; none below two observations).
pub fn recursive_residuals(x: &[f64]) -> Vec<f64> {
    let mut sum = x.first().copied().unwrap_or(0.0);
    let mut out = Vec::with_capacity(x.len().saturating_sub(1));
    for (i, v) in x.iter().enumerate().skip(1) {
        let r = (i + 1) as f64;
        out.push((v - sum / (r - 1.0)) * ((r - 1.0) / r).sqrt());
        sum += v;
    }
    out
}

/// The Brown-Durbin-Evans CUSUM path of one series.
#[derive(Debug, Clone, PartialEq)]
pub struct CusumPath {
    /// Number of observations T.
    pub n: usize,
    /// Recursive residuals w_2..w_T.
    pub residuals: Vec<f64>,
    /// sqrt(sum w_r^2 / (T - 1)).
    pub sigma: f64,
    /// W_2..W_T: cumulative sums of w_r / sigma. `cusum[i]` belongs to observation `i + 1`.
    pub cusum: Vec<f64>,
}

impl CusumPath {
    /// The boundary at observation index `i` (0-based, i >= 1) for constant `a`:
    /// a sqrt(T - 1) + 2a (r - 1) / sqrt(T - 1) with r = i + 1.
    pub fn boundary(&self, i: usize, a: f64) -> f64 {
        let m = (self.n - 1) as f64;
        a * m.sqrt() + 2.0 * a * i as f64 / m.sqrt()
    }

    /// The 0-based observation index where |W_r| first exceeds the boundary, if any.
    pub fn first_crossing(&self, a: f64) -> Option<usize> {
        self.cusum.iter().enumerate().find(|(j, w)| w.abs() > self.boundary(j + 1, a)).map(|(j, _)| j + 1)
    }

    /// max_r |W_r| / boundary_r: above 1 means the boundary was crossed.
    pub fn max_ratio(&self, a: f64) -> f64 {
        self.cusum.iter().enumerate().map(|(j, w)| w.abs() / self.boundary(j + 1, a)).fold(0.0, f64::max)
    }
}

fn check_series(x: &[f64]) -> Result<(), StabilityError> {
    if x.len() < 3 {
        return Err(StabilityError::TooShort { n: x.len(), needed: 3 });
    }
    if x.iter().any(|v| !v.is_finite()) {
        return Err(StabilityError::NonFinite { what: "CUSUM series" });
    }
    Ok(())
}

/// The Brown-Durbin-Evans CUSUM of `x` under the constant-mean model. Errors on fewer than
/// three values, a non-finite value, or a constant series (sigma = 0: nothing to test).
pub fn bde_cusum(x: &[f64]) -> Result<CusumPath, StabilityError> {
    check_series(x)?;
    let residuals = recursive_residuals(x);
    let sigma = (residuals.iter().map(|w| w * w).sum::<f64>() / residuals.len() as f64).sqrt();
    if !(sigma > 0.0 && sigma.is_finite()) {
        return Err(StabilityError::ZeroVariance);
    }
    let cusum = residuals
        .iter()
        .scan(0.0, |acc, w| {
            *acc += w / sigma;
            Some(*acc)
        })
        .collect();
    Ok(CusumPath { n: x.len(), residuals, sigma, cusum })
}

/// The OLS-residual CUSUM statistic (Ploberger and Kramer 1992):
/// sup_r |sum_{t<=r} (x_t - mean x)| / (sigma sqrt(T)), sigma the sample standard deviation.
pub fn ols_cusum_statistic(x: &[f64]) -> Result<f64, StabilityError> {
    check_series(x)?;
    let n = x.len() as f64;
    let m = x.iter().sum::<f64>() / n;
    let sigma = (x.iter().map(|v| (v - m) * (v - m)).sum::<f64>() / (n - 1.0)).sqrt();
    if !(sigma > 0.0 && sigma.is_finite()) {
        return Err(StabilityError::ZeroVariance);
    }
    let mut acc: f64 = 0.0;
    let mut sup: f64 = 0.0;
    for v in x {
        acc += v - m;
        sup = sup.max(acc.abs());
    }
    Ok(sup / (sigma * n.sqrt()))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn hand_worked_recursive_residuals() {
        // x = 1, 3, 2, 6 (T = 4, k = 1).
        //   w2 = (3 - 1) sqrt(1/2)     = 1.414214
        //   w3 = (2 - 2) sqrt(2/3)     = 0
        //   w4 = (6 - 2) sqrt(3/4)     = 3.464102
        // sum w^2 = 2 + 0 + 12 = 14 = sum (x - 3)^2; sigma = sqrt(14/3) = 2.160247.
        // W2 = 0.654654, W3 = 0.654654, W4 = (1.414214 + 3.464102) / 2.160247 = 4.878315 / 2.160247 = 2.258221.
        // Boundary (a = 0.948, T - k = 3): 0.948 sqrt(3) + 2 (0.948)(r - 1)/sqrt(3) = 1.641984 + 1.094655 (r - 1)
        //   r = 2: 2.736640, r = 3: 3.831296, r = 4: 4.925952 (= 3a sqrt 3): no crossing.
        let p = bde_cusum(&[1.0, 3.0, 2.0, 6.0]).unwrap();
        let want_w = [2f64.sqrt(), 0.0, 4.0 * 0.75f64.sqrt()];
        for (w, e) in p.residuals.iter().zip(want_w) {
            assert!((w - e).abs() < 1e-12);
        }
        assert!((p.sigma - (14.0f64 / 3.0).sqrt()).abs() < 1e-12);
        for (w, e) in p.cusum.iter().zip([0.654654, 0.654654, 2.258221]) {
            assert!((w - e).abs() < 1e-6, "{:?}", p.cusum);
        }
        for (i, e) in [(1, 2.736640), (2, 3.831296), (3, 4.925952)] {
            assert!((p.boundary(i, BDE_A_5) - e).abs() < 1e-6);
        }
        assert_eq!(p.first_crossing(BDE_A_5), None);
    }

    #[test]
    fn hand_worked_crossing() {
        // x = 0, 0, 0, 0, 1, 1, 1, 1 (T = 8): w2..w4 = 0;
        //   w5 = (1 - 0) sqrt(4/5)   = 0.894427
        //   w6 = (1 - 1/5) sqrt(5/6) = 0.730297
        //   w7 = (1 - 2/6) sqrt(6/7) = 0.617213
        //   w8 = (1 - 3/7) sqrt(7/8) = 0.534522
        // sum w^2 = 0.8 + 0.533333 + 0.380952 + 0.285714 = 2 = sum (x - 0.5)^2;
        // sigma = sqrt(2/7) = 0.534522; cumulative sums of w: 0.894427, 1.624724, 2.241937, 2.776460,
        // divided by sigma: W5 = 1.673320, W6 = 3.039580, W7 = 4.194281, W8 = 5.194281.
        // At 5% (a = 0.948): boundary 2.508172 + 0.716621 (r - 1); r = 5: 5.374655 > W5, ...,
        // r = 8: 7.524517 > W8: no crossing (too short to reject).
        // With a = 0.3: boundary 0.793725 + 0.226779 (r - 1); r = 5: 1.700840 > 1.673320 (a
        // near miss), r = 6: 1.927619 < 3.039580: first crossing at r = 6, index 5.
        let x = [0.0, 0.0, 0.0, 0.0, 1.0, 1.0, 1.0, 1.0];
        let p = bde_cusum(&x).unwrap();
        for (w, e) in p.cusum[3..].iter().zip([1.673320, 3.039580, 4.194281, 5.194281]) {
            assert!((w - e).abs() < 1e-6, "{:?}", p.cusum);
        }
        assert_eq!(p.first_crossing(BDE_A_5), None);
        assert_eq!(p.first_crossing(0.3), Some(5));
        assert!((p.boundary(4, 0.3) - 1.700840).abs() < 1e-6);
        // OLS CUSUM: x - 0.5 sums to -2 at r = 4 at most; 2 / (0.534522 sqrt 8) = 1.322876.
        assert!((ols_cusum_statistic(&x).unwrap() - 1.322876).abs() < 1e-6);
    }

    #[test]
    fn constants_and_bad_input() {
        // Brown, Durbin and Evans (1975, JRSS B), recalled from memory.
        assert_eq!(CusumLevel::Five.a(), 0.948);
        assert_eq!(CusumLevel::One.a(), 1.143);
        assert_eq!(CusumLevel::Ten.a(), 0.850);
        assert!(matches!(bde_cusum(&[1.0, 2.0]), Err(StabilityError::TooShort { .. })));
        assert!(matches!(bde_cusum(&[1.0; 10]), Err(StabilityError::ZeroVariance)));
        assert!(matches!(bde_cusum(&[1.0, f64::INFINITY, 2.0]), Err(StabilityError::NonFinite { .. })));
        assert!(recursive_residuals(&[]).is_empty());
    }
}
