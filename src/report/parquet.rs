//! Parquet output: a small column builder with explicit types, and an atomic write (to a
//! temporary name in the same folder, then renamed) so an interrupted run never leaves a
//! half-written table that looks whole.

use crate::error::{Error, Result};
use chrono::NaiveDate;
use polars::prelude::*;
use std::path::Path;

/// Days from 0001-01-01 (chrono's CE day 1) to 1970-01-01, polars' date epoch.
const EPOCH_CE_DAYS: i32 = 719_163;

/// Builds a DataFrame column by column with the types fixed by the caller.
#[derive(Default)]
pub struct TableBuilder {
    columns: Vec<Column>,
}

impl TableBuilder {
    pub fn new() -> TableBuilder {
        TableBuilder::default()
    }

    pub fn dates(mut self, name: &str, values: impl IntoIterator<Item = Option<NaiveDate>>) -> Self {
        use chrono::Datelike;
        let days: Int32Chunked = values.into_iter().map(|d| d.map(|d| d.num_days_from_ce() - EPOCH_CE_DAYS)).collect();
        let s = days.with_name(name.into()).into_series().into_date();
        self.columns.push(s.into_column());
        self
    }

    pub fn strings<S: AsRef<str>>(mut self, name: &str, values: impl IntoIterator<Item = Option<S>>) -> Self {
        let ca: StringChunked = values.into_iter().collect();
        self.columns.push(ca.with_name(name.into()).into_column());
        self
    }

    pub fn floats(mut self, name: &str, values: impl IntoIterator<Item = Option<f64>>) -> Self {
        let ca: Float64Chunked = values.into_iter().collect();
        self.columns.push(ca.with_name(name.into()).into_column());
        self
    }

    pub fn ints(mut self, name: &str, values: impl IntoIterator<Item = Option<i64>>) -> Self {
        let ca: Int64Chunked = values.into_iter().collect();
        self.columns.push(ca.with_name(name.into()).into_column());
        self
    }

    pub fn bools(mut self, name: &str, values: impl IntoIterator<Item = Option<bool>>) -> Self {
        let ca: BooleanChunked = values.into_iter().collect();
        self.columns.push(ca.with_name(name.into()).into_column());
        self
    }

    pub fn finish(self) -> Result<DataFrame> {
        DataFrame::new_infer_height(self.columns).map_err(|e| Error::Other(format!("building a table: {e}")))
    }
}

/// Writes `df` to `path` atomically, with file-level key-value metadata (units, settings).
pub fn write_parquet(df: &mut DataFrame, path: &Path, metadata: &[(String, String)]) -> Result<()> {
    let dir = path.parent().unwrap_or(Path::new("."));
    std::fs::create_dir_all(dir).map_err(|e| Error::Write { path: dir.to_path_buf(), message: e.to_string() })?;
    let file_name = path.file_name().and_then(|n| n.to_str()).unwrap_or("table.parquet");
    let tmp = dir.join(format!(".{file_name}.{}.tmp", std::process::id()));
    let file = std::fs::File::create(&tmp).map_err(|e| Error::Write { path: tmp.clone(), message: e.to_string() })?;
    let kv = KeyValueMetadata::from_static(metadata.to_vec());
    let written = ParquetWriter::new(file)
        .with_compression(ParquetCompression::Zstd(None))
        .with_key_value_metadata(Some(kv))
        .set_parallel(false)
        .finish(df);
    if let Err(e) = written {
        let _ = std::fs::remove_file(&tmp);
        return Err(Error::Write { path: path.to_path_buf(), message: e.to_string() });
    }
    std::fs::rename(&tmp, path).map_err(|e| Error::Write { path: path.to_path_buf(), message: e.to_string() })
}
