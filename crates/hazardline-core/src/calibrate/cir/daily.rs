//! The daily CIR fit: starting values, the day's least-squares problem in solver coordinates,
//! and the entry points of the free and fixed-kappa-sigma fits.

use super::pricer::{Buffers, CirPricer};
use super::*;
use crate::calibrate::bootstrap::{bootstrap, BootstrapQuote, BootstrapSettings};
use crate::curves::{DiscountCurve, HazardCurve};
use crate::instruments::cds::CdsQuote;
use crate::math::grad::Grad4;
use crate::math::identification::identification;
use crate::math::least_squares::{levenberg_marquardt, LeastSquares};
use crate::math::Scalar;
use crate::time::Calendar;

// Solver coordinates: x = (ln kappa, ln theta, sigma^2, lambda0); in the fixed mode x = (ln
// theta, lambda0). sigma^2, not ln sigma: survival depends on sigma through sigma^2, so in ln
// sigma the objective goes flat as sigma falls and a fit that touches the lower bound cannot
// climb back; in sigma^2 the slope stays finite down to zero.
//
// x = (ln theta, lambda0).

pub(crate) fn to_params(x: &[f64], fixed: Option<(f64, f64)>) -> CirParams {
    match fixed {
        None => CirParams { kappa: x[0].exp(), theta: x[1].exp(), sigma: x[2].max(0.0).sqrt(), lambda0: x[3] },
        Some((kappa, sigma)) => CirParams { kappa, theta: x[0].exp(), sigma, lambda0: x[1] },
    }
}

pub(crate) fn box_of(b: &CirBounds, fixed: bool) -> (Vec<f64>, Vec<f64>) {
    if fixed {
        (vec![b.theta.0.ln(), b.lambda0.0], vec![b.theta.1.ln(), b.lambda0.1])
    } else {
        (
            vec![b.kappa.0.ln(), b.theta.0.ln(), b.sigma.0 * b.sigma.0, b.lambda0.0],
            vec![b.kappa.1.ln(), b.theta.1.ln(), b.sigma.1 * b.sigma.1, b.lambda0.1],
        )
    }
}

pub(crate) fn to_x(p: &CirParams, fixed: bool) -> Vec<f64> {
    if fixed {
        vec![p.theta.ln(), p.lambda0]
    } else {
        vec![p.kappa.ln(), p.theta.ln(), p.sigma * p.sigma, p.lambda0]
    }
}

pub(crate) struct DayProblem<'a> {
    pub(crate) pricer: &'a CirPricer,
    pub(crate) fixed: Option<(f64, f64)>,
    pub(crate) f64_buf: Buffers<f64>,
    pub(crate) grad_buf: Buffers<Grad4>,
    pub(crate) grad_out: Vec<Grad4>,
    /// With kappa and sigma held: their affine coefficients at every grid point, computed once.
    /// The value and gradient evaluations compute the same bits at each call (the same
    /// operations on the values; `held_coefficients_are_the_evaluations_own` checks it), and
    /// theta and lambda0 do not enter them, so their derivatives in theta and lambda0 are zero.
    fixed_ab: Vec<(f64, f64)>,
}

impl<'a> DayProblem<'a> {
    pub(crate) fn new(pricer: &'a CirPricer, fixed: Option<(f64, f64)>) -> Self {
        DayProblem {
            pricer,
            fixed,
            f64_buf: Buffers::default(),
            grad_buf: Buffers::default(),
            grad_out: vec![Grad4::constant(0.0); pricer.len()],
            fixed_ab: match fixed {
                Some((kappa, sigma)) => pricer.coefficients(kappa, sigma),
                None => Vec::new(),
            },
        }
    }

    /// The residuals at `p` without gradients, the held coefficients used in the fixed mode.
    fn residuals(&mut self, p: &CirParams, r: &mut [f64]) -> bool {
        if self.fixed.is_some() {
            let ab = &self.fixed_ab;
            self.pricer.evaluate_with(|j, _| ab[j], p.theta, p.lambda0, &mut self.f64_buf, r, None)
        } else {
            self.pricer.evaluate(p.kappa, p.theta, p.sigma, p.lambda0, &mut self.f64_buf, r, None)
        }
    }

