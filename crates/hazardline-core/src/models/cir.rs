//! The CIR intensity model d lambda = kappa (theta - lambda) dt + sigma sqrt(lambda) dW and its
//! closed-form survival, priced through the standard CDS legs.
//!
//! Survival is the affine bond-price formula of Cox, Ingersoll and Ross (1985, Econometrica,
//! eq. 23) with the short rate read as the default intensity: S(t) = A(t) exp(-B(t) lambda0),
//!
//! ```text
//! gamma = sqrt(kappa^2 + 2 sigma^2)
//! B(t)  = 2 (e^{gamma t} - 1) / ((gamma + kappa)(e^{gamma t} - 1) + 2 gamma)
//! A(t)  = [2 gamma e^{(kappa + gamma) t / 2} / ((gamma + kappa)(e^{gamma t} - 1) + 2 gamma)]^{2 kappa theta / sigma^2}
//! ```
//!
//! Written that way the formula overflows for gamma t > 709 and loses every digit of ln A when
//! sigma is small (2 kappa theta / sigma^2 times a logarithm that is O(sigma^2)). This module
//! evaluates the same function in an equivalent form with E = e^{-gamma t}, delta = gamma -
//! kappa = 2 sigma^2 / (gamma + kappa) and rho = delta / (gamma + kappa), g(x) = ln(1 + x) / x:
//!
//! ```text
//! B(t)    = 2 (1 - E) / ((gamma + kappa) + delta E)
//! ln A(t) = theta a(t),  a(t) = 4 kappa / (gamma + kappa)^2 [g(rho) - E g(rho E)] - 2 kappa t / (gamma + kappa)
//! ```
//!
//! which has no exponent that grows with t, no division by sigma^2, and tends to the
//! deterministic limit a(t) = -(t - (1 - e^{-kappa t}) / kappa) as sigma -> 0. Since ln S =
//! theta a(t) - lambda0 B(t), the log-survival is linear in (theta, lambda0) for fixed
//! (kappa, sigma); the fits use that.
//!
//! CDS legs under CIR are the standard model's legs (crate::instruments::cds) with the exact
//! CIR survival at every point of the pricing grid, and protection nodes every `grid_step`
//! years (monthly by default) besides the discount pillars, so the protection integral treats
//! the hazard as flat only between neighbouring grid nodes. The error of that against a daily
//! grid is measured in tests/all/cir.rs (below 1e-4 bp of par spread for the parameter sets
//! there).
//!
//! Pure: parameters and curves in, numbers out.

use crate::curves::{DiscountCurve, HazardCurve, HazardCurveError};
use crate::instruments::cds::{
    evaluate_terms, AccrualIntegration, CdsContract, CdsLegs, LegPlan, ReferenceDateMismatch,
};
use crate::math::Scalar;
use chrono::NaiveDate;

/// Default spacing of the protection nodes of the CIR pricing grid (years, Act/365F): monthly.
pub const DEFAULT_GRID_STEP: f64 = 1.0 / 12.0;

/// Parameters of a CIR intensity (all per year, on the Act/365F axis of the curves).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct CirParams {
    /// Speed of mean reversion.
    pub kappa: f64,
    /// Long-run level of the intensity.
    pub theta: f64,
    /// Volatility coefficient.
    pub sigma: f64,
    /// Intensity at the reference date.
    pub lambda0: f64,
}

/// Parameters outside the model's domain.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
#[error("CIR parameters kappa = {kappa}, theta = {theta}, sigma = {sigma}, lambda0 = {lambda0} are not valid: kappa, theta must be > 0, sigma >= 0, lambda0 >= 0, all finite")]
pub struct CirParamsError {
    pub kappa: f64,
    pub theta: f64,
    pub sigma: f64,
    pub lambda0: f64,
}

