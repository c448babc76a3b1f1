//! hazardline: a validation pipeline for reduced-form (intensity) credit models.
//!
//! The numerical core ([`time`], [`curves`], [`instruments`], [`calibrate`], [`math`]) is
//! plain Rust over structs and slices: no polars, no files, no clock, no logging in inner
//! loops. Tables and file formats live at the edges ([`ingest`], [`report`]), and
//! [`commands`] wires stages for the command line.

pub mod backtest;
pub mod calibrate;
pub mod commands;
pub mod config;
pub mod curves;
pub mod error;
pub mod ingest;
pub mod instruments;
pub mod math;
pub mod models;
pub mod partition;
pub mod pipeline;
pub mod report;
pub mod sim;
pub mod stability;
pub mod stats;
pub mod time;
