//! Many hazard curves at once: quotes as columns, curves as ranges of them, bootstrapped in
//! parallel with the interpreter released, nodes returned as the columns of `hazard_curves`.

use crate::curves::{Calendar, DiscountCurve};
use crate::{accrual, date, day_number, refuse, tenor};
use hazardline_core::calibrate::bootstrap::{
    BootstrapPlan, BootstrapQuote, BootstrapSettings, CurveFit, InfeasiblePolicy,
};
use hazardline_core::instruments::cds::CdsQuote;
use hazardline_core::time::Tenor;
use pyo3::prelude::*;
use pyo3::types::PyDict;
use rayon::prelude::*;
use std::collections::HashMap;

/// Quote kinds of the `kinds` column.
const PAR_SPREAD: u8 = 0;
const UPFRONT: u8 = 1;
const QUOTED_SPREAD: u8 = 2;
/// `maturities` entry of a quote on its tenor's standard roll.
const NO_MATURITY: i32 = i32::MIN;

type PlanKey = (chrono::NaiveDate, usize, usize, Vec<(Tenor, Option<chrono::NaiveDate>)>);

/// One curve's inputs, checked.
struct CurveInput {
    trade: chrono::NaiveDate,
    discount: usize,
    calendar: usize,
    quotes: Vec<BootstrapQuote>,
}