/// The arithmetic the survival formula needs beyond [`Scalar`]; implemented for `f64` here and
/// for the fit's gradient type in `calibrate::cir`.
pub trait CirScalar: Scalar {
    fn sqrt(self) -> Self;
    /// ln(1 + x), accurate for small x.
    fn ln_1p(self) -> Self;
    /// e^x - 1, accurate for small x.
    fn exp_m1(self) -> Self;
    fn recip(self) -> Self;
}

impl CirScalar for f64 {
    #[inline]
    fn sqrt(self) -> f64 {
        f64::sqrt(self)
    }
    #[inline]
    fn ln_1p(self) -> f64 {
        f64::ln_1p(self)
    }
    #[inline]
    fn exp_m1(self) -> f64 {
        f64::exp_m1(self)
    }
    #[inline]
    fn recip(self) -> f64 {
        1.0 / self
    }
}

/// The t-independent parts of the affine coefficients for given (kappa, sigma).
#[derive(Debug, Clone, Copy)]
pub struct CirCoefficients<S> {
    gamma: S,
    /// gamma + kappa.
    gpk: S,
    /// gamma - kappa = 2 sigma^2 / (gamma + kappa).
    delta: S,
    rho: S,
    g_rho: S,
    /// 4 kappa / (gamma + kappa)^2.
    c1: S,
    /// 2 kappa / (gamma + kappa).
    c2: S,
}

/// g(x) = ln(1 + x) / x with g(0) = 1 (value and derivative continuous at 0).
#[inline]
fn g_fn<S: CirScalar>(x: S) -> S {
    if x.value().abs() < 1e-10 {
        // ln(1 + x) / x = 1 - x/2 + x^2/3 - ...
        (x * (1.0 / 3.0) - 0.5) * x + 1.0
    } else {
        x.ln_1p() * x.recip()
    }
}

impl<S: CirScalar> CirCoefficients<S> {
    /// Coefficients for (kappa, sigma), kappa > 0, sigma >= 0.
    #[inline]
    pub fn new(kappa: S, sigma: S) -> CirCoefficients<S> {
        let two_s2 = sigma * sigma * 2.0;
        let gamma = (kappa * kappa + two_s2).sqrt();
        let gpk = gamma + kappa;
        let inv = gpk.recip();
        let delta = two_s2 * inv;
        let rho = delta * inv;
        CirCoefficients { gamma, gpk, delta, rho, g_rho: g_fn(rho), c1: kappa * inv * inv * 4.0, c2: kappa * inv * 2.0 }
    }

    /// (a(t), B(t)) with ln S(t) = theta a(t) - lambda0 B(t); t >= 0.
    #[inline]
    pub fn at(&self, t: f64) -> (S, S) {
        let gt = self.gamma * (-t);
        let e = gt.exp();
        let one_minus_e = -gt.exp_m1();
        let b = one_minus_e * 2.0 * (self.gpk + self.delta * e).recip();
        let a = self.c1 * (self.g_rho - e * g_fn(self.rho * e)) - self.c2 * t;
        (a, b)
    }
}

impl CirParams {
    /// Checks the domain: kappa > 0, theta > 0, sigma >= 0, lambda0 >= 0, all finite.
    pub fn check(&self) -> Result<(), CirParamsError> {
        let ok = self.kappa > 0.0
            && self.theta > 0.0
            && self.sigma >= 0.0
            && self.lambda0 >= 0.0
            && [self.kappa, self.theta, self.sigma, self.lambda0].iter().all(|v| v.is_finite());
        if ok {
            Ok(())
        } else {
            Err(CirParamsError { kappa: self.kappa, theta: self.theta, sigma: self.sigma, lambda0: self.lambda0 })
        }
    }

    /// 2 kappa theta / sigma^2 (infinite for sigma = 0).
    pub fn feller_ratio(&self) -> f64 {
        2.0 * self.kappa * self.theta / (self.sigma * self.sigma)
    }

    /// Feller condition 2 kappa theta >= sigma^2: the intensity then never reaches zero.
    pub fn feller(&self) -> bool {
        2.0 * self.kappa * self.theta >= self.sigma * self.sigma
    }

