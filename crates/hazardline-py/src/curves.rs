//! Calendars, discount curves and hazard curves.

use crate::{date, dates, day_number, refuse, tenor};
use hazardline_core::curves::{self as core_curves, year_time, Compounding, RateDayCount};
use hazardline_core::time::{add_months, Calendar as CoreCalendar};
use pyo3::prelude::*;

/// A business-day calendar: weekends and the given holidays (days since 1970-01-01).
#[pyclass(frozen, module = "hazardline._core")]
#[derive(Clone)]
pub struct Calendar {
    pub(crate) inner: CoreCalendar,
}

#[pymethods]
impl Calendar {
    #[new]
    #[pyo3(signature = (holidays = Vec::new()))]
    fn new(holidays: Vec<i32>) -> PyResult<Calendar> {
        Ok(Calendar { inner: CoreCalendar::with_holidays(dates(&holidays)?) })
    }
    fn holidays(&self) -> Vec<i32> {
        self.inner.holidays().iter().map(|&d| day_number(d)).collect()
    }
    fn is_business_day(&self, day: i32) -> PyResult<bool> {
        Ok(self.inner.is_business_day(date(day)?))
    }
    /// The day itself if a business day, else the next business day.
    fn following(&self, day: i32) -> PyResult<i32> {
        Ok(day_number(self.inner.following(date(day)?)))
    }
    fn add_business_days(&self, day: i32, n: i32) -> PyResult<i32> {
        Ok(day_number(self.inner.add_business_days(date(day)?, n)))
    }
}

/// A discount curve on the Act/365F axis, log-linear in the discount factor between pillars.
#[pyclass(frozen, module = "hazardline._core")]
#[derive(Clone)]
pub struct DiscountCurve {
    pub(crate) inner: core_curves::DiscountCurve,
}

fn pillar_dates(reference: i32, pillars: Vec<PillarArg>) -> PyResult<Vec<chrono::NaiveDate>> {
    let r = date(reference)?;
    pillars
        .into_iter()
        .map(|p| match p {
            PillarArg::Day(d) => date(d),
            PillarArg::Tenor(t) => Ok(add_months(r, tenor(&t)?.months() as i32)),
        })
        .collect()
}

/// A pillar given as a date (day number) or as a tenor from the reference date.
#[derive(FromPyObject)]
pub(crate) enum PillarArg {
    Day(i32),
    Tenor(String),
}

#[pymethods]
impl DiscountCurve {
    /// From pillars (tenors such as `5Y`, or day numbers), each with a zero rate or a discount
    /// factor (exactly one of `zero_rates[i]` and `factors[i]`); zero rates with their
    /// compounding (`continuous`, `annual`, `semi_annual`, `quarterly`, `simple`) and day count
    /// (`act365f`, `act360`): the computation the command-line tool makes of a discount table
    /// (each pillar's ln DF, then the curve).
    #[staticmethod]
    #[pyo3(signature = (reference, pillars, zero_rates, factors, compounding = "continuous", day_count = "act365f"))]
    fn from_pillar_values(
        reference: i32,
        pillars: Vec<PillarArg>,
        zero_rates: Vec<Option<f64>>,
        factors: Vec<Option<f64>>,
        compounding: &str,
        day_count: &str,
    ) -> PyResult<DiscountCurve> {
        let comp = Compounding::parse(compounding).ok_or_else(|| {
            refuse(format!(
                "compounding {compounding:?} is not one of continuous, annual, semi_annual, quarterly, simple"
            ))
        })?;
        let dc = RateDayCount::parse(day_count)
            .ok_or_else(|| refuse(format!("day count {day_count:?} is not one of act365f, act360")))?;
        if pillars.len() != zero_rates.len() || pillars.len() != factors.len() {
            return Err(refuse(format!(
                "{} pillars, {} zero rates and {} discount factors",
                pillars.len(),
                zero_rates.len(),
                factors.len()
            )));
        }
        let r = date(reference)?;
        let mut logs = Vec::with_capacity(pillars.len());
        for (i, p) in pillar_dates(reference, pillars)?.into_iter().enumerate() {
            let l = match (zero_rates[i], factors[i]) {
                (Some(z), None) => core_curves::log_df_from_zero_rate(r, p, z, comp, dc).ok_or_else(|| {
                    refuse(format!(
                        "zero rate {z} compounded {compounding} ({day_count}) gives no positive discount factor to {p}"
                    ))
                })?,
                (None, Some(f)) if f > 0.0 && f.is_finite() => f.ln(),
                (None, Some(f)) => {
                    return Err(refuse(format!("discount curve for {r}: discount factor {f} at {p} is not positive")))
                }
                _ => return Err(refuse(format!("pillar {i}: give exactly one of a zero rate and a discount factor"))),
            };
            logs.push((p, l));
        }
        let inner = core_curves::DiscountCurve::from_log_discount_factors(r, &logs).map_err(refuse)?;
        Ok(DiscountCurve { inner })
    }

