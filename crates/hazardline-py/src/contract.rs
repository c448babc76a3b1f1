//! The standard CDS contract: schedule, legs, par spread, upfront and the quoted-spread
//! conversions, CS01.

use crate::curves::{Calendar, DiscountCurve, HazardCurve};
use crate::{accrual, date, day_number, refuse, tenor};
use hazardline_core::instruments::cds::{self, quoted_spread, CdsContract, CdsLegs};
use pyo3::prelude::*;

/// The terms of a standard CDS traded on a day.
#[pyclass(frozen, module = "hazardline._core")]
#[derive(Clone)]
pub struct Contract {
    pub(crate) inner: CdsContract,
}

#[pymethods]
impl Contract {
    /// The standard contract of `tenor` (e.g. `5Y`) traded on `trade_date` (semi-annual roll).
    #[staticmethod]
    fn standard(trade_date: i32, tenor_text: &str, calendar: &Calendar) -> PyResult<Contract> {
        let inner = CdsContract::standard(date(trade_date)?, tenor(tenor_text)?, &calendar.inner).map_err(refuse)?;
        Ok(Contract { inner })
    }
    /// A contract to a given unadjusted maturity (coupons on the quarterly IMM dates).
    #[staticmethod]
    fn with_maturity(trade_date: i32, maturity: i32, calendar: &Calendar) -> PyResult<Contract> {
        let (t, m) = (date(trade_date)?, date(maturity)?);
        if m <= t {
            return Err(refuse(format!("maturity {m} is not after the trade date {t}")));
        }
        Ok(Contract { inner: CdsContract::with_maturity(t, m, &calendar.inner) })
    }
    #[getter]
    fn trade_date(&self) -> i32 {
        day_number(self.inner.trade_date)
    }
    #[getter]
    fn maturity(&self) -> i32 {
        day_number(self.inner.maturity)
    }
    #[getter]
    fn protection_start(&self) -> i32 {
        day_number(self.inner.protection_start)
    }
    #[getter]
    fn cash_settlement(&self) -> i32 {
        day_number(self.inner.cash_settlement)
    }
    /// Accrual fraction (days/360 per unit coupon) repaid to the buyer at settlement.
    #[getter]
    fn rebate_accrual(&self) -> f64 {
        self.inner.rebate_accrual()
    }
    /// (accrual_start, accrual_end, payment, accrual_days, accrual_fraction) per coupon period.
    fn schedule(&self) -> Vec<(i32, i32, i32, i64, f64)> {
        self.inner
            .periods
            .iter()
            .map(|p| {
                (
                    day_number(p.accrual_start),
                    day_number(p.accrual_end),
                    day_number(p.payment),
                    p.accrual_days,
                    p.accrual_fraction(),
                )
            })
            .collect()
    }
}

/// The legs of one contract per unit notional, before any running coupon is applied.
#[pyclass(frozen, module = "hazardline._core")]
pub struct Legs {
    inner: CdsLegs,
}

#[pymethods]
impl Legs {
    /// (1 - R) x the default-density integral, present value at the trade date.
    #[getter]
    fn protection(&self) -> f64 {
        self.inner.protection
    }
    /// Premium leg per unit running coupon (coupons paid, no accrual on default).
    #[getter]
    fn premium01(&self) -> f64 {
        self.inner.premium01
    }
    #[getter]
    fn accrual_on_default01(&self) -> f64 {
        self.inner.accrual_on_default01
    }
    /// Accrual rebate per unit coupon, undiscounted (paid at cash settlement).
    #[getter]
    fn rebate01(&self) -> f64 {
        self.inner.rebate01
    }
    #[getter]
    fn cash_settle_df(&self) -> f64 {
        self.inner.cash_settle_df
    }
    /// Clean risky annuity: premium + accrual on default - rebate discounted to the trade date.
    #[getter]
    fn risky_annuity(&self) -> f64 {
        self.inner.risky_annuity()
    }
    /// Par spread (decimal).
    #[getter]
    fn par_spread(&self) -> f64 {
        self.inner.par_spread()
    }
    /// Clean upfront at cash settlement for running coupon `coupon` (decimal), positive when the
    /// protection buyer pays.
    fn upfront(&self, coupon: f64) -> f64 {
        self.inner.upfront(coupon)
    }
    /// The running coupon an upfront implies.
    fn coupon_from_upfront(&self, upfront: f64) -> f64 {
        self.inner.coupon_from_upfront(upfront)
    }
    fn __repr__(&self) -> String {
        format!(
            "Legs(protection={}, premium01={}, accrual_on_default01={}, rebate01={}, cash_settle_df={})",
            self.inner.protection,
            self.inner.premium01,
            self.inner.accrual_on_default01,
            self.inner.rebate01,
            self.inner.cash_settle_df
        )
    }
}

