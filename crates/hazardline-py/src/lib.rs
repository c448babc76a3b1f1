//! The Python extension module `hazardline._core`: hazardline's numerical core (the standard
//! CDS contract, discount and hazard curves, the bootstrap, CIR, the backtest statistics) for
//! Python, over the core crate only (no polars, no files).
//!
//! Dates cross the boundary as days since 1970-01-01 (`i32`): the Python layer
//! (`python/hazardline/`) turns `datetime.date`, ISO strings, numpy and Arrow dates into them,
//! so that whole columns pass as one list. Every error of the core becomes a
//! `hazardline.HazardlineError` carrying the core's own message (the text the command-line tool
//! prints for the same error).

use chrono::NaiveDate;
use pyo3::create_exception;
use pyo3::exceptions::PyValueError;
use pyo3::prelude::*;

mod bootstrap;
mod cir;
mod contract;
mod curves;
mod stats;

create_exception!(
    _core,
    HazardlineError,
    PyValueError,
    "An input the hazardline core refuses; the message names the value and why."
);

/// A `HazardlineError` with `message`.
pub(crate) fn refuse(message: impl std::fmt::Display) -> PyErr {
    HazardlineError::new_err(message.to_string())
}

const EPOCH: NaiveDate = match NaiveDate::from_ymd_opt(1970, 1, 1) {
    Some(d) => d,
    None => panic!("1970-01-01 is a date"),
};

/// The date `days` after 1970-01-01.
pub(crate) fn date(days: i32) -> PyResult<NaiveDate> {
    EPOCH
        .checked_add_signed(chrono::Duration::days(i64::from(days)))
        .ok_or_else(|| refuse(format!("day number {days} is not a representable date")))
}

/// Days from 1970-01-01 to `d`.
pub(crate) fn day_number(d: NaiveDate) -> i32 {
    (d - EPOCH).num_days() as i32
}

pub(crate) fn dates(days: &[i32]) -> PyResult<Vec<NaiveDate>> {
    days.iter().map(|&d| date(d)).collect()
}

/// A tenor such as `5Y` or `6M`.
pub(crate) fn tenor(text: &str) -> PyResult<hazardline_core::time::Tenor> {
    text.parse().map_err(|e: hazardline_core::time::tenor::TenorError| refuse(e))
}

/// An accrual-on-default variant by its name in the pipeline file.
pub(crate) fn accrual(text: &str) -> PyResult<hazardline_core::instruments::AccrualIntegration> {
    hazardline_core::instruments::AccrualIntegration::parse(text)
        .ok_or_else(|| refuse(format!("accrual {text:?} is not one of published, standard, exact")))
}

#[pymodule]
fn _core(m: &Bound<'_, PyModule>) -> PyResult<()> {
    m.add("HazardlineError", m.py().get_type::<HazardlineError>())?;
    curves::register(m)?;
    contract::register(m)?;
    bootstrap::register(m)?;
    cir::register(m)?;
    stats::register(m)?;
    Ok(())
}
