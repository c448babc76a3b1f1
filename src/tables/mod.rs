//! The output tables: their records, Parquet writers and readers, and the run manifest.
//!
//! `records`: the per-curve tables' record types and writers; `parquet`: the typed column
//! builder, the atomic writer, fixed row groups, by-year folders, writer threads; `readback`:
//! the tables read back (the report, `compare` and `merge` read through it); `manifest`:
//! `manifest.json`, file hashes.
//!
//! Layer: below the report, above ingestion (whose reject and data-quality records it writes).
//! Must not: know about stages or settings beyond what a table's metadata holds.

pub mod manifest;
pub mod parquet;
pub mod readback;
pub mod records;
