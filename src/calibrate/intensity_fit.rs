//! CIR intensity fit per (date, entity) across tenors, and the mode that holds kappa and sigma
//! fixed over a window.
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
//! formula and the leg code. Why not argmin's Nelder-Mead (also offered, [`CirSolver::NelderMead`]):
//! one Nelder-Mead fit of the 4 parameters takes a few hundred objective evaluations, the
//! Levenberg-Marquardt fit about 10-20 Jacobian evaluations of roughly 3 objective costs each,
//! so it is several times faster and stops at a tighter optimum (measured in
//! tests/all/cir.rs and benches/intensity.rs). argmin has no Levenberg-Marquardt (DESIGN.md
//! section 13). The same solver serves the bond fit.
//!
//! Must not: read files, log inside the loops, or floor a parameter silently (bounds hit are
//! named in `detail`).

use super::bootstrap::{bootstrap, BootstrapQuote, BootstrapSettings};
use super::residuals::QuoteResidual;
use crate::curves::{DiscountCurve, HazardCurve};
use crate::instruments::cds::{
    evaluate_terms, protection_term, AccrualIntegration, CdsContract, CdsQuote, LegPlan,
};
use crate::math::Scalar;
use crate::models::cir::{uniform_grid, CirCoefficients, CirParams, CirScalar, DEFAULT_GRID_STEP};
use crate::time::imm::MaturityError;
use crate::time::{add_days, Calendar, Tenor};
use chrono::NaiveDate;
use std::ops::{Add, Div, Mul, Neg, Sub};

// ---------------------------------------------------------------------------------------------
// Forward-mode gradient in four variables (kappa, theta, sigma, lambda0).
// ---------------------------------------------------------------------------------------------

/// A value and its gradient with respect to (kappa, theta, sigma, lambda0).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Grad4 {
    pub v: f64,
    pub d: [f64; 4],
}

impl Grad4 {
    #[inline]
    pub fn var(v: f64, i: usize) -> Grad4 {
        let mut d = [0.0; 4];
        d[i] = 1.0;
        Grad4 { v, d }
    }
    #[inline]
    fn chain(self, v: f64, dv: f64) -> Grad4 {
        Grad4 {
            v,
            d: [
                self.d[0] * dv,
                self.d[1] * dv,
                self.d[2] * dv,
                self.d[3] * dv,
            ],
        }
    }
}

impl Scalar for Grad4 {
    #[inline]
    fn constant(v: f64) -> Grad4 {
        Grad4 { v, d: [0.0; 4] }
    }
    #[inline]
    fn value(self) -> f64 {
        self.v
    }
    #[inline]
    fn exp(self) -> Grad4 {
        let e = self.v.exp();
        self.chain(e, e)
    }
}

impl CirScalar for Grad4 {
    #[inline]
    fn sqrt(self) -> Grad4 {
        let s = self.v.sqrt();
        self.chain(s, 0.5 / s)
    }
    #[inline]
    fn ln_1p(self) -> Grad4 {
        self.chain(self.v.ln_1p(), 1.0 / (1.0 + self.v))
    }
    #[inline]
    fn exp_m1(self) -> Grad4 {
        self.chain(self.v.exp_m1(), self.v.exp())
    }
    #[inline]
    fn recip(self) -> Grad4 {
        let r = 1.0 / self.v;
        self.chain(r, -r * r)
    }
}

macro_rules! grad_binop {
    ($tr:ident, $f:ident, |$a:ident, $b:ident| $v:expr, $da:expr, $db:expr) => {
        impl $tr for Grad4 {
            type Output = Grad4;
            #[inline]
            fn $f(self, o: Grad4) -> Grad4 {
                let ($a, $b) = (self.v, o.v);
                let (ca, cb) = ($da, $db);
                Grad4 {
                    v: $v,
                    d: [
                        self.d[0] * ca + o.d[0] * cb,
                        self.d[1] * ca + o.d[1] * cb,
                        self.d[2] * ca + o.d[2] * cb,
                        self.d[3] * ca + o.d[3] * cb,
                    ],
                }
            }
        }
    };
}
grad_binop!(Add, add, |a, b| a + b, 1.0, 1.0);
grad_binop!(Sub, sub, |a, b| a - b, 1.0, -1.0);
grad_binop!(Mul, mul, |a, b| a * b, b, a);
grad_binop!(Div, div, |a, b| a / b, 1.0 / b, -a / (b * b));

impl Neg for Grad4 {
    type Output = Grad4;
    #[inline]
    fn neg(self) -> Grad4 {
        self.chain(-self.v, -1.0)
    }
}
impl Add<f64> for Grad4 {
    type Output = Grad4;
    #[inline]
    fn add(self, o: f64) -> Grad4 {
        Grad4 {
            v: self.v + o,
            d: self.d,
        }
    }
}
impl Sub<f64> for Grad4 {
    type Output = Grad4;
    #[inline]
    fn sub(self, o: f64) -> Grad4 {
        Grad4 {
            v: self.v - o,
            d: self.d,
        }
    }
}
impl Mul<f64> for Grad4 {
    type Output = Grad4;
    #[inline]
    fn mul(self, o: f64) -> Grad4 {
        self.chain(self.v * o, o)
    }
}

// ---------------------------------------------------------------------------------------------
// A small projected Levenberg-Marquardt for box-bounded least squares.
// ---------------------------------------------------------------------------------------------

/// A least-squares problem: residuals and (optionally) their Jacobian.
pub(crate) trait LeastSquares {
    /// (number of parameters, number of residuals).
    fn dims(&self) -> (usize, usize);
    /// Residuals at `x` into `r`; with `jac`, also the Jacobian, row-major (residual by
    /// parameter). Returns false when a value is not finite.
    fn eval(&mut self, x: &[f64], r: &mut [f64], jac: Option<&mut [f64]>) -> bool;
}

/// Stopping rules of [`levenberg_marquardt`].
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct LmSettings {
    pub max_iterations: u32,
    /// Stop when an accepted step lowers the cost by less than this fraction.
    pub f_tol: f64,
    /// Stop when a step moves no parameter by more than this (in the solver's coordinates).
    pub x_tol: f64,
    /// Stop when the cost (half the sum of squares, bp^2) is below this.
    pub cost_floor: f64,
}

impl Default for LmSettings {
    fn default() -> Self {
        LmSettings {
            max_iterations: 200,
            f_tol: 1e-9,
            x_tol: 1e-11,
            cost_floor: 1e-24,
        }
    }
}

#[derive(Debug, Clone, PartialEq)]
pub(crate) struct LmOutcome {
    pub x: Vec<f64>,
    /// Half the sum of squared residuals.
    pub cost: f64,
    pub iterations: u32,
    pub evaluations: u32,
    pub converged: bool,
    pub failed: bool,
}

