//! Reading input tables with polars: locating the files of a table (one file, a folder, a
//! hive-partitioned folder), checking the schema, and turning columns into typed Rust vectors
//! with the source file and 1-based row of every value kept, so a row-level problem can be
//! reported exactly and counted (rows in = rows used + rows rejected).
//!
//! Invariant: this module reads and checks; it never calibrates. polars stops here: the core
//! receives plain structs.

pub mod cds;
pub mod discount;
pub mod source;

pub use source::{Cell, RawTable, Reject};