    /// ln S(t) for t >= 0 (0 for t <= 0). Trusts the parameters (see [`CirParams::check`]).
    #[inline]
    pub fn log_survival_at(&self, t: f64) -> f64 {
        if t <= 0.0 {
            return 0.0;
        }
        let (a, b) = CirCoefficients::new(self.kappa, self.sigma).at(t);
        self.theta * a - self.lambda0 * b
    }

    /// Survival probability S(t).
    pub fn survival_at(&self, t: f64) -> f64 {
        self.log_survival_at(t).exp()
    }

    /// The affine coefficients in the textbook form: A(t) and B(t) of S = A exp(-B lambda0).
    pub fn affine(&self, t: f64) -> (f64, f64) {
        if t <= 0.0 {
            return (1.0, 0.0);
        }
        let (a, b) = CirCoefficients::new(self.kappa, self.sigma).at(t);
        ((self.theta * a).exp(), b)
    }

    /// Forward hazard -d ln S / dt = lambda0 B'(t) + kappa theta B(t), with the Riccati
    /// equation B' = 1 - kappa B - sigma^2 B^2 / 2.
    pub fn forward_hazard_at(&self, t: f64) -> f64 {
        let (_, b) = if t <= 0.0 { (0.0, 0.0) } else { CirCoefficients::new(self.kappa, self.sigma).at(t) };
        let db = 1.0 - self.kappa * b - 0.5 * self.sigma * self.sigma * b * b;
        self.lambda0 * db + self.kappa * self.theta * b
    }

    /// Log-survival at each time of a grid (times >= 0).
    pub fn log_survival_grid(&self, times: &[f64]) -> Vec<f64> {
        let c = CirCoefficients::new(self.kappa, self.sigma);
        times
            .iter()
            .map(|&t| {
                if t <= 0.0 {
                    0.0
                } else {
                    let (a, b) = c.at(t);
                    self.theta * a - self.lambda0 * b
                }
            })
            .collect()
    }
}

/// Node times `step, 2 step, ...` up to and including the first one at or beyond `t_end`.
pub fn uniform_grid(step: f64, t_end: f64) -> Vec<f64> {
    let n = (t_end / step).ceil().max(1.0) as usize;
    (1..=n).map(|k| k as f64 * step).collect()
}

/// A piecewise-flat hazard curve that has the CIR survival exactly at `node_times` (strictly
/// increasing, positive) and log-linear survival between them.
pub fn cir_hazard_curve(
    reference: NaiveDate,
    params: &CirParams,
    node_times: &[f64],
) -> Result<HazardCurve, HazardCurveError> {
    let ls = params.log_survival_grid(node_times);
    let mut hazards = Vec::with_capacity(node_times.len());
    let (mut t_prev, mut l_prev) = (0.0, 0.0);
    for (&t, &l) in node_times.iter().zip(&ls) {
        hazards.push((l_prev - l) / (t - t_prev));
        t_prev = t;
        l_prev = l;
    }
    HazardCurve::new(reference, node_times.to_vec(), hazards)
}

