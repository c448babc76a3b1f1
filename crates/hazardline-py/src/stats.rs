//! The backtest statistics: intervals, binomial, Jeffreys and correlated-default (Vasicek)
//! tests, Hosmer-Lemeshow, AUC with its DeLong variance, the traffic light.

use crate::refuse;
use hazardline_core::stats::{self, BucketForecast, ZoneThresholds};
use pyo3::prelude::*;
use pyo3::types::PyDict;

/// Clopper-Pearson interval (lo, hi) of d defaults in n at the two-sided level.
#[pyfunction]
fn clopper_pearson(d: u64, n: u64, level: f64) -> PyResult<(f64, f64)> {
    stats::clopper_pearson(d, n, level).map(|i| (i.lo, i.hi)).map_err(refuse)
}

/// Jeffreys interval (lo, hi): Beta(d + 1/2, n - d + 1/2) quantiles, lo = 0 at d = 0 and hi = 1 at d = n.
#[pyfunction]
fn jeffreys_interval(d: u64, n: u64, level: f64) -> PyResult<(f64, f64)> {
    stats::jeffreys_interval(d, n, level).map(|i| (i.lo, i.hi)).map_err(refuse)
}

/// Wilson score interval (lo, hi).
#[pyfunction]
fn wilson_interval(d: u64, n: u64, level: f64) -> PyResult<(f64, f64)> {
    stats::wilson_interval(d, n, level).map(|i| (i.lo, i.hi)).map_err(refuse)
}

/// P[D >= d] for D ~ Binomial(n, p): the one-sided binomial test of under-forecasting.
#[pyfunction]
fn binomial_upper_tail(d: u64, n: u64, p: f64) -> PyResult<f64> {
    stats::binomial_upper_tail(d, n, p).map_err(refuse)
}

/// P[D <= d] for D ~ Binomial(n, p).
#[pyfunction]
fn binomial_lower_tail(d: u64, n: u64, p: f64) -> PyResult<f64> {
    stats::binomial_lower_tail(d, n, p).map_err(refuse)
}

/// The Jeffreys test's p-value: the Beta(d + 1/2, n - d + 1/2) probability below p.
#[pyfunction]
fn jeffreys_p_value(d: u64, n: u64, p: f64) -> PyResult<f64> {
    stats::jeffreys_p_value(d, n, p).map_err(refuse)
}

/// P[D >= d] for n obligors of PD `pd` and asset correlation `rho` (Vasicek one-factor).
#[pyfunction]
fn vasicek_upper_tail(d: u64, n: u64, pd: f64, rho: f64) -> PyResult<f64> {
    stats::vasicek_upper_tail(d, n, pd, rho).map_err(refuse)
}

/// P[D <= d] under the same model.
#[pyfunction]
fn vasicek_lower_tail(d: u64, n: u64, pd: f64, rho: f64) -> PyResult<f64> {
    stats::vasicek_lower_tail(d, n, pd, rho).map_err(refuse)
}

/// The default counts (lo, hi) the correlated model makes plausible at the two-sided level.
#[pyfunction]
fn vasicek_count_interval(n: u64, pd: f64, rho: f64, level: f64) -> PyResult<(u64, u64)> {
    stats::vasicek_count_interval(n, pd, rho, level).map_err(refuse)
}

/// The supervisory asset correlation for corporate exposures from the one-year PD.
#[pyfunction]
fn supervisory_corporate_correlation(pd_one_year: f64) -> PyResult<f64> {
    if !(0.0..=1.0).contains(&pd_one_year) {
        return Err(refuse(format!("pd = {pd_one_year} is not a probability in [0, 1]")));
    }
    Ok(stats::supervisory_corporate_correlation(pd_one_year))
}

/// Hosmer-Lemeshow over buckets (n, d, forecast PD): (statistic, degrees of freedom, p-value).
#[pyfunction]
fn hosmer_lemeshow(n: Vec<u64>, d: Vec<u64>, p: Vec<f64>) -> PyResult<(f64, usize, f64)> {
    if n.len() != d.len() || n.len() != p.len() {
        return Err(refuse("n, d and p have different lengths"));
    }
    let buckets: Vec<BucketForecast> = (0..n.len()).map(|i| BucketForecast { n: n[i], d: d[i], p: p[i] }).collect();
    stats::hosmer_lemeshow(&buckets).map(|h| (h.statistic, h.dof, h.p_value)).map_err(refuse)
}

