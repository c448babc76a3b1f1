//! Regularized incomplete beta and gamma functions, their quantiles and the normal quantile.
//!
//! These wrap statrs 0.19 so that the rest of [`crate::stats`] never calls a statrs function
//! that can panic, and so that each tail is asked for on the side where it is small (the
//! continued fraction then computes it directly, not as `1 - x`).

use super::StatsError;
use statrs::distribution::{Beta, ContinuousCDF, Gamma, Normal};

/// I_x(a, b), the regularized lower incomplete beta function, for a, b > 0 and x in [0, 1].
pub fn beta_reg(a: f64, b: f64, x: f64) -> Result<f64, StatsError> {
    check_shapes(a, b)?;
    super::check_probability("x", x)?;
    if x == 0.0 {
        return Ok(0.0);
    }
    if x == 1.0 {
        return Ok(1.0);
    }
    statrs::function::beta::checked_beta_reg(a, b, x).map_err(|_| StatsError::BadValue { name: "beta argument", value: x })
}

/// The `prob` quantile of Beta(a, b).
pub fn beta_quantile(a: f64, b: f64, prob: f64) -> Result<f64, StatsError> {
    check_shapes(a, b)?;
    super::check_probability("prob", prob)?;
    let dist = Beta::new(a, b).map_err(|_| StatsError::BadValue { name: "beta shape", value: a.min(b) })?;
    Ok(dist.inverse_cdf(prob))
}

/// Q(a, x) = Gamma(a, x) / Gamma(a), the regularized upper incomplete gamma function.
pub fn gamma_reg_upper(a: f64, x: f64) -> Result<f64, StatsError> {
    if !(a > 0.0 && a.is_finite()) {
        return Err(StatsError::BadValue { name: "gamma shape", value: a });
    }
    if !(x >= 0.0) || x.is_nan() {
        return Err(StatsError::BadValue { name: "gamma argument", value: x });
    }
    if x == 0.0 {
        return Ok(1.0);
    }
    if x.is_infinite() {
        return Ok(0.0);
    }
    statrs::function::gamma::checked_gamma_ur(a, x).map_err(|_| StatsError::BadValue { name: "gamma argument", value: x })
}

/// The `prob` quantile of Gamma(shape a, rate 1).
pub fn gamma_quantile(a: f64, prob: f64) -> Result<f64, StatsError> {
    if !(a > 0.0 && a.is_finite()) {
        return Err(StatsError::BadValue { name: "gamma shape", value: a });
    }
    super::check_probability("prob", prob)?;
    let dist = Gamma::new(a, 1.0).map_err(|_| StatsError::BadValue { name: "gamma shape", value: a })?;
    Ok(dist.inverse_cdf(prob))
}

/// P[X >= x] for X chi-square with `dof` degrees of freedom, computed directly as Q(dof/2, x/2).
pub fn chi_square_upper_tail(x: f64, dof: f64) -> Result<f64, StatsError> {
    if !(dof > 0.0 && dof.is_finite()) {
        return Err(StatsError::BadValue { name: "degrees of freedom", value: dof });
    }
    gamma_reg_upper(dof / 2.0, x / 2.0)
}

/// The `prob` quantile of the chi-square distribution with `dof` degrees of freedom.
pub fn chi_square_quantile(prob: f64, dof: f64) -> Result<f64, StatsError> {
    if !(dof > 0.0 && dof.is_finite()) {
        return Err(StatsError::BadValue { name: "degrees of freedom", value: dof });
    }
    Ok(2.0 * gamma_quantile(dof / 2.0, prob)?)
}

/// The `prob` quantile of the standard normal distribution, prob in (0, 1).
pub fn normal_quantile(prob: f64) -> Result<f64, StatsError> {
    if !(prob > 0.0 && prob < 1.0) {
        return Err(StatsError::ProbabilityOutOfRange { name: "prob", value: prob });
    }
    let dist = Normal::new(0.0, 1.0).map_err(|_| StatsError::BadValue { name: "normal", value: prob })?;
    Ok(dist.inverse_cdf(prob))
}

fn check_shapes(a: f64, b: f64) -> Result<(), StatsError> {
    for (name, v) in [("beta shape a", a), ("beta shape b", b)] {
        if !(v > 0.0 && v.is_finite()) {
            return Err(StatsError::BadValue { name, value: v });
        }
    }
    Ok(())
}
