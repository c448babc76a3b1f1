//! The output tables: one home per table, holding its record type, its declared columns, its
//! writer and its reader side by side (the [`Table`] trait), so adding a column is a change in
//! one file; and the run manifest.
//!
//! - `curves`: `hazard_curves` (streamed in fixed row groups, or a folder by year) and
//!   `discount_curves`;
//! - `residuals`: `calibration_residuals`;
//! - `inputs`: `rejects` and `data_quality`, the accounting of the input rows;
//! - `fits`: `intensity_params` and `cds_bond_basis`;
//! - `sensitivities`: `sensitivities`, the shifts of the curves on the sensitivity dates;
//! - `backtest`: `backtest_buckets`, `backtest_hosmer_lemeshow`, `backtest_history`,
//!   `risk_premia`;
//! - `review`: `stability`, `stability_bands`, `stability_psi`, `stability_breaks`,
//!   `residual_curves`, `residual_tenors`, `residual_worst`, `residual_repricing`;
//! - `flags`: the one flags shape, written as `flags` by a run and as `quality_flags` by the
//!   `check` and `calibrate` commands;
//! - `parts`: the tables only a part folder holds (`stability_series`, `stability_market`,
//!   `stability_edges`, `backtest_members`);
//! - `parquet`: the typed column builder, the atomic writer, fixed row groups, by-year folders,
//!   writer threads; `readback`: frames, files and slices of a written table, and typed cells;
//!   `manifest`: `manifest.json`.
//!
//! Layer: below the report, above ingestion (whose reject and data-quality records it writes).
//! Must not: know about stages or settings beyond what a table's metadata holds.

pub mod backtest;
pub mod curves;
pub mod fits;
pub mod flags;
pub mod inputs;
pub mod manifest;
pub mod parquet;
pub mod parts;
pub mod readback;
pub mod residuals;
pub mod review;
pub mod sensitivities;

pub use backtest::{BucketRecord, DiscriminationRecord, HosmerLemeshowRecord, TermStructureRecord};
pub use curves::{hazard_table, hazard_writer, sort_hazard, tenor_label, DiscountCurveRow, HazardCurveRow, Label};
pub use fits::{BasisRow, IntensityParamRow};
pub use flags::FlagRecord;
pub use residuals::{
    conversion_table, residual_table, residual_writer, sort_residuals, QuoteConversion, QuoteConversionRow, ResidualRow,
};
pub use sensitivities::{sensitivity_table, sort_sensitivities, SensitivityRow};

use crate::error::{Error, Result};
use polars::prelude::{DataFrame, DataType};
use std::path::{Path, PathBuf};

/// The type of a column as written.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Kind {
    /// A Parquet DATE.
    Date,
    /// UTF-8 text.
    Text,
    /// A 64-bit float.
    Float,
    /// A 64-bit integer.
    Int,
    Bool,
}

impl Kind {
    fn dtype(self) -> DataType {
        match self {
            Kind::Date => DataType::Date,
            Kind::Text => DataType::String,
            Kind::Float => DataType::Float64,
            Kind::Int => DataType::Int64,
            Kind::Bool => DataType::Boolean,
        }
    }

    fn describe(self) -> &'static str {
        match self {
            Kind::Date => "date",
            Kind::Text => "text",
            Kind::Float => "float64",
            Kind::Int => "int64",
            Kind::Bool => "boolean",
        }
    }
}

/// A declared column: its name and type, in file order.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Column {
    pub name: &'static str,
    pub kind: Kind,
}

/// Shorthand for a column declaration.
pub const fn col(name: &'static str, kind: Kind) -> Column {
    Column { name, kind }
}

/// An output table: its file name, declared columns, writer and reader. The writer's frame
/// must carry exactly the declared columns in their order (checked on every write), and a
/// table read back must carry them (checked before any row is read).
pub trait Table: Sized {
    /// The file stem under `tables/` (or in a part folder).
    const NAME: &'static str;
    /// The columns, in file order.
    const COLUMNS: &'static [Column];
    /// Key-value metadata this table adds to the run's (units, scopes).
    fn metadata() -> Vec<(String, String)> {
        Vec::new()
    }
    /// The rows as a frame of the declared columns.
    fn frame(rows: &[Self]) -> Result<DataFrame>;
    /// The rows of a frame read back (its columns checked against the declaration).
    fn rows(df: &DataFrame, path: &Path) -> Result<Vec<Self>>;
}

/// The file of table `T` in the folder `dir`: `<dir>/<name>.parquet`.
pub fn file_of<T: Table>(dir: &Path) -> PathBuf {
    dir.join(format!("{}.parquet", T::NAME))
}

/// The run's metadata followed by the table's own.
pub fn metadata_of<T: Table>(meta: &[(String, String)]) -> Vec<(String, String)> {
    let mut all = meta.to_vec();
    all.extend(T::metadata());
    all
}

/// Writes `rows` as table `T` into the folder `dir` (atomically).
pub fn write<T: Table>(rows: &[T], dir: &Path, meta: &[(String, String)]) -> Result<()> {
    write_to(rows, &file_of::<T>(dir), meta)
}

/// A table write for [`write_all`].
pub type WriteJob<'a> = Box<dyn FnOnce() -> Result<()> + Send + 'a>;

/// Runs table writes side by side on rayon's threads (each writes its own file); the error
/// of the first failing job in `jobs`' order, if any.
pub fn write_all(jobs: Vec<WriteJob<'_>>) -> Result<()> {
    use rayon::prelude::*;
    let results: Vec<Result<()>> = jobs.into_par_iter().map(|job| job()).collect();
    results.into_iter().collect()
}