/// Cholesky solve of the n x n system a x = b (a symmetric); false if not positive definite.
fn cholesky_solve(a: &mut [f64], b: &mut [f64], n: usize) -> bool {
    for j in 0..n {
        let mut s = a[j * n + j];
        for k in 0..j {
            s -= a[j * n + k] * a[j * n + k];
        }
        if !(s > 0.0) || !s.is_finite() {
            return false;
        }
        let l = s.sqrt();
        a[j * n + j] = l;
        for i in j + 1..n {
            let mut s = a[i * n + j];
            for k in 0..j {
                s -= a[i * n + k] * a[j * n + k];
            }
            a[i * n + j] = s / l;
        }
    }
    for i in 0..n {
        let mut s = b[i];
        for k in 0..i {
            s -= a[i * n + k] * b[k];
        }
        b[i] = s / a[i * n + i];
    }
    for i in (0..n).rev() {
        let mut s = b[i];
        for k in i + 1..n {
            s -= a[k * n + i] * b[k];
        }
        b[i] = s / a[i * n + i];
    }
    true
}

/// Minimises half the sum of squared residuals over the box [lo, hi] from `x0`.
///
/// Marquardt's scaling (damping proportional to diag J'J), Nielsen's update of the damping,
/// steps projected on the box, and parameters at a bound whose gradient points outwards held
/// at the bound for the step (Nielsen 1999, IMM-REP-1999-05; Kanzow, Yamashita and Fukushima
/// 2004 for the projection).
pub(crate) fn levenberg_marquardt<P: LeastSquares>(
    p: &mut P,
    x0: &[f64],
    lo: &[f64],
    hi: &[f64],
    max_step: &[f64],
    s: &LmSettings,
) -> LmOutcome {
    let (n, m) = p.dims();
    let mut x: Vec<f64> = x0
        .iter()
        .zip(lo.iter().zip(hi))
        .map(|(&v, (&l, &h))| v.clamp(l, h))
        .collect();
    let mut r = vec![0.0; m];
    let mut jac = vec![0.0; m * n];
    let mut evaluations = 1;
    if !p.eval(&x, &mut r, Some(&mut jac)) {
        return LmOutcome {
            x,
            cost: f64::INFINITY,
            iterations: 0,
            evaluations,
            converged: false,
            failed: true,
        };
    }
    let mut cost = 0.5 * r.iter().map(|v| v * v).sum::<f64>();
    let mut a = vec![0.0; n * n];
    let mut g = vec![0.0; n];
    let normal = |jac: &[f64], r: &[f64], a: &mut [f64], g: &mut [f64]| {
        a.iter_mut().for_each(|v| *v = 0.0);
        g.iter_mut().for_each(|v| *v = 0.0);
        for k in 0..m {
            let row = &jac[k * n..(k + 1) * n];
            for i in 0..n {
                if row[i] == 0.0 {
                    continue;
                }
                g[i] += row[i] * r[k];
                for j in 0..=i {
                    a[i * n + j] += row[i] * row[j];
                }
            }
        }
        for i in 0..n {
            for j in 0..i {
                a[j * n + i] = a[i * n + j];
            }
        }
    };
    normal(&jac, &r, &mut a, &mut g);
    let mut mu = 1e-3;
    let mut nu = 2.0;
    let mut x_new = vec![0.0; n];
    let mut r_new = vec![0.0; m];
    let mut jac_new = vec![0.0; m * n];
    let mut sys = vec![0.0; n * n];
    let mut step = vec![0.0; n];
    let mut free = vec![true; n];
    let mut iterations = 0;
    if cost <= s.cost_floor {
        return LmOutcome {
            x,
            cost,
            iterations,
            evaluations,
            converged: true,
            failed: false,
        };
    }
    while iterations < s.max_iterations {
        iterations += 1;
        for i in 0..n {
            free[i] = !((x[i] <= lo[i] && g[i] > 0.0) || (x[i] >= hi[i] && g[i] < 0.0));
        }
        // (A + mu diag A) step = -g on the free parameters.
        let mut ok = false;
        for _ in 0..60 {
            for i in 0..n {
                for j in 0..n {
                    sys[i * n + j] = if free[i] && free[j] {
                        a[i * n + j]
                    } else {
                        0.0
                    };
                }
                let dii = a[i * n + i].max(1e-12 * (1.0 + a[i * n + i]));
                if free[i] {
                    sys[i * n + i] += mu * dii + 1e-300;
                } else {
                    sys[i * n + i] = 1.0;
                }
                step[i] = if free[i] { -g[i] } else { 0.0 };
            }
            if cholesky_solve(&mut sys, &mut step, n) {
                ok = true;
                break;
            }
            mu *= nu;
            nu *= 2.0;
        }
        if !ok {
            return LmOutcome {
                x,
                cost,
                iterations,
                evaluations,
                converged: false,
                failed: true,
            };
        }
        // A step longer than its cap in any coordinate is shortened as a whole (a crude trust
        // region: the damping alone lets the first steps of a poor start jump across the box).
        let scale = (0..n)
            .map(|i| {
                if step[i].abs() > max_step[i] {
                    max_step[i] / step[i].abs()
                } else {
                    1.0
                }
            })
            .fold(1.0, f64::min);
        let mut max_move: f64 = 0.0;
        for i in 0..n {
            x_new[i] = (x[i] + scale * step[i]).clamp(lo[i], hi[i]);
            step[i] = x_new[i] - x[i];
            max_move = max_move.max(step[i].abs());
        }
        if max_move <= s.x_tol {
            return LmOutcome {
                x,
                cost,
                iterations,
                evaluations,
                converged: true,
                failed: false,
            };
        }
        // Predicted reduction of the quadratic model for the projected step.
        let mut pred = 0.0;
        for i in 0..n {
            let mut ai = 0.0;
            for j in 0..n {
                ai += a[i * n + j] * step[j];
            }
            pred -= g[i] * step[i] + 0.5 * step[i] * ai;
        }
        evaluations += 1;
        let finite = p.eval(&x_new, &mut r_new, Some(&mut jac_new));
        let cost_new = if finite {
            0.5 * r_new.iter().map(|v| v * v).sum::<f64>()
        } else {
            f64::INFINITY
        };
        let ratio = if pred > 0.0 {
            (cost - cost_new) / pred
        } else {
            -1.0
        };
        if cost_new < cost && ratio > 0.0 {
            let drop = cost - cost_new;
            std::mem::swap(&mut x, &mut x_new);
            std::mem::swap(&mut r, &mut r_new);
            std::mem::swap(&mut jac, &mut jac_new);
            cost = cost_new;
            normal(&jac, &r, &mut a, &mut g);
            mu *= (1.0f64 / 3.0).max(1.0 - (2.0 * ratio - 1.0).powi(3));
            nu = 2.0;
            if cost <= s.cost_floor || drop <= s.f_tol * cost {
                return LmOutcome {
                    x,
                    cost,
                    iterations,
                    evaluations,
                    converged: true,
                    failed: false,
                };
            }
        } else {
            mu *= nu;
            nu *= 2.0;
            if mu > 1e20 {
                // No descent left at machine precision: the point is a (local) minimum.
                return LmOutcome {
                    x,
                    cost,
                    iterations,
                    evaluations,
                    converged: true,
                    failed: false,
                };
            }
        }
    }
    LmOutcome {
        x,
        cost,
        iterations,
        evaluations,
        converged: false,
        failed: false,
    }
}

// ---------------------------------------------------------------------------------------------
// The CIR pricer of one day's quotes.
// ---------------------------------------------------------------------------------------------

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
        CirBounds {
            kappa: (1e-3, 10.0),
            theta: (1e-6, 2.0),
            sigma: (1e-4, 2.0),
            lambda0: (0.0, 2.0),
        }
    }
}

