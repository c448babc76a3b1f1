//! hazardline: a validation pipeline for reduced-form (intensity) credit models.
//!
//! The numerical core lives in the `hazardline-core` crate (no polars, no files, no clock, no
//! logging) and is re-exported here module by module, so `hazardline::time`,
//! `hazardline::calibrate` and the rest name the same items. This crate holds the application,
//! in layers that point one way (each imports only the layers below it; a test checks it):
//!
//! [`commands`] (one module per command-line verb) -> [`run`] (a single run, shards, date
//! parts, part folders, merge, self-check) -> [`stages`] (calibrate, fits, backtest, stability:
//! adapters between the core and the tables) -> [`config`] (the pipeline file and the checked
//! run settings) -> [`report`] (report.md and figures) -> [`tables`] (output tables and the
//! manifest) -> [`ingest`] (input tables, row rules, data quality) -> [`error`].

pub use hazardline_core::{
    backtest, calibrate, curves, hash, instruments, math, models, parts, sim, stability, stats, text, time,
};

pub mod commands;
pub mod config;
pub mod error;
pub mod ingest;
pub mod report;
pub mod run;
pub mod stages;
pub mod tables;
