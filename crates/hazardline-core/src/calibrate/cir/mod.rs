//! The CIR intensity fit per (date, entity) across tenors (`daily`), and the mode that holds
//! kappa and sigma fixed over a window (`window`), on one pricer of a day's quotes (`pricer`).
//!
//! Inputs: the day's CDS quotes of one name ([`BootstrapQuote`], par spread or upfront), the
//! discount curve of the day, starting values (from the bootstrapped curve, see
//! [`start_from_curve`], and optionally the previous day's solution). Output: a [`CirFit`]
//! (the row of `intensity_params`, plus the repriced quotes for `calibration_residuals` with
//! method `cir`).
//!
//! Objective: the sum of squared residuals in bp of running spread, model minus market, each
//! quote repriced by the standard legs under CIR (see `models::cir`). An upfront quote's
//! residual is the upfront difference converted with the model's risky annuity, as the
//! bootstrap residuals are.
//!
//! Solver: a small projected Levenberg-Marquardt in (ln kappa, ln theta, sigma^2, lambda0)
//! with box bounds, and an exact Jacobian from forward-mode gradients through the survival
//! formula and the leg code. Why not argmin's Nelder-Mead (offered for comparison with the
//! `nelder-mead` feature, which only the tests and the benchmark turn on):
//! one Nelder-Mead fit of the 4 parameters takes a few hundred objective evaluations, the
//! Levenberg-Marquardt fit about 10-20 Jacobian evaluations of roughly 3 objective costs each,
//! so it is several times faster and stops at a tighter optimum (measured in
//! tests/all/cir.rs and benches/intensity.rs). argmin has no Levenberg-Marquardt, so the solver is the
//! tool's own (`math::least_squares`), shared with the bond fit.
//!
//! Must not: read files, log inside the loops, or floor a parameter silently (bounds hit are
//! named in `detail`).

mod daily;
#[cfg(feature = "nelder-mead")]
mod nelder_mead;
mod pricer;
#[cfg(test)]
mod tests;
mod window;

pub use daily::{fit_cir, fit_cir_fixed, start_from_curve, start_from_points};
pub use pricer::cir_par_spreads;
pub use window::{fit_cir_window, CirWindowDay, CirWindowFit};

use super::residuals::QuoteResidual;
use crate::instruments::cds::AccrualIntegration;
use crate::math::least_squares::LmSettings;
use crate::models::cir::CirParams;
use crate::models::cir::DEFAULT_GRID_STEP;
use crate::time::imm::MaturityError;
use crate::time::Tenor;
use chrono::NaiveDate;

/// Box bounds on the CIR parameters (per year).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct CirBounds {
    pub kappa: (f64, f64),
    pub theta: (f64, f64),
    pub sigma: (f64, f64),
    pub lambda0: (f64, f64),
}

impl Default for CirBounds {
    fn default() -> Self {
        CirBounds { kappa: (1e-3, 10.0), theta: (1e-6, 2.0), sigma: (1e-4, 2.0), lambda0: (0.0, 2.0) }
    }
}

/// Which optimiser a CIR fit uses.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum CirSolver {
    /// The projected Levenberg-Marquardt of this module (exact Jacobian).
    #[default]
    LevenbergMarquardt,
    /// argmin's Nelder-Mead on the same coordinates (for comparison; with the `nelder-mead`
    /// feature only).
    #[cfg(feature = "nelder-mead")]
    NelderMead,
}

/// Settings of the CIR fits (recorded in the outputs' metadata by the caller).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct CirFitSettings {
    /// Spacing of the protection nodes of the CIR pricing grid (years).
    pub grid_step: f64,
    pub accrual: AccrualIntegration,
    pub bounds: CirBounds,
    pub solver: CirSolver,
    pub lm: LmSettings,
    /// Nelder-Mead iteration limit and simplex standard-deviation tolerance (bp^2).
    pub nm_max_iterations: u64,
    pub nm_sd_tolerance: f64,
    /// Window mode: at most this many days (evenly spaced) enter the pooled estimate of kappa
    /// and sigma.
    pub max_pooled_days: usize,
}

