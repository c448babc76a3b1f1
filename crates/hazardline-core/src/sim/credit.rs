//! Default intensities for simulated universes: a CIR intensity under the historical measure
//! whose long-run level depends on the grade, a pricing-measure intensity that is the
//! historical one times a grade-dependent premium multiplier, grade migration, and default
//! times drawn from the historical intensity.
//!
//! The pricing-measure intensity is lambda_Q = m lambda_P pathwise. Scaling a CIR process by
//! m > 0 gives a CIR process with (kappa, m theta, sqrt(m) sigma); under the pricing measure the
//! drift is changed as by an affine market price of risk (Cox, Ingersoll and Ross, 1985,
//! Econometrica): kappa_Q = [`KAPPA_Q`], theta_Q = kappa m theta / kappa_Q, sigma_Q =
//! sqrt(m) sigma. The pricing curve of an entity on a date is the closed-form CIR survival with
//! those parameters started at m lambda_P (see [`pricing_params`]). Over a horizon h the
//! pricing-over-historical ratio of cumulative hazards is therefore m times a drift factor above
//! 1; [`horizon_hazards`] gives the planted value a backtest should recover.

use super::rng::Rng;
use crate::models::cir::CirParams;

/// Speed of mean reversion of every simulated intensity under the historical measure (per year).
pub const KAPPA: f64 = 0.5;
/// Speed of mean reversion under the pricing measure. A slower pull towards a higher level
/// (kappa_Q theta_Q = kappa m theta, the drift change of an affine market price of risk) makes
/// the pricing curves slope upwards most of the time, as quoted curves do.
pub const KAPPA_Q: f64 = 0.25;

/// What is planted for one internal grade.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct GradeProfile {
    /// Internal grade, 1 = best.
    pub grade: u32,
    /// Long-run historical-measure intensity (per year).
    pub theta_p: f64,
    /// Pricing over historical intensity.
    pub multiplier: f64,
    /// Share of the universe starting in this grade.
    pub weight: f64,
}

/// The demo's grade profiles. The values are invented for the demo; their shape follows the
/// pattern reported in the empirical credit literature (common practice, no single source):
/// pricing-measure intensities several times the historical ones for the best grades, and a
/// multiplier falling towards 1.5 as quality worsens.
pub fn demo_grades() -> Vec<GradeProfile> {
    vec![
        GradeProfile { grade: 1, theta_p: 0.0015, multiplier: 5.0, weight: 0.10 },
        GradeProfile { grade: 2, theta_p: 0.0040, multiplier: 4.0, weight: 0.17 },
        GradeProfile { grade: 3, theta_p: 0.0090, multiplier: 3.2, weight: 0.23 },
        GradeProfile { grade: 4, theta_p: 0.0200, multiplier: 2.5, weight: 0.22 },
        GradeProfile { grade: 5, theta_p: 0.0450, multiplier: 1.9, weight: 0.17 },
        GradeProfile { grade: 6, theta_p: 0.0900, multiplier: 1.5, weight: 0.11 },
    ]
}

/// CIR volatility for a long-run level: sigma^2 = 0.36 * 2 kappa theta, so the Feller ratio
/// 2 kappa theta / sigma^2 is 2.8 and the stationary standard deviation is 0.6 theta.
pub fn sigma_for(theta: f64) -> f64 {
    (0.36 * 2.0 * KAPPA * theta).sqrt()
}

/// One full-truncation Euler step of dl = kappa (theta - l) dt + sigma sqrt(l) dW (Lord,
/// Koekkoek and van Dijk, 2010, Quantitative Finance): the raw state may go negative, the
/// intensity used is max(l, 0).
pub fn cir_step(l: f64, kappa: f64, theta: f64, sigma: f64, dt: f64, z: f64) -> f64 {
    let lp = l.max(0.0);
    l + kappa * (theta - lp) * dt + sigma * (lp * dt).sqrt() * z
}

/// The pricing-measure CIR parameters of an entity whose historical intensity is `lambda_p`
/// with long-run level `theta_p`, under premium multiplier `m`.
pub fn pricing_params(lambda_p: f64, theta_p: f64, m: f64) -> CirParams {
    CirParams {
        kappa: KAPPA_Q,
        theta: KAPPA * m * theta_p / KAPPA_Q,
        sigma: m.sqrt() * sigma_for(theta_p),
        lambda0: m * lambda_p.max(0.0),
    }
}

/// The historical-measure CIR parameters at intensity `lambda_p`.
pub fn historical_params(lambda_p: f64, theta_p: f64) -> CirParams {
    CirParams { kappa: KAPPA, theta: theta_p, sigma: sigma_for(theta_p), lambda0: lambda_p.max(0.0) }
}

