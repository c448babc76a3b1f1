//! The fixed-kappa-sigma mode: kappa and sigma pooled over a window of days, theta and
//! lambda0 per day, in one least-squares problem.

use super::daily::*;
use super::pricer::CirPricer;
use super::*;
use crate::calibrate::bootstrap::BootstrapQuote;
use crate::curves::DiscountCurve;
use crate::math::grad::Grad4;
use crate::math::identification::identification;
use crate::math::least_squares::{levenberg_marquardt, LeastSquares};
use crate::models::cir::CirCoefficients;
use crate::time::Calendar;

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
    /// Scaled condition number of the pooled problem's Jacobian (kappa, sigma and every pooled
    /// day's theta and lambda0).
    pub condition_number: Option<f64>,
    /// Standard errors of the pooled kappa and sigma (Gauss-Newton covariance of the pooled
    /// problem, delta method from the solver's coordinates).
    pub kappa_se: Option<f64>,
    pub sigma_se: Option<f64>,
    /// Every day of the window, in input order: its fit with kappa and sigma held, or why it
    /// could not be fitted.
    pub days: Vec<Result<CirFit, CirFitError>>,
}

pub(crate) struct PooledProblem<'a> {
    pub(crate) days: Vec<DayProblem<'a>>,
    pub(crate) offsets: Vec<usize>,
    pub(crate) m: usize,
    /// The distinct grid times (t > 0) of all the days, and for each day the index in it of
    /// each of its grid points (unused where t <= 0): the days share kappa and sigma, and most
    /// of their grid (the protection nodes every grid step) is the same times, so each
    /// evaluation computes the affine coefficients once per distinct time.
    times: Vec<f64>,
    point_index: Vec<Vec<u32>>,
    /// The coefficients at `times` of the evaluation under way.
    ab: Vec<(Grad4, Grad4)>,
}

impl<'a> PooledProblem<'a> {
    pub(crate) fn new(days: Vec<DayProblem<'a>>, offsets: Vec<usize>, m: usize) -> Self {
        let mut times: Vec<f64> =
            days.iter().flat_map(|d| d.pricer.plan.times.iter().copied().filter(|&t| t > 0.0)).collect();
        times.sort_by(f64::total_cmp);
        times.dedup_by(|a, b| a.to_bits() == b.to_bits());
        let point_index = days
            .iter()
            .map(|d| {
                d.pricer
                    .plan
                    .times
                    .iter()
                    .map(|&t| {
                        if t > 0.0 {
                            times.binary_search_by(|u| u.total_cmp(&t)).expect("every day's time is in the union")
                                as u32
                        } else {
                            0
                        }
                    })
                    .collect()
            })
            .collect();
        PooledProblem { days, offsets, m, times, point_index, ab: Vec::new() }
    }
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
            let coef = CirCoefficients::new(Grad4::var(kappa, 0), Grad4::var(sigma, 2));
            self.ab.clear();
            self.ab.extend(self.times.iter().map(|&t| coef.at(t)));
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
                    // The same function of the same (kappa, sigma, t) as the pricer's own
                    // evaluation computes, so the same bits.
                    let (ab, index) = (&self.ab, &self.point_index[d]);
                    let ok = prob.pricer.evaluate_with(
                        |p, _| ab[index[p] as usize],
                        Grad4::var(theta, 1),
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
        .map(|d| CirPricer::new(d.trade_date, d.quotes, d.discount, cal, settings.grid_step, settings.accrual))
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
        let f = fit_with_pricer(days[i].trade_date, pr, days[i].quotes, None, &starts, settings);
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
    let mut pooled_problem = PooledProblem::new(probs, offsets, m);
    let out = levenberg_marquardt(&mut pooled_problem, &x0, &lo, &hi, &cap, &settings.lm);
    let (kappa, sigma) = (out.x[0].exp(), out.x[1].max(0.0).sqrt());
    let (condition_number, kappa_se, sigma_se) = if out.failed {
        (None, None, None)
    } else {
        let (n, m) = pooled_problem.dims();
        let (mut r, mut jac) = (vec![0.0; m], vec![0.0; m * n]);
        match pooled_problem.eval(&out.x, &mut r, Some(&mut jac)).then(|| identification(&jac, &r, n)).flatten() {
            Some(id) => (
                Some(id.condition_number),
                id.standard_errors[0].map(|s| s * kappa),
                id.standard_errors[1].filter(|_| sigma > 0.0).map(|s| s / (2.0 * sigma)),
            ),
            None => (None, None, None),
        }
    };
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
        .map(|(k, (i, _))| (*i, CirParams { kappa, theta: out.x[2 + 2 * k].exp(), sigma, lambda0: out.x[3 + 2 * k] }))
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
                let f = fit_with_pricer(day.trade_date, pr, day.quotes, Some((kappa, sigma)), &starts, settings);
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
        condition_number,
        kappa_se,
        sigma_se,
        days: results,
    })
}
