//! CIR survival and the CIR fit to one name's quotes on one day.

use crate::curves::{Calendar, DiscountCurve};
use crate::{accrual, date, refuse, tenor};
use hazardline_core::calibrate::bootstrap::{bootstrap, BootstrapQuote, BootstrapSettings};
use hazardline_core::calibrate::cir::{cir_par_spreads, fit_cir, fit_cir_fixed, start_from_curve, CirFitSettings};
use hazardline_core::instruments::cds::CdsQuote;
use hazardline_core::models::cir::CirParams;
use pyo3::prelude::*;
use pyo3::types::PyDict;

fn params(kappa: f64, theta: f64, sigma: f64, lambda0: f64) -> PyResult<CirParams> {
    let p = CirParams { kappa, theta, sigma, lambda0 };
    p.check().map_err(refuse)?;
    Ok(p)
}

/// CIR survival probabilities S(t) at Act/365F times t.
#[pyfunction]
fn cir_survival(kappa: f64, theta: f64, sigma: f64, lambda0: f64, times: Vec<f64>) -> PyResult<Vec<f64>> {
    let p = params(kappa, theta, sigma, lambda0)?;
    Ok(times.into_iter().map(|t| p.survival_at(t)).collect())
}

/// CIR forward hazards -d ln S / dt at Act/365F times t.
#[pyfunction]
fn cir_forward_hazard(kappa: f64, theta: f64, sigma: f64, lambda0: f64, times: Vec<f64>) -> PyResult<Vec<f64>> {
    let p = params(kappa, theta, sigma, lambda0)?;
    Ok(times.into_iter().map(|t| p.forward_hazard_at(t)).collect())
}

/// Par spreads (decimal) of the standard contracts of `tenors` under CIR parameters.
#[pyfunction]
#[pyo3(signature = (trade_date, tenors, recovery, discount, calendar, kappa, theta, sigma, lambda0, accrual_variant = "published"))]
fn cir_spreads(
    trade_date: i32,
    tenors: Vec<String>,
    recovery: f64,
    discount: &DiscountCurve,
    calendar: &Calendar,
    kappa: f64,
    theta: f64,
    sigma: f64,
    lambda0: f64,
    accrual_variant: &str,
) -> PyResult<Vec<f64>> {
    let p = params(kappa, theta, sigma, lambda0)?;
    let ts = tenors.iter().map(|t| tenor(t)).collect::<PyResult<Vec<_>>>()?;
    let settings = CirFitSettings { accrual: accrual(accrual_variant)?, ..CirFitSettings::default() };
    cir_par_spreads(date(trade_date)?, &ts, recovery, &discount.inner, &calendar.inner, &p, &settings).map_err(refuse)
}

/// Fits CIR to one name's quotes on one day: all four parameters, or theta and lambda0 with
/// `kappa` and `sigma` held. Quotes as in `bootstrap_columns` (kind 0 par spread, 1 upfront).
/// Without `starts`, the fit starts from the day's bootstrapped curve (when it bootstraps) and
/// the quotes' credit-triangle hazards, as the command-line tool does.
#[pyfunction]
#[pyo3(signature = (trade_date, tenors, kinds, values, coupons, recoveries, discount, calendar, kappa = None, sigma = None, starts = Vec::new(), accrual_variant = "published"))]
fn fit_cir_day<'py>(
    py: Python<'py>,
    trade_date: i32,
    tenors: Vec<String>,
    kinds: Vec<u8>,
    values: Vec<f64>,
    coupons: Vec<f64>,
    recoveries: Vec<f64>,
    discount: &DiscountCurve,
    calendar: &Calendar,
    kappa: Option<f64>,
    sigma: Option<f64>,
    starts: Vec<(f64, f64, f64, f64)>,
    accrual_variant: &str,
) -> PyResult<Bound<'py, PyDict>> {
    let n = tenors.len();
    if [kinds.len(), values.len(), coupons.len(), recoveries.len()].iter().any(|&l| l != n) {
        return Err(refuse("the quote columns have different lengths"));
    }
    let mut quotes = Vec::with_capacity(n);
    for k in 0..n {
        let quote = match kinds[k] {
            0 => CdsQuote::ParSpread(values[k]),
            1 => CdsQuote::Upfront { upfront: values[k], coupon: coupons[k] },
            other => return Err(refuse(format!("quote {k}: kind {other} is not 0 (par spread) or 1 (upfront)"))),
        };
        quotes.push(BootstrapQuote { tenor: tenor(&tenors[k])?, quote, recovery: recoveries[k], maturity: None });
    }
    if kappa.is_some() != sigma.is_some() {
        return Err(refuse("kappa and sigma are held together: give both or neither"));
    }
    let trade = date(trade_date)?;
    let settings = CirFitSettings { accrual: accrual(accrual_variant)?, ..CirFitSettings::default() };
    let (d, cal) = (&discount.inner, &calendar.inner);
    let mut starts: Vec<CirParams> =
        starts.into_iter().map(|(kappa, theta, sigma, lambda0)| CirParams { kappa, theta, sigma, lambda0 }).collect();
    let fit = py.detach(|| {
        if starts.is_empty() {
            let bs = BootstrapSettings { accrual: settings.accrual, ..BootstrapSettings::default() };
            if let Ok(Some(curve)) = bootstrap(trade, &quotes, d, cal, &bs).map(|f| f.curve) {
                starts.push(start_from_curve(&curve));
            }
        }
        match kappa.zip(sigma) {
            None => fit_cir(trade, &quotes, d, cal, &starts, &settings),
            Some((k, s)) => fit_cir_fixed(trade, &quotes, d, cal, k, s, &starts, &settings),
        }
    });
    let fit = fit.map_err(refuse)?;
    let out = PyDict::new(py);
    out.set_item("kappa", fit.kappa)?;
    out.set_item("theta", fit.theta)?;
    out.set_item("sigma", fit.sigma)?;
    out.set_item("lambda0", fit.lambda0)?;
    out.set_item("rmse_bp", fit.rmse_bp)?;
    out.set_item("feller", fit.feller)?;
    out.set_item("status", fit.status.as_str())?;
    out.set_item("mode", fit.mode.as_str())?;
    out.set_item("iterations", fit.iterations)?;
    out.set_item("evaluations", fit.evaluations)?;
    out.set_item("condition_number", fit.condition_number)?;
    let [se_k, se_t, se_s, se_l] = fit.standard_errors;
    out.set_item("se_kappa", se_k)?;
    out.set_item("se_theta", se_t)?;
    out.set_item("se_sigma", se_s)?;
    out.set_item("se_lambda0", se_l)?;
    out.set_item("detail", fit.detail)?;
    out.set_item("model_par_spread_bp", fit.quotes.iter().map(|q| q.model_par_spread_bp).collect::<Vec<_>>())?;
    out.set_item("residual_bp", fit.quotes.iter().map(|q| q.residual_bp).collect::<Vec<_>>())?;
    Ok(out)
}

pub(crate) fn register(m: &Bound<'_, PyModule>) -> PyResult<()> {
    m.add_function(wrap_pyfunction!(cir_survival, m)?)?;
    m.add_function(wrap_pyfunction!(cir_forward_hazard, m)?)?;
    m.add_function(wrap_pyfunction!(cir_spreads, m)?)?;
    m.add_function(wrap_pyfunction!(fit_cir_day, m)?)?;
    Ok(())
}
