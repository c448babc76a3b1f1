//! Writers: Parquet tables (explicit schemas, dates as Parquet dates, atomic rename).

pub mod parquet;
pub mod tables;