fn auc_dict<'py>(py: Python<'py>, a: &stats::Auc, level: f64) -> PyResult<Bound<'py, PyDict>> {
    let out = PyDict::new(py);
    out.set_item("auc", a.auc)?;
    out.set_item("variance", a.variance)?;
    out.set_item("se", a.se())?;
    out.set_item("gini", a.gini())?;
    out.set_item("defaults", a.defaults)?;
    out.set_item("survivors", a.survivors)?;
    let i = a.interval(level).map_err(refuse)?;
    out.set_item("lo", i.lo)?;
    out.set_item("hi", i.hi)?;
    Ok(out)
}

/// AUC of a score (higher = riskier) against default flags, with its DeLong variance and the
/// normal interval at `level`.
#[pyfunction]
#[pyo3(signature = (scores, defaulted, level = 0.95))]
fn auc_delong<'py>(
    py: Python<'py>,
    scores: Vec<f64>,
    defaulted: Vec<bool>,
    level: f64,
) -> PyResult<Bound<'py, PyDict>> {
    let a = stats::auc_delong(&scores, &defaulted).map_err(refuse)?;
    auc_dict(py, &a, level)
}

/// The paired DeLong test of two scores on the same obligors.
#[pyfunction]
#[pyo3(signature = (a, b, defaulted, level = 0.95))]
fn auc_paired<'py>(
    py: Python<'py>,
    a: Vec<f64>,
    b: Vec<f64>,
    defaulted: Vec<bool>,
    level: f64,
) -> PyResult<Bound<'py, PyDict>> {
    let p = stats::auc_paired(&a, &b, &defaulted).map_err(refuse)?;
    let out = PyDict::new(py);
    out.set_item("a", auc_dict(py, &p.a, level)?)?;
    out.set_item("b", auc_dict(py, &p.b, level)?)?;
    out.set_item("covariance", p.covariance)?;
    out.set_item("z", p.z)?;
    out.set_item("p_value", p.p_value)?;
    Ok(out)
}

/// The traffic light of a p-value: `green`, `yellow` (p below `yellow`) or `red` (p below `red`).
#[pyfunction]
#[pyo3(signature = (p_value, yellow = 0.05, red = 0.001))]
fn traffic_light(p_value: f64, yellow: f64, red: f64) -> PyResult<&'static str> {
    let t = ZoneThresholds::new(yellow, red).map_err(refuse)?;
    stats::traffic_light(p_value, &t).map(|z| z.as_str()).map_err(refuse)
}

pub(crate) fn register(m: &Bound<'_, PyModule>) -> PyResult<()> {
    m.add_function(wrap_pyfunction!(clopper_pearson, m)?)?;
    m.add_function(wrap_pyfunction!(jeffreys_interval, m)?)?;
    m.add_function(wrap_pyfunction!(wilson_interval, m)?)?;
    m.add_function(wrap_pyfunction!(binomial_upper_tail, m)?)?;
    m.add_function(wrap_pyfunction!(binomial_lower_tail, m)?)?;
    m.add_function(wrap_pyfunction!(jeffreys_p_value, m)?)?;
    m.add_function(wrap_pyfunction!(vasicek_upper_tail, m)?)?;
    m.add_function(wrap_pyfunction!(vasicek_lower_tail, m)?)?;
    m.add_function(wrap_pyfunction!(vasicek_count_interval, m)?)?;
    m.add_function(wrap_pyfunction!(supervisory_corporate_correlation, m)?)?;
    m.add_function(wrap_pyfunction!(hosmer_lemeshow, m)?)?;
    m.add_function(wrap_pyfunction!(auc_delong, m)?)?;
    m.add_function(wrap_pyfunction!(auc_paired, m)?)?;
    m.add_function(wrap_pyfunction!(traffic_light, m)?)?;
    Ok(())
}