    /// From discount factors at pillars (tenors or day numbers).
    #[staticmethod]
    fn from_discount_factors(reference: i32, pillars: Vec<PillarArg>, factors: Vec<f64>) -> PyResult<DiscountCurve> {
        if pillars.len() != factors.len() {
            return Err(refuse(format!("{} pillars but {} discount factors", pillars.len(), factors.len())));
        }
        let p: Vec<_> = pillar_dates(reference, pillars)?.into_iter().zip(factors).collect();
        let inner = core_curves::DiscountCurve::from_discount_factors(date(reference)?, &p).map_err(refuse)?;
        Ok(DiscountCurve { inner })
    }

    /// A flat continuously compounded curve.
    #[staticmethod]
    fn flat(reference: i32, rate: f64) -> PyResult<DiscountCurve> {
        if !rate.is_finite() {
            return Err(refuse(format!("rate {rate} is not a finite number")));
        }
        Ok(DiscountCurve { inner: core_curves::DiscountCurve::flat(date(reference)?, rate) })
    }

    #[getter]
    fn reference(&self) -> i32 {
        day_number(self.inner.reference())
    }
    #[getter]
    fn pillar_dates(&self) -> Vec<i32> {
        self.inner.pillar_dates().iter().map(|&d| day_number(d)).collect()
    }
    #[getter]
    fn pillar_log_dfs(&self) -> Vec<f64> {
        self.inner.pillar_log_dfs().to_vec()
    }
    fn df(&self, days: Vec<i32>) -> PyResult<Vec<f64>> {
        Ok(dates(&days)?.into_iter().map(|d| self.inner.df(d)).collect())
    }
    /// Continuously compounded Act/365F zero rates to the dates.
    fn zero_rate(&self, days: Vec<i32>) -> PyResult<Vec<f64>> {
        Ok(dates(&days)?.into_iter().map(|d| self.inner.zero_rate(d)).collect())
    }
    /// The same curve with every zero rate shifted by `bp` basis points.
    fn shifted(&self, bp: f64) -> PyResult<DiscountCurve> {
        hazardline_core::calibrate::sensitivity::shifted_discount(&self.inner, bp)
            .map(|inner| DiscountCurve { inner })
            .ok_or_else(|| refuse(format!("a shift of {bp} bp gives no valid curve")))
    }
}

/// A piecewise-flat hazard curve: hazards[k] holds up to node k (Act/365F from the reference).
#[pyclass(frozen, module = "hazardline._core")]
#[derive(Clone)]
pub struct HazardCurve {
    pub(crate) inner: core_curves::HazardCurve,
}

#[pymethods]
impl HazardCurve {
    /// From node dates (day numbers, increasing) and the hazard of the segment ending at each.
    #[new]
    fn new(reference: i32, node_dates: Vec<i32>, hazards: Vec<f64>) -> PyResult<HazardCurve> {
        if node_dates.len() != hazards.len() {
            return Err(refuse(format!("{} node dates but {} hazards", node_dates.len(), hazards.len())));
        }
        let inner =
            core_curves::HazardCurve::from_dates(date(reference)?, &dates(&node_dates)?, hazards).map_err(refuse)?;
        Ok(HazardCurve { inner })
    }
    #[staticmethod]
    fn flat(reference: i32, hazard: f64) -> PyResult<HazardCurve> {
        if !(hazard >= 0.0 && hazard.is_finite()) {
            return Err(refuse(format!("hazard {hazard} must be a finite number >= 0")));
        }
        Ok(HazardCurve { inner: core_curves::HazardCurve::flat(date(reference)?, hazard) })
    }
    #[getter]
    fn reference(&self) -> i32 {
        day_number(self.inner.reference())
    }
    #[getter]
    fn node_times(&self) -> Vec<f64> {
        self.inner.node_times().to_vec()
    }
    #[getter]
    fn hazards(&self) -> Vec<f64> {
        self.inner.hazards().to_vec()
    }
    /// Survival probabilities to the dates.
    fn survival(&self, days: Vec<i32>) -> PyResult<Vec<f64>> {
        Ok(dates(&days)?.into_iter().map(|d| self.inner.survival(d)).collect())
    }
    /// The hazard rate in force on each date (the segment holding its Act/365F time).
    fn hazard(&self, days: Vec<i32>) -> PyResult<Vec<f64>> {
        let r = self.inner.reference();
        Ok(dates(&days)?.into_iter().map(|d| self.inner.hazard_at(year_time(r, d))).collect())
    }
    /// Survival at Act/365F times from the reference date.
    fn survival_at(&self, times: Vec<f64>) -> Vec<f64> {
        times.into_iter().map(|t| self.inner.survival_at(t)).collect()
    }
    fn hazard_at(&self, times: Vec<f64>) -> Vec<f64> {
        times.into_iter().map(|t| self.inner.hazard_at(t)).collect()
    }
}

pub(crate) fn register(m: &Bound<'_, PyModule>) -> PyResult<()> {
    m.add_class::<Calendar>()?;
    m.add_class::<DiscountCurve>()?;
    m.add_class::<HazardCurve>()?;
    Ok(())
}