    pub(crate) fn cost_of(&mut self, p: &CirParams) -> f64 {
        let mut r = vec![0.0; self.pricer.len()];
        if self.residuals(p, &mut r) {
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
            None => self.residuals(&p, r),
            Some(jac) => {
                let ok = if self.fixed.is_some() {
                    // Only the derivatives in theta and lambda0 are read below, and they do not
                    // depend on those in kappa and sigma (every operation acts on each
                    // component alone), so the held coefficients enter as constants.
                    let ab = &self.fixed_ab;
                    self.pricer.evaluate_with(
                        |j, _| (Grad4::constant(ab[j].0), Grad4::constant(ab[j].1)),
                        Grad4::var(p.theta, 1),
                        Grad4::var(p.lambda0, 3),
                        &mut self.grad_buf,
                        &mut self.grad_out,
                        None,
                    )
                } else {
                    self.pricer.evaluate(
                        Grad4::var(p.kappa, 0),
                        Grad4::var(p.theta, 1),
                        Grad4::var(p.sigma, 2),
                        Grad4::var(p.lambda0, 3),
                        &mut self.grad_buf,
                        &mut self.grad_out,
                        None,
                    )
                };
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
    let mut best = (f64::INFINITY, CirParams { kappa: 0.3, theta: 0.02, sigma: 0.05, lambda0: 0.01 });
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
            best = (err, CirParams { kappa, theta: th, sigma: 0.5 * (2.0 * kappa * th).sqrt(), lambda0: l0 });
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
pub(crate) fn default_start(trade: NaiveDate, quotes: &[BootstrapQuote], pricer: &CirPricer) -> CirParams {
    let settings = BootstrapSettings::default();
    match bootstrap(trade, quotes, &pricer.discount, &pricer.calendar, &settings) {
        Ok(fit) if fit.complete() => {
            fit.curve.as_ref().map(start_from_curve).unwrap_or_else(|| start_from_quotes(quotes))
        }
        _ => start_from_quotes(quotes),
    }
}

/// Starting values from the quotes alone (credit triangle: hazard = spread / (1 - R)).
pub(crate) fn start_from_quotes(quotes: &[BootstrapQuote]) -> CirParams {
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

pub(crate) fn clamp_params(p: &CirParams, b: &CirBounds) -> CirParams {
    CirParams {
        kappa: p.kappa.clamp(b.kappa.0, b.kappa.1),
        theta: p.theta.clamp(b.theta.0, b.theta.1),
        sigma: p.sigma.clamp(b.sigma.0, b.sigma.1),
        lambda0: p.lambda0.clamp(b.lambda0.0, b.lambda0.1),
    }
}

pub(crate) fn bound_detail(p: &CirParams, b: &CirBounds, fixed: bool) -> Option<String> {
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
    let pricer = CirPricer::new(trade, quotes, discount, cal, settings.grid_step, settings.accrual)?;
    Ok(fit_with_pricer(trade, &pricer, quotes, None, starts, settings))
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
    let pricer = CirPricer::new(trade, quotes, discount, cal, settings.grid_step, settings.accrual)?;
    Ok(fit_with_pricer(trade, &pricer, quotes, Some((kappa, sigma)), starts, settings))
}

/// The identification summary of a day's fit at its solution `p`: the scaled condition
/// number (the same in solver and natural coordinates) and the standard errors of (kappa,
/// theta, sigma, lambda0), carried from the solver's coordinates by the delta method
/// (se(v) = v se(ln v); se(sigma) = se(sigma^2) / (2 sigma)).
pub(crate) fn day_identification(
    problem: &mut DayProblem<'_>,
    p: &CirParams,
    fixed: bool,
) -> (Option<f64>, [Option<f64>; 4]) {
    let (n, m) = problem.dims();
    let (mut r, mut jac) = (vec![0.0; m], vec![0.0; m * n]);
    if !problem.eval(&to_x(p, fixed), &mut r, Some(&mut jac)) {
        return (None, [None; 4]);
    }
    let Some(id) = identification(&jac, &r, n) else { return (None, [None; 4]) };
    let se = &id.standard_errors;
    let out = if fixed {
        [None, se[0].map(|s| s * p.theta), None, se[1]]
    } else {
        [
            se[0].map(|s| s * p.kappa),
            se[1].map(|s| s * p.theta),
            se[2].filter(|_| p.sigma > 0.0).map(|s| s / (2.0 * p.sigma)),
            se[3],
        ]
    };
    (Some(id.condition_number), out)
}

pub(crate) fn fit_with_pricer(
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
        .filter(|p| [p.kappa, p.theta, p.sigma, p.lambda0].iter().all(|v| v.is_finite()))
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
                let cap: &[f64] = if is_fixed { &[1.0, 0.05] } else { &[1.0, 1.0, 0.05, 0.05] };
                let out = levenberg_marquardt(&mut problem, &to_x(start, is_fixed), &lo, &hi, cap, &settings.lm);
                if out.failed {
                    continue;
                }
                (out.cost, to_params(&out.x, fixed), out.iterations, out.evaluations, out.converged)
            }
            #[cfg(feature = "nelder-mead")]
            CirSolver::NelderMead => {
                match super::nelder_mead::nelder_mead(pricer, fixed, &to_x(start, is_fixed), &lo, &hi, settings) {
                    Some(v) => v,
                    None => continue,
                }
            }
        };
        if best.as_ref().is_none_or(|b| cost < b.0) {
            best = Some((cost, p, iters, evals, converged));
        }
        // The best-ranked start that converges is kept; others are tried only on failure.
        if converged {
            break;
        }
    }
    let m = pricer.len() as f64;
    match best {
        Some((cost, p, iterations, evaluations, converged)) => {
            let (condition_number, standard_errors) = day_identification(&mut problem, &p, is_fixed);
            CirFit {
                trade_date: trade,
                kappa: p.kappa,
                theta: p.theta,
                sigma: p.sigma,
                lambda0: p.lambda0,
                rmse_bp: (2.0 * cost / m).sqrt(),
                feller: p.feller(),
                status: if converged { CirFitStatus::Ok } else { CirFitStatus::MaxIterations },
                mode: if is_fixed { CirFitMode::FixedKappaSigma } else { CirFitMode::Free },
                iterations,
                evaluations,
                quotes: pricer.residual_rows(&p),
                detail: bound_detail(&p, bounds, is_fixed),
                condition_number,
                standard_errors,
            }
        }
        None => {
            let p = ranked.first().map(|r| r.1).unwrap_or_else(|| fix(&start_from_quotes(quotes)));
            CirFit {
                trade_date: trade,
                kappa: p.kappa,
                theta: p.theta,
                sigma: p.sigma,
                lambda0: p.lambda0,
                rmse_bp: f64::NAN,
                feller: p.feller(),
                status: CirFitStatus::Failed,
                mode: if is_fixed { CirFitMode::FixedKappaSigma } else { CirFitMode::Free },
                iterations: 0,
                evaluations: ranked.len() as u32,
                quotes: Vec::new(),
                detail: Some(format!("no start gave finite prices ({} starts tried)", ranked.len())),
                condition_number: None,
                standard_errors: [None; 4],
            }
        }
    }
}