/// Which optimiser a CIR fit uses.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum CirSolver {
    /// The projected Levenberg-Marquardt of this module (exact Jacobian).
    #[default]
    LevenbergMarquardt,
    /// argmin's Nelder-Mead on the same coordinates (for comparison).
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
            accrual: AccrualIntegration::Standard,
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
    DuplicateMaturity {
        first: usize,
        second: usize,
        maturity: NaiveDate,
    },
    #[error("quote {index}: {what} {value} is not valid ({expected})")]
    BadValue {
        index: usize,
        what: &'static str,
        value: f64,
        expected: &'static str,
    },
    #[error("discount curve is referenced on {discount}, not on the trade date {trade}")]
    ReferenceDate {
        trade: NaiveDate,
        discount: NaiveDate,
    },
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

impl CirFitStatus {
    pub fn as_str(self) -> &'static str {
        match self {
            CirFitStatus::Ok => "ok",
            CirFitStatus::MaxIterations => "max_iterations",
            CirFitStatus::Failed => "failed",
        }
    }
}

/// Which parameters a fit was free to move.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum CirFitMode {
    /// kappa, theta, sigma, lambda0 all fitted on the day.
    Free,
    /// kappa and sigma held (from the window's pooled estimate); theta and lambda0 fitted.
    FixedKappaSigma,
}

impl CirFitMode {
    pub fn as_str(self) -> &'static str {
        match self {
            CirFitMode::Free => "free",
            CirFitMode::FixedKappaSigma => "fixed_kappa_sigma",
        }
    }
}

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
}

impl CirFit {
    pub fn params(&self) -> CirParams {
        CirParams {
            kappa: self.kappa,
            theta: self.theta,
            sigma: self.sigma,
            lambda0: self.lambda0,
        }
    }
}

struct Leg {
    quote_index: usize,
    tenor: Tenor,
    /// Running coupon that the annuity multiplies (the par spread for a par quote).
    coupon: f64,
    /// Upfront paid at cash settlement (0 for a par quote).
    upfront: f64,
    one_minus_r: f64,
    quote: CdsQuote,
}

/// The pricing grid and the contracts of one day, built once per fit.
pub(crate) struct CirPricer {
    plan: LegPlan,
    legs: Vec<Leg>,
    /// Index (in plan.contracts) of the contract with the latest maturity.
    longest: usize,
    /// True when every contract's protection nodes are a prefix of the longest's (always, by
    /// the construction of the plan); then the protection sums share one pass.
    shared_protection: bool,
    /// Kept for the default start (a bootstrap of the same quotes).
    discount: DiscountCurve,
    calendar: Calendar,
}

fn check_quote(index: usize, q: &BootstrapQuote) -> Result<(), CirFitError> {
    let bad = |what, value, expected| {
        Err(CirFitError::BadValue {
            index,
            what,
            value,
            expected,
        })
    };
    if !(q.recovery >= 0.0 && q.recovery < 1.0) {
        return bad("recovery", q.recovery, "a fraction in [0, 1)");
    }
    match q.quote {
        CdsQuote::ParSpread(s) if !(s > 0.0 && s.is_finite()) => {
            bad("par spread", s, "a positive number")
        }
        CdsQuote::Upfront { upfront, .. } if !(upfront.is_finite() && upfront < 1.0) => {
            bad("upfront", upfront, "a finite fraction of notional below 1")
        }
        CdsQuote::Upfront { coupon, .. } if !(coupon.is_finite() && coupon >= 0.0) => {
            bad("running coupon", coupon, "a non-negative number")
        }
        _ => Ok(()),
    }
}

impl CirPricer {
    pub(crate) fn new(
        trade: NaiveDate,
        quotes: &[BootstrapQuote],
        discount: &DiscountCurve,
        cal: &Calendar,
        grid_step: f64,
        accrual: AccrualIntegration,
    ) -> Result<CirPricer, CirFitError> {
        if quotes.is_empty() {
            return Err(CirFitError::NoQuotes);
        }
        if discount.reference() != trade {
            return Err(CirFitError::ReferenceDate {
                trade,
                discount: discount.reference(),
            });
        }
        let mut order: Vec<(usize, CdsContract)> = Vec::with_capacity(quotes.len());
        for (i, q) in quotes.iter().enumerate() {
            check_quote(i, q)?;
            let c = CdsContract::standard(trade, q.tenor, cal)
                .map_err(|source| CirFitError::Maturity { index: i, source })?;
            order.push((i, c));
        }
        order.sort_by_key(|(_, c)| c.maturity);
        for w in order.windows(2) {
            if w[0].1.maturity == w[1].1.maturity {
                return Err(CirFitError::DuplicateMaturity {
                    first: w[0].0,
                    second: w[1].0,
                    maturity: w[0].1.maturity,
                });
            }
        }
        let last = &order.last().expect("non-empty").1;
        let t_end = crate::curves::year_time(trade, last.maturity).max(crate::curves::year_time(
            trade,
            last.periods
                .last()
                .map(|p| add_days(p.payment, -1))
                .unwrap_or(last.maturity),
        ));
        let nodes = uniform_grid(grid_step, t_end);
        let refs: Vec<&CdsContract> = order.iter().map(|(_, c)| c).collect();
        let plan = LegPlan::build(trade, &refs, discount, &nodes, accrual);
        let legs = order
            .iter()
            .map(|(i, _)| {
                let q = &quotes[*i];
                let (coupon, upfront) = match q.quote {
                    CdsQuote::ParSpread(s) => (s, 0.0),
                    CdsQuote::Upfront { upfront, coupon } => (coupon, upfront),
                };
                Leg {
                    quote_index: *i,
                    tenor: q.tenor,
                    coupon,
                    upfront,
                    one_minus_r: 1.0 - q.recovery,
                    quote: q.quote,
                }
            })
            .collect();
        let longest = plan.contracts.len() - 1;
        let lp = &plan.contracts[longest].prot;
        let shared_protection = plan.contracts.iter().all(|c| {
            let m = c.prot.len();
            m >= 2 && m <= lp.len() && c.prot[..m - 1] == lp[..m - 1]
        });
        Ok(CirPricer {
            plan,
            legs,
            longest,
            shared_protection,
            discount: discount.clone(),
            calendar: cal.clone(),
        })
    }

    pub(crate) fn len(&self) -> usize {
        self.legs.len()
    }