/// Writes `rows` as table `T` to the file `path` (atomically).
pub fn write_to<T: Table>(rows: &[T], path: &Path, meta: &[(String, String)]) -> Result<()> {
    let mut df = framed(rows)?;
    parquet::write_parquet(&mut df, path, &metadata_of::<T>(meta))
}

/// The frame of `rows`, checked against the declared columns.
pub fn framed<T: Table>(rows: &[T]) -> Result<DataFrame> {
    let df = T::frame(rows)?;
    check_frame::<T>(&df)?;
    Ok(df)
}

/// A frame built for table `T` carries exactly its declared columns, in order.
pub fn check_frame<T: Table>(df: &DataFrame) -> Result<()> {
    let found: Vec<(String, DataType)> = df.get_column_names().iter().map(|n| n.to_string()).zip(df.dtypes()).collect();
    let declared: Vec<(String, DataType)> = T::COLUMNS.iter().map(|c| (c.name.to_string(), c.kind.dtype())).collect();
    if found != declared {
        return Err(Error::Internal(format!(
            "table {}: the writer's columns {found:?} differ from the declared {declared:?}",
            T::NAME
        )));
    }
    Ok(())
}

/// Reads table `T` from the folder `dir` (a single file, or a folder of files by year).
pub fn read<T: Table>(dir: &Path) -> Result<Vec<T>> {
    read_from(&readback::table_path(dir, T::NAME))
}

/// Reads table `T` from `path`.
pub fn read_from<T: Table>(path: &Path) -> Result<Vec<T>> {
    let df = readback::read_frame(path)?;
    rows_of::<T>(&df, path)
}

/// The rows of a frame of table `T`, after checking that it has every declared column with
/// its declared type.
pub fn rows_of<T: Table>(df: &DataFrame, path: &Path) -> Result<Vec<T>> {
    check_columns::<T>(df, path)?;
    T::rows(df, path)
}

/// Every declared column of `T` is in `df` with its type (an empty text column read back as
/// nulls may carry another type: it is accepted when every value is null).
pub fn check_columns<T: Table>(df: &DataFrame, path: &Path) -> Result<()> {
    for c in T::COLUMNS {
        let Ok(found) = df.column(c.name) else {
            let names: Vec<String> = df.get_column_names().iter().map(|n| n.to_string()).collect();
            return Err(Error::MissingColumn {
                path: path.to_path_buf(),
                table: T::NAME,
                column: c.name.to_string(),
                found: names.join(", "),
            });
        };
        if found.dtype() != &c.kind.dtype() && found.null_count() != found.len() {
            return Err(Error::ColumnType {
                path: path.to_path_buf(),
                table: T::NAME,
                column: c.name.to_string(),
                found: found.dtype().to_string(),
                expected: c.kind.describe(),
            });
        }
    }
    Ok(())
}

#[cfg(test)]
pub(crate) mod testing {
    //! The write-then-read round trip every table's tests run.
    use super::*;

    /// Writes `rows` as table `T`, reads them back, and returns what was read; the file's
    /// columns are the declared ones.
    pub fn round_trip<T: Table>(rows: &[T]) -> Vec<T> {
        let dir = tempfile::tempdir().unwrap();
        write(rows, dir.path(), &[("hazardline.test".into(), "1".into())]).unwrap();
        let df = readback::read_frame(&file_of::<T>(dir.path())).unwrap();
        let names: Vec<&str> = df.get_column_names().iter().map(|n| n.as_str()).collect();
        let declared: Vec<&str> = T::COLUMNS.iter().map(|c| c.name).collect();
        assert_eq!(names, declared, "columns of {}", T::NAME);
        assert_eq!(df.height(), rows.len());
        read::<T>(dir.path()).unwrap()
    }

    /// A table missing a declared column is refused, naming the table and the column.
    pub fn refuses_a_missing_column<T: Table>(rows: &[T]) {
        let dir = tempfile::tempdir().unwrap();
        let mut df = T::frame(rows).unwrap();
        let last = T::COLUMNS.last().unwrap().name;
        let _ = df.drop_in_place(last).unwrap();
        let path = file_of::<T>(dir.path());
        parquet::write_parquet(&mut df, &path, &[]).unwrap();
        let e = match read_from::<T>(&path) {
            Ok(_) => panic!("a {} table without column {last} was read", T::NAME),
            Err(e) => e.to_string(),
        };
        assert!(e.contains(T::NAME) && e.contains(last), "{e}");
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Every job runs, side by side, and the error reported is that of the first failing job
    /// in the list's order, whichever finishes first.
    #[test]
    fn write_all_runs_every_job_and_reports_the_first_failure_in_order() {
        use std::sync::atomic::{AtomicUsize, Ordering};
        let ran = AtomicUsize::new(0);
        let job = |k: usize, fails: bool| -> WriteJob<'_> {
            let ran = &ran;
            Box::new(move || {
                // The later failure finishes first.
                std::thread::sleep(std::time::Duration::from_millis(if k == 1 { 30 } else { 1 }));
                ran.fetch_add(1, Ordering::SeqCst);
                if fails {
                    Err(crate::error::Error::Internal(format!("job {k}")))
                } else {
                    Ok(())
                }
            })
        };
        let got = write_all(vec![job(0, false), job(1, true), job(2, false), job(3, true)]);
        assert_eq!(ran.load(Ordering::SeqCst), 4);
        match got {
            Err(crate::error::Error::Internal(m)) => assert_eq!(m, "job 1"),
            other => panic!("{other:?}"),
        }
        assert!(write_all(vec![job(0, false), job(2, false)]).is_ok());
    }
}