impl Default for CirFitSettings {
    fn default() -> Self {
        CirFitSettings {
            grid_step: DEFAULT_GRID_STEP,
            accrual: AccrualIntegration::Published,
            bounds: CirBounds::default(),
            solver: CirSolver::LevenbergMarquardt,
            lm: LmSettings::default(),
            nm_max_iterations: 4000,
            nm_sd_tolerance: 1e-14,
            max_pooled_days: 32,
        }
    }
}

/// Why a day's quotes cannot be fitted at all (the caller turns these into rejects).
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum CirFitError {
    #[error("no quotes")]
    NoQuotes,
    #[error("quote {index}: {source}")]
    Maturity { index: usize, source: MaturityError },
    #[error("quotes {first} and {second} have the same maturity {maturity}")]
    DuplicateMaturity { first: usize, second: usize, maturity: NaiveDate },
    #[error("quote {index}: {what} {value} is not valid ({expected})")]
    BadValue { index: usize, what: &'static str, value: f64, expected: &'static str },
    #[error("discount curve is referenced on {discount}, not on the trade date {trade}")]
    ReferenceDate { trade: NaiveDate, discount: NaiveDate },
    #[error("fixed kappa {kappa} or sigma {sigma} is outside the bounds")]
    FixedOutOfBounds { kappa: f64, sigma: f64 },
    #[error("window has no day that can be fitted")]
    EmptyWindow,
}

/// Status of a fit.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum CirFitStatus {
    /// Converged.
    Ok,
    /// Stopped at the iteration limit; the parameters are the best found.
    MaxIterations,
    /// No usable result (non-finite prices from every start).
    Failed,
}
crate::text_form!(CirFitStatus { Ok => "ok", MaxIterations => "max_iterations", Failed => "failed" });

/// Which parameters a fit was free to move.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum CirFitMode {
    /// kappa, theta, sigma, lambda0 all fitted on the day.
    Free,
    /// kappa and sigma held (from the window's pooled estimate); theta and lambda0 fitted.
    FixedKappaSigma,
}
crate::text_form!(CirFitMode { Free => "free", FixedKappaSigma => "fixed_kappa_sigma" });

/// One row of `intensity_params`, with the repriced quotes.
#[derive(Debug, Clone, PartialEq)]
pub struct CirFit {
    pub trade_date: NaiveDate,
    pub kappa: f64,
    pub theta: f64,
    pub sigma: f64,
    pub lambda0: f64,
    /// Root mean square of the residuals, bp of running spread.
    pub rmse_bp: f64,
    /// Feller condition 2 kappa theta >= sigma^2.
    pub feller: bool,
    pub status: CirFitStatus,
    pub mode: CirFitMode,
    /// Solver iterations (LM iterations, or Nelder-Mead iterations).
    pub iterations: u32,
    /// Objective evaluations (an LM evaluation includes its Jacobian).
    pub evaluations: u32,
    /// Every quote repriced under the fitted parameters (method `cir`), in input order.
    pub quotes: Vec<QuoteResidual>,
    /// Parameters at a bound, or why the fit failed.
    pub detail: Option<String>,
    /// Scaled condition number of the fit's Jacobian in the parameters it was free to move
    /// (see `math::identification`); None when the fit failed.
    pub condition_number: Option<f64>,
    /// Standard errors of kappa, theta, sigma and lambda0 from the Gauss-Newton covariance of
    /// this fit (None for a parameter held fixed, a failed fit, or no degree of freedom).
    pub standard_errors: [Option<f64>; 4],
}

impl CirFit {
    pub fn params(&self) -> CirParams {
        CirParams { kappa: self.kappa, theta: self.theta, sigma: self.sigma, lambda0: self.lambda0 }
    }
}