    /// Residuals (bp) of every quote, in maturity order, plus (protection, annuity) per quote.
    fn evaluate<S: CirScalar>(
        &self,
        kappa: S,
        theta: S,
        sigma: S,
        lambda0: S,
        buf: &mut Buffers<S>,
        out: &mut [S],
        legs_out: Option<&mut Vec<(f64, f64)>>,
    ) -> bool {
        let plan = &self.plan;
        let coef = CirCoefficients::new(kappa, sigma);
        let np = plan.times.len();
        buf.lq.clear();
        buf.pq.clear();
        for j in 0..np {
            let t = plan.times[j];
            let lq = if t <= 0.0 {
                S::constant(0.0)
            } else {
                let (a, b) = coef.at(t);
                theta * a - lambda0 * b
            };
            buf.lq.push(lq);
            buf.pq.push((lq + plan.log_dfs[j]).exp());
        }
        let (lq, pq) = (&buf.lq, &buf.pq);
        let term = |i0: u32, i1: u32| -> S {
            let (i0, i1) = (i0 as usize, i1 as usize);
            protection_term(
                pq[i0],
                pq[i1],
                plan.log_dfs[i0] - plan.log_dfs[i1],
                lq[i0] - lq[i1],
            )
        };
        buf.cum.clear();
        if self.shared_protection {
            let lp = &plan.contracts[self.longest].prot;
            let mut acc = S::constant(0.0);
            buf.cum.push(acc);
            for w in lp[..lp.len() - 1].windows(2) {
                acc = acc + term(w[0], w[1]);
                buf.cum.push(acc);
            }
        }
        let mut legs_out = legs_out;
        if let Some(l) = legs_out.as_deref_mut() {
            l.clear();
        }
        for (k, (c, leg)) in plan.contracts.iter().zip(&self.legs).enumerate() {
            let prot = if self.shared_protection {
                let m = c.prot.len();
                buf.cum[m - 2] + term(c.prot[m - 2], c.prot[m - 1])
            } else {
                evaluate_terms(plan, &c.prot, &[], pq, lq).0
            };
            let (_, prem, aod) = evaluate_terms(plan, &[], &c.coupons, pq, lq);
            let prot = prot * leg.one_minus_r;
            let ann = prem + aod - c.rebate01 * c.cash_settle_df;
            let r = (prot - ann * leg.coupon - leg.upfront * c.cash_settle_df) / ann * 1e4;
            if !r.value().is_finite() {
                return false;
            }
            out[k] = r;
            if let Some(l) = legs_out.as_deref_mut() {
                l.push((prot.value(), ann.value()));
            }
        }
        true
    }

    /// The repriced quotes in input order.
    fn residual_rows(&self, p: &CirParams) -> Vec<QuoteResidual> {
        let mut buf = Buffers::default();
        let mut out = vec![0.0; self.len()];
        let mut legs = Vec::new();
        if !self.evaluate(
            p.kappa,
            p.theta,
            p.sigma,
            p.lambda0,
            &mut buf,
            &mut out,
            Some(&mut legs),
        ) {
            return Vec::new();
        }
        let mut rows: Vec<QuoteResidual> = self
            .legs
            .iter()
            .zip(&self.plan.contracts)
            .zip(legs.iter().zip(&out))
            .map(|((leg, c), (&(prot, ann), &r))| {
                let par_bp = prot / ann * 1e4;
                let (instrument, market, model) = match leg.quote {
                    CdsQuote::ParSpread(s) => ("cds_par_spread", s * 1e4, par_bp),
                    CdsQuote::Upfront { upfront, coupon } => (
                        "cds_upfront",
                        upfront,
                        (prot - coupon * ann) / c.cash_settle_df,
                    ),
                };
                QuoteResidual {
                    quote_index: leg.quote_index,
                    tenor: leg.tenor,
                    instrument,
                    market,
                    model,
                    residual_bp: r,
                    model_par_spread_bp: par_bp,
                    risky_annuity: ann,
                }
            })
            .collect();
        rows.sort_by_key(|r| r.quote_index);
        rows
    }
}

struct Buffers<S> {
    lq: Vec<S>,
    pq: Vec<S>,
    cum: Vec<S>,
}

impl<S> Default for Buffers<S> {
    fn default() -> Self {
        Buffers {
            lq: Vec::new(),
            pq: Vec::new(),
            cum: Vec::new(),
        }
    }
}

// Solver coordinates: x = (ln kappa, ln theta, sigma^2, lambda0); in the fixed mode x = (ln
// theta, lambda0). sigma^2, not ln sigma: survival depends on sigma through sigma^2, so in ln
// sigma the objective goes flat as sigma falls and a fit that touches the lower bound cannot
// climb back; in sigma^2 the slope stays finite down to zero.
//
// x = (ln theta, lambda0).

fn to_params(x: &[f64], fixed: Option<(f64, f64)>) -> CirParams {
    match fixed {
        None => CirParams {
            kappa: x[0].exp(),
            theta: x[1].exp(),
            sigma: x[2].max(0.0).sqrt(),
            lambda0: x[3],
        },
        Some((kappa, sigma)) => CirParams {
            kappa,
            theta: x[0].exp(),
            sigma,
            lambda0: x[1],
        },
    }
}

fn box_of(b: &CirBounds, fixed: bool) -> (Vec<f64>, Vec<f64>) {
    if fixed {
        (
            vec![b.theta.0.ln(), b.lambda0.0],
            vec![b.theta.1.ln(), b.lambda0.1],
        )
    } else {
        (
            vec![
                b.kappa.0.ln(),
                b.theta.0.ln(),
                b.sigma.0 * b.sigma.0,
                b.lambda0.0,
            ],
            vec![
                b.kappa.1.ln(),
                b.theta.1.ln(),
                b.sigma.1 * b.sigma.1,
                b.lambda0.1,
            ],
        )
    }
}

fn to_x(p: &CirParams, fixed: bool) -> Vec<f64> {
    if fixed {
        vec![p.theta.ln(), p.lambda0]
    } else {
        vec![p.kappa.ln(), p.theta.ln(), p.sigma * p.sigma, p.lambda0]
    }
}

struct DayProblem<'a> {
    pricer: &'a CirPricer,
    fixed: Option<(f64, f64)>,
    f64_buf: Buffers<f64>,
    grad_buf: Buffers<Grad4>,
    grad_out: Vec<Grad4>,
}

impl<'a> DayProblem<'a> {
    fn new(pricer: &'a CirPricer, fixed: Option<(f64, f64)>) -> Self {
        DayProblem {
            pricer,
            fixed,
            f64_buf: Buffers::default(),
            grad_buf: Buffers::default(),
            grad_out: vec![Grad4::constant(0.0); pricer.len()],
        }
    }

    fn cost_of(&mut self, p: &CirParams) -> f64 {
        let mut r = vec![0.0; self.pricer.len()];
        if self.pricer.evaluate(
            p.kappa,
            p.theta,
            p.sigma,
            p.lambda0,
            &mut self.f64_buf,
            &mut r,
            None,
        ) {
            0.5 * r.iter().map(|v| v * v).sum::<f64>()
        } else {
            f64::INFINITY
        }
    }
}

impl LeastSquares for DayProblem<'_> {
    fn dims(&self) -> (usize, usize) {
        (if self.fixed.is_some() { 2 } else { 4 }, self.pricer.len())
    }

    fn eval(&mut self, x: &[f64], r: &mut [f64], jac: Option<&mut [f64]>) -> bool {
        let p = to_params(x, self.fixed);
        match jac {
            None => self.pricer.evaluate(
                p.kappa,
                p.theta,
                p.sigma,
                p.lambda0,
                &mut self.f64_buf,
                r,
                None,
            ),
            Some(jac) => {
                let ok = self.pricer.evaluate(
                    Grad4::var(p.kappa, 0),
                    Grad4::var(p.theta, 1),
                    Grad4::var(p.sigma, 2),
                    Grad4::var(p.lambda0, 3),
                    &mut self.grad_buf,
                    &mut self.grad_out,
                    None,
                );
                if !ok {
                    return false;
                }
                let n = if self.fixed.is_some() { 2 } else { 4 };
                for (k, g) in self.grad_out.iter().enumerate() {
                    r[k] = g.v;
                    let row = &mut jac[k * n..(k + 1) * n];
                    // d/d ln v = v d/dv; d/d sigma^2 = d/d sigma / (2 sigma).
                    if self.fixed.is_some() {
                        row[0] = g.d[1] * p.theta;
                        row[1] = g.d[3];
                    } else {
                        row[0] = g.d[0] * p.kappa;
                        row[1] = g.d[1] * p.theta;
                        row[2] = g.d[2] * 0.5 / p.sigma;
                        row[3] = g.d[3];
                    }
                    if !row.iter().all(|v| v.is_finite()) {
                        return false;
                    }
                }
                true
            }
        }
    }
}