/// Bootstraps the curves; curve `i` is made of quotes `starts[i]..starts[i + 1]`, traded on
/// `trades[i]`, discounted on `discounts[discount_index[i]]`, dated on
/// `calendars[calendar_index[i]]`. Quote `k`: `tenors[k]`, `maturities[k]` (`NO_MATURITY` on
/// the standard roll), `kinds[k]` (0 par spread, 1 upfront, 2 quoted spread), `values[k]`
/// (decimal spread or fraction of notional), `coupons[k]` (decimal running coupon, for kinds 1
/// and 2), `recoveries[k]`. Returns the node columns (with `curve`, the curve index) and the
/// curves that could not be bootstrapped at all (`error_curve`, `error`).
#[pyfunction]
#[pyo3(signature = (trades, starts, discount_index, calendar_index, tenors, maturities, kinds, values, coupons, recoveries, discounts, calendars, accrual_variant = "published", infeasible = "floor", hazard_tolerance = 1e-14, max_iterations = 100, max_hazard = 1.0e4))]
fn bootstrap_columns<'py>(
    py: Python<'py>,
    trades: Vec<i32>,
    starts: Vec<usize>,
    discount_index: Vec<usize>,
    calendar_index: Vec<usize>,
    tenors: Vec<String>,
    maturities: Vec<i32>,
    kinds: Vec<u8>,
    values: Vec<f64>,
    coupons: Vec<f64>,
    recoveries: Vec<f64>,
    discounts: Vec<PyRef<'py, DiscountCurve>>,
    calendars: Vec<PyRef<'py, Calendar>>,
    accrual_variant: &str,
    infeasible: &str,
    hazard_tolerance: f64,
    max_iterations: u32,
    max_hazard: f64,
) -> PyResult<Bound<'py, PyDict>> {
    let n = trades.len();
    let q = tenors.len();
    if starts.len() != n + 1 || discount_index.len() != n || calendar_index.len() != n {
        return Err(refuse("trades, starts (one more), discount_index and calendar_index do not match"));
    }
    if [maturities.len(), kinds.len(), values.len(), coupons.len(), recoveries.len()].iter().any(|&l| l != q) {
        return Err(refuse("the quote columns have different lengths"));
    }
    let settings = BootstrapSettings {
        accrual: accrual(accrual_variant)?,
        infeasible: InfeasiblePolicy::parse(infeasible)
            .ok_or_else(|| refuse(format!("infeasible policy {infeasible:?} is not one of floor, fail")))?,
        hazard_tolerance,
        max_iterations,
        max_hazard,
    };
    let discounts: Vec<hazardline_core::curves::DiscountCurve> = discounts.iter().map(|d| d.inner.clone()).collect();
    let calendars: Vec<hazardline_core::time::Calendar> = calendars.iter().map(|c| c.inner.clone()).collect();
    let mut tenor_cache: HashMap<&str, Tenor> = HashMap::new();
    let mut curves = Vec::with_capacity(n);
    for i in 0..n {
        let (a, b) = (starts[i], starts[i + 1]);
        if a > b || b > q {
            return Err(refuse(format!("curve {i}: quote range {a}..{b} is outside the {q} quotes")));
        }
        if discount_index[i] >= discounts.len() || calendar_index[i] >= calendars.len() {
            return Err(refuse(format!("curve {i}: discount or calendar index out of range")));
        }
        let mut quotes = Vec::with_capacity(b - a);
        for k in a..b {
            let t = match tenor_cache.get(tenors[k].as_str()) {
                Some(t) => *t,
                None => {
                    let t = tenor(&tenors[k])?;
                    tenor_cache.insert(tenors[k].as_str(), t);
                    t
                }
            };
            let quote = match kinds[k] {
                PAR_SPREAD => CdsQuote::ParSpread(values[k]),
                UPFRONT | QUOTED_SPREAD => CdsQuote::Upfront { upfront: values[k], coupon: coupons[k] },
                other => return Err(refuse(format!("quote {k}: kind {other} is not 0, 1 or 2"))),
            };
            let maturity = if maturities[k] == NO_MATURITY { None } else { Some(date(maturities[k])?) };
            quotes.push(BootstrapQuote { tenor: t, quote, recovery: recoveries[k], maturity });
        }
        curves.push(CurveInput {
            trade: date(trades[i])?,
            discount: discount_index[i],
            calendar: calendar_index[i],
            quotes,
        });
    }
    let kinds_ref = &kinds;
    let values_ref = &values;
    let starts_ref = &starts;
    let results: Vec<Result<CurveFit, String>> = py.detach(|| {
        // Quoted spreads trade as the upfront of their flat hazard (the conversion needs the
        // day's discount curve), as the command-line tool converts them.
        let curves: Vec<Result<CurveInput, String>> = curves
            .into_par_iter()
            .enumerate()
            .map(|(i, mut c)| {
                for (j, quote) in c.quotes.iter_mut().enumerate() {
                    let k = starts_ref[i] + j;
                    if kinds_ref[k] != QUOTED_SPREAD {
                        continue;
                    }
                    let CdsQuote::Upfront { coupon, .. } = quote.quote else { continue };
                    quote.quote = quote.quoted_spread_as_upfront(
                        c.trade,
                        values_ref[k],
                        coupon,
                        &discounts[c.discount],
                        &calendars[c.calendar],
                        settings.accrual,
                    )?;
                }
                Ok(c)
            })
            .collect();
        // One plan per (trade date, discount curve, calendar, terms), shared by its curves.
        let mut keys: HashMap<PlanKey, usize> = HashMap::new();
        let mut key_of = Vec::with_capacity(curves.len());
        let mut unique: Vec<PlanKey> = Vec::new();
        for c in &curves {
            key_of.push(c.as_ref().ok().map(|c| {
                let key: PlanKey =
                    (c.trade, c.discount, c.calendar, c.quotes.iter().map(BootstrapQuote::term).collect());
                *keys.entry(key.clone()).or_insert_with(|| {
                    unique.push(key);
                    unique.len() - 1
                })
            }));
        }
        let plans: Vec<Result<BootstrapPlan, String>> = unique
            .par_iter()
            .map(|(trade, d, cal, terms)| {
                BootstrapPlan::for_terms(*trade, terms, &discounts[*d], &calendars[*cal], settings.accrual)
                    .map_err(|e| e.to_string())
            })
            .collect();
        curves
            .par_iter()
            .zip(key_of.par_iter())
            .map(|(c, key)| {
                let c = c.as_ref().map_err(Clone::clone)?;
                let plan = plans[key.expect("a key for every checked curve")].as_ref().map_err(Clone::clone)?;
                plan.solve(&c.quotes, &settings).map_err(|e| e.to_string())
            })
            .collect()
    });
    let mut curve_col = Vec::new();
    let (mut tenor_col, mut maturity_col, mut node_col) = (Vec::new(), Vec::new(), Vec::new());
    let (mut hazard_col, mut survival_col, mut status_col) = (Vec::new(), Vec::new(), Vec::new());
    let (mut recovery_col, mut iterations_col, mut detail_col) = (Vec::new(), Vec::new(), Vec::new());
    let (mut error_curve, mut error_text) = (Vec::new(), Vec::new());
    for (i, r) in results.into_iter().enumerate() {
        match r {
            Err(e) => {
                error_curve.push(i);
                error_text.push(e);
            }
            Ok(fit) => {
                for node in fit.nodes {
                    curve_col.push(i);
                    tenor_col.push(node.tenor.to_string());
                    maturity_col.push(day_number(node.maturity));
                    node_col.push(day_number(node.node_date));
                    hazard_col.push(node.hazard);
                    survival_col.push(node.survival);
                    status_col.push(node.status.as_str());
                    recovery_col.push(recoveries[starts[i] + node.quote_index]);
                    iterations_col.push(node.iterations);
                    detail_col.push(node.detail);
                }
            }
        }
    }
    let out = PyDict::new(py);
    out.set_item("curve", curve_col)?;
    out.set_item("tenor", tenor_col)?;
    out.set_item("maturity", maturity_col)?;
    out.set_item("node_date", node_col)?;
    out.set_item("hazard", hazard_col)?;
    out.set_item("survival", survival_col)?;
    out.set_item("status", status_col)?;
    out.set_item("recovery", recovery_col)?;
    out.set_item("iterations", iterations_col)?;
    out.set_item("detail", detail_col)?;
    out.set_item("error_curve", error_curve)?;
    out.set_item("error", error_text)?;
    Ok(out)
}

pub(crate) fn register(m: &Bound<'_, PyModule>) -> PyResult<()> {
    m.add_function(wrap_pyfunction!(bootstrap_columns, m)?)?;
    Ok(())
}