/// Prices the standard legs of `contract` under CIR: exact CIR survival at every grid point,
/// protection nodes every `grid_step` years plus the discount pillars (see the module notes).
pub fn price_legs_cir(
    contract: &CdsContract,
    recovery: f64,
    discount: &DiscountCurve,
    params: &CirParams,
    grid_step: f64,
    mode: AccrualIntegration,
) -> Result<CdsLegs, ReferenceDateMismatch> {
    let trade = contract.trade_date;
    if discount.reference() != trade {
        return Err(ReferenceDateMismatch { trade, discount: discount.reference(), hazard: trade });
    }
    let t_end = crate::curves::year_time(trade, contract.maturity) + 10.0 / 365.0;
    let nodes = uniform_grid(grid_step, t_end);
    let plan = LegPlan::build(trade, &[contract], discount, &nodes, mode);
    let log_q = params.log_survival_grid(&plan.times);
    let pq: Vec<f64> = plan.log_dfs.iter().zip(&log_q).map(|(p, q)| (p + q).exp()).collect();
    let terms = &plan.contracts[0];
    let (prot, prem, aod) = evaluate_terms::<f64>(&plan, &terms.prot, &terms.coupons, &pq, &log_q);
    Ok(CdsLegs {
        protection: (1.0 - recovery) * prot,
        premium01: prem,
        accrual_on_default01: aod,
        rebate01: terms.rebate01,
        cash_settle_df: terms.cash_settle_df,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The textbook formula (Cox, Ingersoll and Ross 1985), fine for moderate gamma t and sigma.
    fn textbook(p: &CirParams, t: f64) -> f64 {
        let (k, th, s) = (p.kappa, p.theta, p.sigma);
        let g = (k * k + 2.0 * s * s).sqrt();
        let den = (g + k) * ((g * t).exp() - 1.0) + 2.0 * g;
        let b = 2.0 * ((g * t).exp() - 1.0) / den;
        let a = (2.0 * g * (0.5 * (k + g) * t).exp() / den).ln() * 2.0 * k * th / (s * s);
        a - b * p.lambda0
    }

    #[test]
    fn stable_form_equals_the_textbook_formula() {
        for p in [
            CirParams { kappa: 0.5, theta: 0.03, sigma: 0.1, lambda0: 0.01 },
            CirParams { kappa: 0.1, theta: 0.05, sigma: 0.3, lambda0: 0.2 },
            CirParams { kappa: 2.0, theta: 0.01, sigma: 0.8, lambda0: 0.0 },
        ] {
            for t in [0.01, 0.5, 1.0, 5.0, 10.0, 30.0] {
                let (x, y) = (p.log_survival_at(t), textbook(&p, t));
                assert!((x - y).abs() < 1e-13 * (1.0 + y.abs()), "{p:?} t={t}: {x} vs {y}");
            }
        }
    }

    #[test]
    fn small_sigma_tends_to_the_deterministic_limit() {
        // sigma -> 0 (the O(sigma^2) convexity is below 1e-14 here): lambda(t) = theta + (lambda0 - theta) e^{-kappa t}, integrated by hand.
        let (k, th, l0) = (0.4, 0.02, 0.035);
        for s in [0.0, 1e-10, 1e-8] {
            let p = CirParams { kappa: k, theta: th, sigma: s, lambda0: l0 };
            for t in [0.25, 3.0, 40.0, 500.0] {
                let b = (1.0 - (-k * t).exp()) / k;
                let exact = -(l0 * b + th * (t - b));
                assert!((p.log_survival_at(t) - exact).abs() < 1e-12 * (1.0 + exact.abs()), "s={s} t={t}");
            }
        }
    }

    #[test]
    fn large_times_do_not_overflow() {
        let p = CirParams { kappa: 3.0, theta: 0.05, sigma: 2.0, lambda0: 0.1 };
        let l = p.log_survival_at(1000.0);
        assert!(l.is_finite() && l < 0.0);
        // Long-run: ln S / t -> -2 kappa theta / (gamma + kappa).
        let g = (9.0f64 + 8.0).sqrt();
        assert!((p.log_survival_at(2000.0) - l - (-2.0 * 3.0 * 0.05 / (g + 3.0) * 1000.0)).abs() < 1e-9);
    }

    #[test]
    fn forward_hazard_is_minus_the_log_survival_slope() {
        let p = CirParams { kappa: 0.3, theta: 0.04, sigma: 0.15, lambda0: 0.01 };
        for t in [0.5, 2.0, 7.0] {
            let h = 1e-5;
            let fd = -(p.log_survival_at(t + h) - p.log_survival_at(t - h)) / (2.0 * h);
            assert!((fd - p.forward_hazard_at(t)).abs() < 1e-9);
        }
        assert!((p.forward_hazard_at(0.0) - 0.01).abs() < 1e-15);
    }
}