// ---------------------------------------------------------------------------------------------
// Starting values.
// ---------------------------------------------------------------------------------------------

/// Starting values from integrated hazards H_k at times t_k (a bootstrapped curve's nodes):
/// for kappa on a small grid, the deterministic (sigma = 0) model H(t) = lambda0 B(t) +
/// theta (t - B(t)), B = (1 - e^{-kappa t}) / kappa, is fitted by linear least squares in
/// (lambda0, theta) to the average hazards H_k / t_k; the best kappa wins. sigma starts at half
/// the Feller bound sqrt(2 kappa theta).
pub fn start_from_points(times: &[f64], integrated: &[f64]) -> CirParams {
    let mut best = (
        f64::INFINITY,
        CirParams {
            kappa: 0.3,
            theta: 0.02,
            sigma: 0.05,
            lambda0: 0.01,
        },
    );
    let fallback_level = times
        .iter()
        .zip(integrated)
        .map(|(t, h)| h / t)
        .filter(|v| v.is_finite() && *v > 0.0)
        .fold(0.0, f64::max)
        .max(1e-4);
    for &kappa in &[0.02, 0.05, 0.1, 0.2, 0.35, 0.5, 0.8, 1.2, 2.0, 3.5] {
        // Normal equations of min sum ((H/t) - l0 b/t - th (1 - b/t))^2.
        let (mut s11, mut s12, mut s22, mut y1, mut y2) = (0.0, 0.0, 0.0, 0.0, 0.0);
        for (&t, &h) in times.iter().zip(integrated) {
            if !(t > 0.0) {
                continue;
            }
            let b = (1.0 - (-kappa * t).exp()) / kappa / t;
            let (u1, u2, y) = (b, 1.0 - b, h / t);
            s11 += u1 * u1;
            s12 += u1 * u2;
            s22 += u2 * u2;
            y1 += u1 * y;
            y2 += u2 * y;
        }
        let det = s11 * s22 - s12 * s12;
        let (mut l0, mut th) = if det.abs() > 1e-14 * (s11 * s22).max(1e-300) {
            ((y1 * s22 - y2 * s12) / det, (y2 * s11 - y1 * s12) / det)
        } else {
            (fallback_level, fallback_level)
        };
        l0 = l0.max(0.0);
        th = th.max(1e-5);
        let err: f64 = times
            .iter()
            .zip(integrated)
            .filter(|(t, _)| **t > 0.0)
            .map(|(&t, &h)| {
                let b = (1.0 - (-kappa * t).exp()) / kappa / t;
                let e = h / t - l0 * b - th * (1.0 - b);
                e * e
            })
            .sum();
        if err < best.0 {
            best = (
                err,
                CirParams {
                    kappa,
                    theta: th,
                    sigma: 0.5 * (2.0 * kappa * th).sqrt(),
                    lambda0: l0,
                },
            );
        }
    }
    best.1
}

/// Starting values from a bootstrapped hazard curve (see [`start_from_points`]).
pub fn start_from_curve(curve: &HazardCurve) -> CirParams {
    let times = curve.node_times();
    let h: Vec<f64> = times.iter().map(|&t| curve.integrated_hazard(t)).collect();
    start_from_points(times, &h)
}

/// The start used when the caller gives none: from the day's bootstrapped curve, else (a quote
/// set the bootstrap cannot complete) from the quotes' credit-triangle hazards.
fn default_start(trade: NaiveDate, quotes: &[BootstrapQuote], pricer: &CirPricer) -> CirParams {
    let settings = BootstrapSettings::default();
    match bootstrap(trade, quotes, &pricer.discount, &pricer.calendar, &settings) {
        Ok(fit) if fit.complete() => fit
            .curve
            .as_ref()
            .map(start_from_curve)
            .unwrap_or_else(|| start_from_quotes(quotes)),
        _ => start_from_quotes(quotes),
    }
}

/// Starting values from the quotes alone (credit triangle: hazard = spread / (1 - R)).
fn start_from_quotes(quotes: &[BootstrapQuote]) -> CirParams {
    let mut pts: Vec<(f64, f64)> = quotes
        .iter()
        .map(|q| {
            let t = q.tenor.years();
            let s = match q.quote {
                CdsQuote::ParSpread(s) => s,
                CdsQuote::Upfront { upfront, coupon } => coupon + upfront / t.max(0.25) / 0.8,
            };
            (t, (s / (1.0 - q.recovery)).max(1e-5) * t)
        })
        .collect();
    pts.sort_by(|a, b| a.0.total_cmp(&b.0));
    let (t, h): (Vec<f64>, Vec<f64>) = pts.into_iter().unzip();
    start_from_points(&t, &h)
}

fn clamp_params(p: &CirParams, b: &CirBounds) -> CirParams {
    CirParams {
        kappa: p.kappa.clamp(b.kappa.0, b.kappa.1),
        theta: p.theta.clamp(b.theta.0, b.theta.1),
        sigma: p.sigma.clamp(b.sigma.0, b.sigma.1),
        lambda0: p.lambda0.clamp(b.lambda0.0, b.lambda0.1),
    }
}

fn bound_detail(p: &CirParams, b: &CirBounds, fixed: bool) -> Option<String> {
    let mut hit = Vec::new();
    let mut chk = |name: &str, v: f64, (lo, hi): (f64, f64)| {
        if v <= lo * (1.0 + 1e-9) {
            hit.push(format!("{name} at its lower bound {lo}"));
        } else if v >= hi * (1.0 - 1e-9) {
            hit.push(format!("{name} at its upper bound {hi}"));
        }
    };
    if !fixed {
        chk("kappa", p.kappa, b.kappa);
        chk("sigma", p.sigma, b.sigma);
    }
    chk("theta", p.theta, b.theta);
    if p.lambda0 <= b.lambda0.0 {
        hit.push(format!("lambda0 at its lower bound {}", b.lambda0.0));
    } else if p.lambda0 >= b.lambda0.1 {
        hit.push(format!("lambda0 at its upper bound {}", b.lambda0.1));
    }
    (!hit.is_empty()).then(|| hit.join("; "))
}

// ---------------------------------------------------------------------------------------------
// Entry points.
// ---------------------------------------------------------------------------------------------

