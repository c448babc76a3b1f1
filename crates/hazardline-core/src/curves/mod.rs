//! Term structures: the risk-free discount curve and the piecewise-flat hazard curve.
//!
//! Both live on the Actual/365 Fixed time axis from their reference date. Public methods take
//! dates or times and check them; the inner routines trust their input.

pub mod discount;
pub mod hazard;
pub mod rates;

pub use discount::{
    log_df_from_zero_rate, Compounding, DiscountCurve, DiscountCurveError, RateDayCount, ZeroRateConvention,
};
pub use hazard::{HazardCurve, HazardCurveError};

use chrono::NaiveDate;

/// Act/365F year fraction from the reference date, the common time axis of all curves.
#[inline]
pub fn year_time(reference: NaiveDate, date: NaiveDate) -> f64 {
    (date - reference).num_days() as f64 / 365.0
}
