//! Writers: Parquet tables (explicit schemas, dates as Parquet dates, atomic rename).

pub mod charts;
pub mod manifest;
pub mod markdown;
pub mod parquet;
pub mod progress;
pub mod readback;
pub mod review;
pub mod tables;