/// Fits all four CIR parameters to one name's quotes on `trade`.
///
/// `starts`: candidate starting points (typically [`start_from_curve`] of the day's bootstrapped
/// curve and the previous day's solution); the one with the lowest objective is used. With no
/// candidates, a start from the quotes' credit-triangle hazards is used.
pub fn fit_cir(
    trade: NaiveDate,
    quotes: &[BootstrapQuote],
    discount: &DiscountCurve,
    cal: &Calendar,
    starts: &[CirParams],
    settings: &CirFitSettings,
) -> Result<CirFit, CirFitError> {
    let pricer = CirPricer::new(
        trade,
        quotes,
        discount,
        cal,
        settings.grid_step,
        settings.accrual,
    )?;
    Ok(fit_with_pricer(
        trade, &pricer, quotes, None, starts, settings,
    ))
}

/// Fits theta and lambda0 with kappa and sigma held at the given values (the window mode).
pub fn fit_cir_fixed(
    trade: NaiveDate,
    quotes: &[BootstrapQuote],
    discount: &DiscountCurve,
    cal: &Calendar,
    kappa: f64,
    sigma: f64,
    starts: &[CirParams],
    settings: &CirFitSettings,
) -> Result<CirFit, CirFitError> {
    let b = &settings.bounds;
    if !(kappa >= b.kappa.0 && kappa <= b.kappa.1 && sigma >= b.sigma.0 && sigma <= b.sigma.1) {
        return Err(CirFitError::FixedOutOfBounds { kappa, sigma });
    }
    let pricer = CirPricer::new(
        trade,
        quotes,
        discount,
        cal,
        settings.grid_step,
        settings.accrual,
    )?;
    Ok(fit_with_pricer(
        trade,
        &pricer,
        quotes,
        Some((kappa, sigma)),
        starts,
        settings,
    ))
}

fn fit_with_pricer(
    trade: NaiveDate,
    pricer: &CirPricer,
    quotes: &[BootstrapQuote],
    fixed: Option<(f64, f64)>,
    starts: &[CirParams],
    settings: &CirFitSettings,
) -> CirFit {
    let bounds = &settings.bounds;
    let mut candidates: Vec<CirParams> = starts
        .iter()
        .filter(|p| {
            [p.kappa, p.theta, p.sigma, p.lambda0]
                .iter()
                .all(|v| v.is_finite())
        })
        .copied()
        .collect();
    if candidates.is_empty() {
        candidates.push(default_start(trade, quotes, pricer));
    }
    let mut problem = DayProblem::new(pricer, fixed);
    let fix = |p: &CirParams| -> CirParams {
        let mut q = clamp_params(p, bounds);
        if let Some((k, s)) = fixed {
            q.kappa = k;
            q.sigma = s;
        }
        q
    };
    let mut ranked: Vec<(f64, CirParams)> = candidates
        .iter()
        .map(|p| {
            let q = fix(p);
            (problem.cost_of(&q), q)
        })
        .collect();
    ranked.sort_by(|a, b| a.0.total_cmp(&b.0));
    let is_fixed = fixed.is_some();
    let (lo, hi) = box_of(bounds, is_fixed);
    let mut best: Option<(f64, CirParams, u32, u32, bool)> = None;
    for (c0, start) in &ranked {
        if !c0.is_finite() {
            continue;
        }
        let (cost, p, iters, evals, converged) = match settings.solver {
            CirSolver::LevenbergMarquardt => {
                let cap: &[f64] = if is_fixed {
                    &[1.0, 0.05]
                } else {
                    &[1.0, 1.0, 0.05, 0.05]
                };
                let out = levenberg_marquardt(
                    &mut problem,
                    &to_x(start, is_fixed),
                    &lo,
                    &hi,
                    cap,
                    &settings.lm,
                );
                if out.failed {
                    continue;
                }
                (
                    out.cost,
                    to_params(&out.x, fixed),
                    out.iterations,
                    out.evaluations,
                    out.converged,
                )
            }
            CirSolver::NelderMead => {
                match nelder_mead(pricer, fixed, &to_x(start, is_fixed), &lo, &hi, settings) {
                    Some(v) => v,
                    None => continue,
                }
            }
        };
        if best.as_ref().map_or(true, |b| cost < b.0) {
            best = Some((cost, p, iters, evals, converged));
        }
        // The best-ranked start that converges is kept; others are tried only on failure.
        if converged {
            break;
        }
    }
    let m = pricer.len() as f64;
    match best {
        Some((cost, p, iterations, evaluations, converged)) => CirFit {
            trade_date: trade,
            kappa: p.kappa,
            theta: p.theta,
            sigma: p.sigma,
            lambda0: p.lambda0,
            rmse_bp: (2.0 * cost / m).sqrt(),
            feller: p.feller(),
            status: if converged {
                CirFitStatus::Ok
            } else {
                CirFitStatus::MaxIterations
            },
            mode: if is_fixed {
                CirFitMode::FixedKappaSigma
            } else {
                CirFitMode::Free
            },
            iterations,
            evaluations,
            quotes: pricer.residual_rows(&p),
            detail: bound_detail(&p, bounds, is_fixed),
        },
        None => {
            let p = ranked
                .first()
                .map(|r| r.1)
                .unwrap_or_else(|| fix(&start_from_quotes(quotes)));
            CirFit {
                trade_date: trade,
                kappa: p.kappa,
                theta: p.theta,
                sigma: p.sigma,
                lambda0: p.lambda0,
                rmse_bp: f64::NAN,
                feller: p.feller(),
                status: CirFitStatus::Failed,
                mode: if is_fixed {
                    CirFitMode::FixedKappaSigma
                } else {
                    CirFitMode::Free
                },
                iterations: 0,
                evaluations: ranked.len() as u32,
                quotes: Vec::new(),
                detail: Some(format!(
                    "no start gave finite prices ({} starts tried)",
                    ranked.len()
                )),
            }
        }
    }
}

/// argmin's Nelder-Mead on the solver coordinates, with the parameters projected on the box.
fn nelder_mead(
    pricer: &CirPricer,
    fixed: Option<(f64, f64)>,
    x0: &[f64],
    lo: &[f64],
    hi: &[f64],
    settings: &CirFitSettings,
) -> Option<(f64, CirParams, u32, u32, bool)> {
    use argmin::core::{
        CostFunction, Error, Executor, State, TerminationReason, TerminationStatus,
    };
    use argmin::solver::neldermead::NelderMead;
    struct Cost<'a> {
        pricer: &'a CirPricer,
        fixed: Option<(f64, f64)>,
        lo: &'a [f64],
        hi: &'a [f64],
    }
    impl CostFunction for Cost<'_> {
        type Param = Vec<f64>;
        type Output = f64;
        fn cost(&self, x: &Vec<f64>) -> Result<f64, Error> {
            let xc: Vec<f64> = x
                .iter()
                .zip(self.lo.iter().zip(self.hi))
                .map(|(&v, (&l, &h))| v.clamp(l, h))
                .collect();
            // Outside the box the cost grows with the distance, so the simplex comes back.
            let out: f64 = x.iter().zip(&xc).map(|(a, b)| (a - b) * (a - b)).sum();
            let p = to_params(&xc, self.fixed);
            let mut buf = Buffers::default();
            let mut r = vec![0.0; self.pricer.len()];
            if !self
                .pricer
                .evaluate(p.kappa, p.theta, p.sigma, p.lambda0, &mut buf, &mut r, None)
            {
                return Ok(f64::MAX);
            }
            Ok(0.5 * r.iter().map(|v| v * v).sum::<f64>() * (1.0 + 1e6 * out) + 1e6 * out)
        }
    }
    let n = x0.len();
    let mut simplex = vec![x0.to_vec()];
    for i in 0..n {
        let mut v = x0.to_vec();
        // 0.2 in the log coordinates; 20% (or 10 bp) in lambda0; half (or 1e-3) in sigma^2.
        let lambda0 = (fixed.is_none() && i == 3) || (fixed.is_some() && i == 1);
        v[i] += if lambda0 {
            (0.2 * x0[i]).max(1e-3)
        } else if fixed.is_none() && i == 2 {
            (0.5 * x0[i]).max(1e-3)
        } else {
            0.2
        };
        simplex.push(v);
    }
    let solver = NelderMead::new(simplex)
        .with_sd_tolerance(settings.nm_sd_tolerance)
        .ok()?;
    let cost = Cost {
        pricer,
        fixed,
        lo,
        hi,
    };
    let res = Executor::new(cost, solver)
        .configure(|s| s.max_iters(settings.nm_max_iterations).counting(true))
        .run()
        .ok()?;
    let st = res.state();
    let x = st.get_best_param()?.clone();
    let xc: Vec<f64> = x
        .iter()
        .zip(lo.iter().zip(hi))
        .map(|(&v, (&l, &h))| v.clamp(l, h))
        .collect();
    let converged = matches!(
        st.get_termination_status(),
        TerminationStatus::Terminated(TerminationReason::SolverConverged)
    );
    let evals = st.get_func_counts().get("cost_count").copied().unwrap_or(0) as u32;
    Some((
        st.get_best_cost(),
        to_params(&xc, fixed),
        st.get_iter() as u32,
        evals,
        converged,
    ))
}