fn check_recovery(recovery: f64) -> PyResult<()> {
    if (0.0..1.0).contains(&recovery) {
        Ok(())
    } else {
        Err(refuse(format!("recovery {recovery} is not valid (a fraction in [0, 1))")))
    }
}

/// The contract's legs on the curves (both referenced on its trade date).
#[pyfunction]
#[pyo3(signature = (contract, recovery, discount, hazard, accrual_variant = "published"))]
fn price_legs(
    contract: &Contract,
    recovery: f64,
    discount: &DiscountCurve,
    hazard: &HazardCurve,
    accrual_variant: &str,
) -> PyResult<Legs> {
    check_recovery(recovery)?;
    let inner = cds::price_legs(&contract.inner, recovery, &discount.inner, &hazard.inner, accrual(accrual_variant)?)
        .map_err(refuse)?;
    Ok(Legs { inner })
}

fn quoted_inputs(contract: &Contract, discount: &DiscountCurve, recovery: f64) -> PyResult<()> {
    check_recovery(recovery)?;
    if discount.inner.reference() != contract.inner.trade_date {
        return Err(refuse(format!(
            "discount curve is referenced on {}, not on the trade date {}",
            discount.inner.reference(),
            contract.inner.trade_date
        )));
    }
    Ok(())
}

/// The flat hazard at which the contract's par spread is `spread` (decimal); None when no
/// hazard up to 50 per year reaches it.
#[pyfunction]
#[pyo3(signature = (contract, spread, recovery, discount, accrual_variant = "published"))]
fn flat_hazard_of_spread(
    contract: &Contract,
    spread: f64,
    recovery: f64,
    discount: &DiscountCurve,
    accrual_variant: &str,
) -> PyResult<Option<f64>> {
    quoted_inputs(contract, discount, recovery)?;
    Ok(quoted_spread::flat_hazard_of_spread(
        &contract.inner,
        spread,
        recovery,
        &discount.inner,
        accrual(accrual_variant)?,
    ))
}

/// The upfront of a contract quoted at spread `spread` with running coupon `coupon` (the
/// quoted-spread convention: the upfront of the flat hazard whose par spread is the quote).
#[pyfunction]
#[pyo3(signature = (contract, spread, coupon, recovery, discount, accrual_variant = "published"))]
fn spread_to_upfront(
    contract: &Contract,
    spread: f64,
    coupon: f64,
    recovery: f64,
    discount: &DiscountCurve,
    accrual_variant: &str,
) -> PyResult<Option<f64>> {
    quoted_inputs(contract, discount, recovery)?;
    Ok(quoted_spread::to_upfront(&contract.inner, spread, coupon, recovery, &discount.inner, accrual(accrual_variant)?))
}

/// The quoted spread of a contract trading at `upfront` with running coupon `coupon`.
#[pyfunction]
#[pyo3(signature = (contract, upfront, coupon, recovery, discount, accrual_variant = "published"))]
fn upfront_to_spread(
    contract: &Contract,
    upfront: f64,
    coupon: f64,
    recovery: f64,
    discount: &DiscountCurve,
    accrual_variant: &str,
) -> PyResult<Option<f64>> {
    quoted_inputs(contract, discount, recovery)?;
    Ok(quoted_spread::from_upfront(
        &contract.inner,
        upfront,
        coupon,
        recovery,
        &discount.inner,
        accrual(accrual_variant)?,
    ))
}

/// CS01 of a contract quoted at `spread` (decimal) with running coupon `coupon`: the change of
/// its clean upfront (per unit notional, positive when the buyer pays more) when the quoted
/// spread rises by 1 bp, both upfronts by the quoted-spread convention.
#[pyfunction]
#[pyo3(signature = (contract, spread, coupon, recovery, discount, accrual_variant = "published"))]
fn cs01(
    contract: &Contract,
    spread: f64,
    coupon: f64,
    recovery: f64,
    discount: &DiscountCurve,
    accrual_variant: &str,
) -> PyResult<Option<f64>> {
    quoted_inputs(contract, discount, recovery)?;
    let a = accrual(accrual_variant)?;
    let up = |s| quoted_spread::to_upfront(&contract.inner, s, coupon, recovery, &discount.inner, a);
    Ok(match (up(spread), up(spread + 1e-4)) {
        (Some(base), Some(bumped)) => Some(bumped - base),
        _ => None,
    })
}

pub(crate) fn register(m: &Bound<'_, PyModule>) -> PyResult<()> {
    m.add_class::<Contract>()?;
    m.add_class::<Legs>()?;
    m.add_function(wrap_pyfunction!(price_legs, m)?)?;
    m.add_function(wrap_pyfunction!(flat_hazard_of_spread, m)?)?;
    m.add_function(wrap_pyfunction!(spread_to_upfront, m)?)?;
    m.add_function(wrap_pyfunction!(upfront_to_spread, m)?)?;
    m.add_function(wrap_pyfunction!(cs01, m)?)?;
    Ok(())
}
