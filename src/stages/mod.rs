//! The stages of a run: the adapters between the core (plain structs) and the tables. Each
//! takes the ingested dataset and the checked settings, calls the core, and returns rows for
//! the tables.
//!
//! `calibrate`: discount curves and the CDS hazard bootstrap, block by block; `fits`: the
//! bond-implied curves with the CDS-bond basis, and the CIR fit; `backtest`: cohorts, buckets,
//! premia and recovery scenarios; `stability`: the curve series, the digest of the node and
//! residual rows, and the stability review; `universe`: an invented universe written as input
//! files (the demo and the self-check).
//!
//! Layer: below the run orchestration, above the configuration, the report and the tables.
//! Must not: decide where a run's files go, or parse command-line flags.

pub mod backtest;
pub mod calibrate;
pub mod fits;
pub mod stability;
pub mod universe;