/// One day of a window.
#[derive(Debug, Clone, Copy)]
pub struct CirWindowDay<'a> {
    pub trade_date: NaiveDate,
    pub quotes: &'a [BootstrapQuote],
    pub discount: &'a DiscountCurve,
    /// Starting values for the day (e.g. from its bootstrapped curve).
    pub start: Option<CirParams>,
}

/// The window mode's result: the pooled kappa and sigma and every day's fixed fit.
#[derive(Debug, Clone, PartialEq)]
pub struct CirWindowFit {
    pub kappa: f64,
    pub sigma: f64,
    /// Status of the pooled estimate.
    pub status: CirFitStatus,
    pub iterations: u32,
    /// Pooled RMSE (bp) over the days used for kappa and sigma.
    pub pooled_rmse_bp: f64,
    /// Dates that entered the pooled estimate.
    pub pooled_dates: Vec<NaiveDate>,
    /// Every day of the window, in input order: its fit with kappa and sigma held, or why it
    /// could not be fitted.
    pub days: Vec<Result<CirFit, CirFitError>>,
}

struct PooledProblem<'a> {
    days: Vec<DayProblem<'a>>,
    offsets: Vec<usize>,
    m: usize,
}

impl LeastSquares for PooledProblem<'_> {
    fn dims(&self) -> (usize, usize) {
        (2 + 2 * self.days.len(), self.m)
    }

    fn eval(&mut self, x: &[f64], r: &mut [f64], jac: Option<&mut [f64]>) -> bool {
        let n = 2 + 2 * self.days.len();
        let (kappa, sigma) = (x[0].exp(), x[1].max(0.0).sqrt());
        let mut jac = jac;
        if let Some(j) = jac.as_deref_mut() {
            j.iter_mut().for_each(|v| *v = 0.0);
        }
        for (d, prob) in self.days.iter_mut().enumerate() {
            let (theta, lambda0) = (x[2 + 2 * d].exp(), x[3 + 2 * d]);
            let off = self.offsets[d];
            let len = prob.pricer.len();
            match jac.as_deref_mut() {
                None => {
                    if !prob.pricer.evaluate(
                        kappa,
                        theta,
                        sigma,
                        lambda0,
                        &mut prob.f64_buf,
                        &mut r[off..off + len],
                        None,
                    ) {
                        return false;
                    }
                }
                Some(j) => {
                    let ok = prob.pricer.evaluate(
                        Grad4::var(kappa, 0),
                        Grad4::var(theta, 1),
                        Grad4::var(sigma, 2),
                        Grad4::var(lambda0, 3),
                        &mut prob.grad_buf,
                        &mut prob.grad_out,
                        None,
                    );
                    if !ok {
                        return false;
                    }
                    for (k, g) in prob.grad_out.iter().enumerate() {
                        let row = &mut j[(off + k) * n..(off + k + 1) * n];
                        r[off + k] = g.v;
                        row[0] = g.d[0] * kappa;
                        row[1] = g.d[2] * 0.5 / sigma;
                        row[2 + 2 * d] = g.d[1] * theta;
                        row[3 + 2 * d] = g.d[3];
                        if !row.iter().all(|v| v.is_finite()) {
                            return false;
                        }
                    }
                }
            }
        }
        true
    }
}

