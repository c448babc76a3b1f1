//! hazardline-core: the numerical core of hazardline, plain Rust over structs and slices.
//!
//! Time (dates, calendars, day counts, the standard CDS schedule), maths (dual numbers,
//! forward-mode gradients, root finding, least squares), curves (discount and hazard),
//! instruments (the standard CDS contract, fixed-coupon bonds), models (CIR), calibration
//! (the hazard bootstrap, repricing, the bond and CIR fits), statistics, the backtest and
//! stability reviews, and the simulator of invented universes.
//!
//! This crate depends on no table or file library and does no I/O: no files, no clock, no
//! environment, no logging. That is a compiler fact for the libraries (none is a dependency)
//! and a test for the rest (`tests/all/architecture.rs` in the application crate). The
//! application crate (`hazardline`) reads inputs, runs the stages, writes tables and reports.

pub mod backtest;
pub mod calibrate;
pub mod curves;
pub mod hash;
pub mod instruments;
pub mod math;
pub mod models;
pub mod parts;
pub mod sim;
pub mod stability;
pub mod stats;
pub mod text;
pub mod time;