/// Pricing and historical cumulative hazards over `h` years from intensity `lambda_p`:
/// (-ln S_Q(h), -ln S_P(h)), both closed-form CIR survivals. Summed over a bucket's members,
/// their ratio is the planted pricing-over-historical ratio a backtest estimates (the grade
/// is held fixed over the horizon, which is what the closed forms assume).
pub fn horizon_hazards(lambda_p: f64, theta_p: f64, m: f64, h: f64) -> (f64, f64) {
    let q = pricing_params(lambda_p, theta_p, m);
    let p = historical_params(lambda_p, theta_p);
    (-q.log_survival_at(h), -p.log_survival_at(h))
}

/// Monthly grade-migration probabilities: (up one grade, down one grade), invented for the demo;
/// downgrades are likelier than upgrades, more so for the weaker grades.
pub fn migration(grade: u32, worst: u32) -> (f64, f64) {
    let up = if grade > 1 { 0.006 } else { 0.0 };
    let down = if grade < worst { 0.005 + 0.001 * grade as f64 } else { 0.0 };
    (up, down)
}

/// One obligor's default clock: default when the integrated historical intensity passes an
/// exponential threshold (the standard construction of a doubly stochastic default time).
#[derive(Debug, Clone, Copy)]
pub struct DefaultClock {
    threshold: f64,
    integrated: f64,
}

impl DefaultClock {
    pub fn new(rng: &mut Rng) -> DefaultClock {
        DefaultClock { threshold: rng.exponential(), integrated: 0.0 }
    }

    /// Adds `intensity * dt`; true once the threshold is passed.
    pub fn advance(&mut self, intensity: f64, dt: f64) -> bool {
        self.integrated += intensity.max(0.0) * dt;
        self.integrated >= self.threshold
    }

    pub fn integrated(&self) -> f64 {
        self.integrated
    }
}

/// A simulated obligor over a horizon: default time (years from the start, if any) and the
/// integrated historical intensity up to the default or the horizon. Used by tests that need
/// many obligors with a known intensity, without prices.
pub fn simulate_obligor(rng: &mut Rng, params: &CirParams, horizon: f64, dt: f64) -> (Option<f64>, f64) {
    let mut clock = DefaultClock::new(rng);
    let mut l = params.lambda0;
    let steps = (horizon / dt).ceil() as usize;
    for k in 0..steps {
        let h = dt.min(horizon - k as f64 * dt);
        let next = cir_step(l, params.kappa, params.theta, params.sigma, h, rng.normal());
        let mid = 0.5 * (l.max(0.0) + next.max(0.0));
        if clock.advance(mid, h) {
            return (Some(k as f64 * dt + h), clock.integrated());
        }
        l = next;
    }
    (None, clock.integrated())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn pricing_drift_keeps_the_feller_ratio_and_scales_the_intensity() {
        let q = pricing_params(0.02, 0.03, 2.5);
        let p_feller = 2.0 * KAPPA * 0.03 / sigma_for(0.03).powi(2);
        assert!((q.feller_ratio() - p_feller).abs() < 1e-12);
        assert!((q.kappa * q.theta - KAPPA * 2.5 * 0.03).abs() < 1e-15 && (q.lambda0 - 0.05).abs() < 1e-15);
        // Over a short horizon the ratio of cumulative hazards tends to m; over longer ones the
        // slower, higher pricing drift adds to it.
        let (hq, hp) = horizon_hazards(0.03, 0.03, 2.5, 1e-4);
        assert!((hq / hp - 2.5).abs() < 1e-3);
        let (hq, hp) = horizon_hazards(0.03, 0.03, 2.5, 1.0);
        assert!(hq / hp > 2.5 && hq / hp < 2.5 * 1.2);
    }

    #[test]
    fn simulated_default_frequency_matches_the_cir_survival() {
        // P[tau > T] for a CIR intensity is the CIR bond price formula (Cox, Ingersoll and
        // Ross, 1985, Econometrica), implemented in models::cir; 20,000 obligors over 3 years
        // must agree within 4 binomial standard errors plus the Euler bias allowance.
        let p = CirParams { kappa: 0.5, theta: 0.06, sigma: sigma_for(0.06), lambda0: 0.04 };
        let mut rng = Rng::new(5);
        let n = 20_000;
        let defaults = (0..n).filter(|_| simulate_obligor(&mut rng, &p, 3.0, 1.0 / 365.0).0.is_some()).count();
        let pd = 1.0 - p.survival_at(3.0);
        let se = (pd * (1.0 - pd) / n as f64).sqrt();
        let got = defaults as f64 / n as f64;
        assert!((got - pd).abs() < 4.0 * se + 1e-3, "simulated {got}, closed form {pd}");
    }
}