/// The window mode: kappa and sigma estimated once on the window's pooled quotes (every day's
/// own theta and lambda0 fitted jointly with them), then theta and lambda0 fitted day by day
/// with kappa and sigma held.
///
/// At most `settings.max_pooled_days` days, evenly spaced, enter the pooled estimate; its start
/// is the median (in logs) of free fits on those days.
pub fn fit_cir_window(
    days: &[CirWindowDay<'_>],
    cal: &Calendar,
    settings: &CirFitSettings,
) -> Result<CirWindowFit, CirFitError> {
    let pricers: Vec<Result<CirPricer, CirFitError>> = days
        .iter()
        .map(|d| {
            CirPricer::new(
                d.trade_date,
                d.quotes,
                d.discount,
                cal,
                settings.grid_step,
                settings.accrual,
            )
        })
        .collect();
    let usable: Vec<usize> = (0..days.len()).filter(|&i| pricers[i].is_ok()).collect();
    if usable.is_empty() {
        return Err(CirFitError::EmptyWindow);
    }
    let take = settings.max_pooled_days.max(1).min(usable.len());
    let pooled: Vec<usize> = (0..take).map(|k| usable[k * usable.len() / take]).collect();

    // Free fits on the pooled days give the start.
    let mut free: Vec<(usize, CirParams)> = Vec::new();
    for &i in &pooled {
        let pr = pricers[i].as_ref().expect("usable");
        let starts: Vec<CirParams> = days[i].start.into_iter().collect();
        let f = fit_with_pricer(
            days[i].trade_date,
            pr,
            days[i].quotes,
            None,
            &starts,
            settings,
        );
        if f.status != CirFitStatus::Failed {
            free.push((i, f.params()));
        }
    }
    if free.is_empty() {
        return Err(CirFitError::EmptyWindow);
    }
    let median = |mut v: Vec<f64>| -> f64 {
        v.sort_by(f64::total_cmp);
        let n = v.len();
        if n % 2 == 1 {
            v[n / 2]
        } else {
            0.5 * (v[n / 2 - 1] + v[n / 2])
        }
    };
    let lk = median(free.iter().map(|(_, p)| p.kappa.ln()).collect());
    let ls = median(free.iter().map(|(_, p)| p.sigma.ln()).collect());
    let s2 = (2.0 * ls).exp();

    let b = &settings.bounds;
    let mut x0 = vec![lk, s2];
    let mut lo = vec![b.kappa.0.ln(), b.sigma.0 * b.sigma.0];
    let mut hi = vec![b.kappa.1.ln(), b.sigma.1 * b.sigma.1];
    let mut cap = vec![1.0, 0.05];
    let mut probs = Vec::new();
    let mut offsets = Vec::new();
    let mut m = 0;
    let mut dates = Vec::new();
    for (i, p) in &free {
        let pr = pricers[*i].as_ref().expect("usable");
        x0.push(p.theta.clamp(b.theta.0, b.theta.1).ln());
        x0.push(p.lambda0.clamp(b.lambda0.0, b.lambda0.1));
        lo.extend([b.theta.0.ln(), b.lambda0.0]);
        hi.extend([b.theta.1.ln(), b.lambda0.1]);
        cap.extend([1.0, 0.05]);
        offsets.push(m);
        m += pr.len();
        probs.push(DayProblem::new(pr, None));
        dates.push(days[*i].trade_date);
    }
    let mut pooled_problem = PooledProblem {
        days: probs,
        offsets,
        m,
    };
    let out = levenberg_marquardt(&mut pooled_problem, &x0, &lo, &hi, &cap, &settings.lm);
    let (kappa, sigma) = (out.x[0].exp(), out.x[1].max(0.0).sqrt());
    let status = if out.failed {
        CirFitStatus::Failed
    } else if out.converged {
        CirFitStatus::Ok
    } else {
        CirFitStatus::MaxIterations
    };
    let pooled_theta: std::collections::HashMap<usize, CirParams> = free
        .iter()
        .enumerate()
        .map(|(k, (i, _))| {
            (
                *i,
                CirParams {
                    kappa,
                    theta: out.x[2 + 2 * k].exp(),
                    sigma,
                    lambda0: out.x[3 + 2 * k],
                },
            )
        })
        .collect();

    let mut results = Vec::with_capacity(days.len());
    let mut prev: Option<CirParams> = None;
    for (i, day) in days.iter().enumerate() {
        match &pricers[i] {
            Err(e) => results.push(Err(e.clone())),
            Ok(pr) => {
                let mut starts: Vec<CirParams> = Vec::new();
                if let Some(p) = pooled_theta.get(&i) {
                    starts.push(*p);
                }
                if let Some(p) = prev {
                    starts.push(p);
                }
                if let Some(p) = day.start {
                    starts.push(p);
                }
                let f = fit_with_pricer(
                    day.trade_date,
                    pr,
                    day.quotes,
                    Some((kappa, sigma)),
                    &starts,
                    settings,
                );
                if f.status != CirFitStatus::Failed {
                    prev = Some(f.params());
                }
                results.push(Ok(f));
            }
        }
    }
    Ok(CirWindowFit {
        kappa,
        sigma,
        status,
        iterations: out.iterations,
        pooled_rmse_bp: (2.0 * out.cost / m as f64).sqrt(),
        pooled_dates: dates,
        days: results,
    })
}

/// Par spreads (decimal) of the standard contracts of `tenors` under CIR parameters `p`, all
/// with recovery `recovery` (for tests and for generating curves from known parameters).
pub fn cir_par_spreads(
    trade: NaiveDate,
    tenors: &[Tenor],
    recovery: f64,
    discount: &DiscountCurve,
    cal: &Calendar,
    p: &CirParams,
    settings: &CirFitSettings,
) -> Result<Vec<f64>, CirFitError> {
    // Any par quote will do: the repriced par spread does not depend on it.
    let quotes: Vec<BootstrapQuote> = tenors
        .iter()
        .map(|&tenor| BootstrapQuote {
            tenor,
            quote: CdsQuote::ParSpread(0.01),
            recovery,
        })
        .collect();
    let pricer = CirPricer::new(
        trade,
        &quotes,
        discount,
        cal,
        settings.grid_step,
        settings.accrual,
    )?;
    let rows = pricer.residual_rows(p);
    Ok(rows.iter().map(|r| r.model_par_spread_bp / 1e4).collect())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn gradient_matches_finite_differences() {
        let p = [0.4, 0.03, 0.12, 0.015];
        let f = |k: f64, th: f64, s: f64, l: f64, t: f64| {
            let (a, b) = CirCoefficients::new(k, s).at(t);
            th * a - l * b
        };
        for t in [0.3, 4.0, 12.0] {
            let (a, b) = CirCoefficients::new(Grad4::var(p[0], 0), Grad4::var(p[2], 2)).at(t);
            let g = Grad4::var(p[1], 1) * a - Grad4::var(p[3], 3) * b;
            for i in 0..4 {
                let h = 1e-6 * p[i];
                let mut up = p;
                let mut dn = p;
                up[i] += h;
                dn[i] -= h;
                let fd = (f(up[0], up[1], up[2], up[3], t) - f(dn[0], dn[1], dn[2], dn[3], t))
                    / (2.0 * h);
                assert!(
                    (fd - g.d[i]).abs() < 1e-7 * (1.0 + fd.abs()),
                    "t={t} i={i}: {fd} vs {}",
                    g.d[i]
                );
            }
        }
    }

    #[test]
    fn lm_solves_a_bounded_rosenbrock() {
        struct Rb;
        impl LeastSquares for Rb {
            fn dims(&self) -> (usize, usize) {
                (2, 2)
            }
            fn eval(&mut self, x: &[f64], r: &mut [f64], jac: Option<&mut [f64]>) -> bool {
                r[0] = 10.0 * (x[1] - x[0] * x[0]);
                r[1] = 1.0 - x[0];
                if let Some(j) = jac {
                    j.copy_from_slice(&[-20.0 * x[0], 10.0, -1.0, 0.0]);
                }
                true
            }
        }
        let out = levenberg_marquardt(
            &mut Rb,
            &[-1.2, 1.0],
            &[-2.0, -2.0],
            &[2.0, 2.0],
            &[f64::INFINITY; 2],
            &LmSettings::default(),
        );
        assert!(
            out.converged && (out.x[0] - 1.0).abs() < 1e-8 && (out.x[1] - 1.0).abs() < 1e-8,
            "{out:?}"
        );
        // With the optimum outside the box the solution sits on the bound x0 <= 0.5.
        let out = levenberg_marquardt(
            &mut Rb,
            &[-1.2, 1.0],
            &[-2.0, -2.0],
            &[0.5, 2.0],
            &[f64::INFINITY; 2],
            &LmSettings::default(),
        );
        assert!(
            (out.x[0] - 0.5).abs() < 1e-12 && (out.x[1] - 0.25).abs() < 1e-6,
            "{out:?}"
        );
    }

    #[test]
    fn start_recovers_a_deterministic_curve() {
        // Integrated hazards of sigma = 0 parameters are matched exactly at a grid kappa.
        let (k, th, l0) = (0.5, 0.03, 0.01);
        let times: Vec<f64> = [0.5, 1.0, 2.0, 3.0, 5.0, 7.0, 10.0].to_vec();
        let h: Vec<f64> = times
            .iter()
            .map(|&t| {
                let b = (1.0 - (-k * t).exp()) / k;
                l0 * b + th * (t - b)
            })
            .collect();
        let p = start_from_points(&times, &h);
        assert_eq!(p.kappa, 0.5);
        assert!((p.theta - th).abs() < 1e-12 && (p.lambda0 - l0).abs() < 1e-12);
    }
}
