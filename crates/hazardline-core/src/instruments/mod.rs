//! Instruments: terms of a contract and the formulas that price them on given curves.

pub mod bond;
pub mod cds;
pub(crate) mod term_lanes;

pub use cds::{AccrualIntegration, CdsContract, CdsLegs, CdsQuote};
