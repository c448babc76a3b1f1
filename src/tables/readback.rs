//! Reading the run's own tables back from Parquet, so that the report is always rendered
//! from exactly what was written (and `hazardline report RUN_DIR` can re-render it later):
//! whole frames, a table's files (one file or a folder by year), slices and row cursors of the
//! large tables, and typed cells of a column. The tables' own readers (in their homes) are
//! built on these.

use super::curves::Label;
use crate::error::{Error, Result};
use crate::text::TextForm;
use chrono::NaiveDate;
use polars::prelude::*;
use std::path::Path;

const EPOCH_CE_DAYS: i32 = 719_163;

pub fn read_frame(path: &Path) -> Result<DataFrame> {
    if path.is_dir() {
        // A table written as a folder of files: its files in the order of their names.
        let mut out: Option<DataFrame> = None;
        for f in table_files(path)? {
            let df = read_frame(&f)?;
            match &mut out {
                None => out = Some(df),
                Some(all) => {
                    all.vstack_mut(&df).map_err(|e| Error::Read {
                        path: f.clone(),
                        format: "Parquet",
                        message: e.to_string(),
                    })?;
                }
            }
        }
        return out.ok_or_else(|| Error::Read {
            path: path.to_path_buf(),
            format: "Parquet",
            message: "the table's folder holds no .parquet file".into(),
        });
    }
    std::fs::File::open(path)
        .map_err(PolarsError::from)
        .and_then(|f| ParquetReader::new(f).finish())
        .map_err(|e| Error::Read { path: path.to_path_buf(), format: "Parquet", message: e.to_string() })
}

pub(crate) fn err(path: &Path, column: &str, e: impl std::fmt::Display) -> Error {
    Error::Read { path: path.to_path_buf(), format: "Parquet", message: format!("column {column}: {e}") }
}

pub fn strs(df: &DataFrame, path: &Path, name: &str) -> Result<Vec<Option<String>>> {
    let c = df.column(name).map_err(|e| err(path, name, e))?;
    Ok(c.str().map_err(|e| err(path, name, e))?.iter().map(|v| v.map(str::to_string)).collect())
}

/// A text column as shared labels: one allocation per distinct value (entities, currencies
/// and tenors repeat on millions of rows); empty cells read as "".
pub fn labels(df: &DataFrame, path: &Path, name: &str) -> Result<Vec<Label>> {
    let c = df.column(name).map_err(|e| err(path, name, e))?;
    let mut seen: std::collections::HashMap<&str, Label> = std::collections::HashMap::new();
    Ok(c.str()
        .map_err(|e| err(path, name, e))?
        .iter()
        .map(|v| {
            let v = v.unwrap_or("");
            seen.entry(v).or_insert_with(|| Label::from(v)).clone()
        })
        .collect())
}

/// A nullable text column as shared labels (one allocation per distinct value).
pub fn opt_labels(df: &DataFrame, path: &Path, name: &str) -> Result<Vec<Option<Label>>> {
    let c = df.column(name).map_err(|e| err(path, name, e))?;
    let mut seen: std::collections::HashMap<&str, Label> = std::collections::HashMap::new();
    Ok(c.str()
        .map_err(|e| err(path, name, e))?
        .iter()
        .map(|v| v.map(|v| seen.entry(v).or_insert_with(|| Label::from(v)).clone()))
        .collect())
}

pub fn floats(df: &DataFrame, path: &Path, name: &str) -> Result<Vec<Option<f64>>> {
    let c = df.column(name).map_err(|e| err(path, name, e))?;
    Ok(c.f64().map_err(|e| err(path, name, e))?.iter().collect())
}

pub fn ints(df: &DataFrame, path: &Path, name: &str) -> Result<Vec<Option<i64>>> {
    let c = df.column(name).map_err(|e| err(path, name, e))?;
    Ok(c.i64().map_err(|e| err(path, name, e))?.iter().collect())
}

pub fn dates(df: &DataFrame, path: &Path, name: &str) -> Result<Vec<Option<NaiveDate>>> {
    let c = df.column(name).map_err(|e| err(path, name, e))?;
    let phys = c.cast(&DataType::Int32).map_err(|e| err(path, name, e))?;
    Ok(phys
        .i32()
        .map_err(|e| err(path, name, e))?
        .iter()
        .map(|v| v.and_then(|d| NaiveDate::from_num_days_from_ce_opt(d + EPOCH_CE_DAYS)))
        .collect())
}

/// A text column of a few fixed values (statuses, methods) as `'static` labels, without a
/// string built per cell (see [`label`]).
pub(crate) fn fixed_labels(
    df: &DataFrame,
    path: &Path,
    name: &str,
    known: &[&'static str],
) -> Result<Vec<&'static str>> {
    let c = df.column(name).map_err(|e| err(path, name, e))?;
    Ok(c.str().map_err(|e| err(path, name, e))?.iter().map(|v| label(v.unwrap_or(""), known)).collect())
}

/// [`fixed_labels`] of a nullable column: None where the cell is empty.
pub(crate) fn opt_fixed_labels(
    df: &DataFrame,
    path: &Path,
    name: &str,
    known: &[&'static str],
) -> Result<Vec<Option<&'static str>>> {
    let c = df.column(name).map_err(|e| err(path, name, e))?;
    Ok(c.str().map_err(|e| err(path, name, e))?.iter().map(|v| v.map(|v| label(v, known))).collect())
}

/// Interns a string read back from a table into one of the fixed labels the records use; a
/// label outside `known` is kept as read (interned once per distinct value), so reading back
/// never changes a table.
fn label(v: &str, known: &[&'static str]) -> &'static str {
    known.iter().copied().find(|k| *k == v).unwrap_or_else(|| intern(v))
}

/// A `'static` copy of `v`, one per distinct value for the life of the process.
pub fn intern(v: &str) -> &'static str {
    static SEEN: std::sync::OnceLock<std::sync::Mutex<std::collections::HashSet<&'static str>>> =
        std::sync::OnceLock::new();
    let mut seen = SEEN.get_or_init(Default::default).lock().unwrap_or_else(|e| e.into_inner());
    if let Some(s) = seen.get(v) {
        return s;
    }
    let s: &'static str = Box::leak(v.to_string().into_boxed_str());
    seen.insert(s);
    s
}

/// A text-form value (a status, a source, a zone, ...) read back from `column` at `row`; an
/// empty or unknown text is an error naming the file, the column, the row and the accepted
/// values.
pub(crate) fn text_form<T: TextForm>(v: Option<&str>, column: &str, path: &Path, row: usize) -> Result<T> {
    let v = v.unwrap_or("");
    T::from_text(v).ok_or_else(|| Error::Read {
        path: path.to_path_buf(),
        format: "Parquet",
        message: format!("column {column}, row {}: {v:?} is not one of {:?}", row + 1, T::texts()),
    })
}

/// The files of a table: the file itself, or, for a table written as a folder of files
/// ([`crate::tables::parquet::SplitWriter`]), the folder's `.parquet` files in the order of
/// their names, which is the table's order.
pub fn table_files(path: &Path) -> Result<Vec<std::path::PathBuf>> {
    if !path.is_dir() {
        return Ok(vec![path.to_path_buf()]);
    }
    let entries = std::fs::read_dir(path).map_err(|e| parquet_error(path, &e))?;
    let mut files: Vec<std::path::PathBuf> = entries
        .filter_map(|e| e.ok())
        .map(|e| e.path())
        .filter(|p| {
            p.is_file()
                && p.extension().is_some_and(|x| x == "parquet")
                && !p.file_name().is_some_and(|n| n.to_string_lossy().starts_with('.'))
        })
        .collect();
    files.sort();
    if files.is_empty() {
        return Err(Error::Read {
            path: path.to_path_buf(),
            format: "Parquet",
            message: "the table's folder holds no .parquet file".into(),
        });
    }
    Ok(files)
}

/// Where the table `name` of a run's `tables` folder is: `tables/<name>.parquet`, or the
/// folder `tables/<name>/` when the run wrote it as a folder of files.
pub fn table_path(tables: &Path, name: &str) -> std::path::PathBuf {
    let dir = tables.join(name);
    if dir.is_dir() {
        dir
    } else {
        tables.join(format!("{name}.parquet"))
    }
}

/// Rows per slice when a large table is read back piece by piece.
pub const SLICE_ROWS: usize = 1 << 20;

/// Calls `f` on consecutive slices of at most [`SLICE_ROWS`] rows of a Parquet table, so that
/// a table of tens of millions of rows is never held whole (a slice reads only the row groups
/// it covers). A table without rows gives one empty slice.
pub fn for_each_slice(path: &Path, mut f: impl FnMut(&DataFrame) -> Result<()>) -> Result<()> {
    for file in table_files(path)? {
        let n = row_count(&file)?;
        let mut offset = 0;
        loop {
            let len = SLICE_ROWS.min(n - offset);
            f(&read_slice(&file, offset, len)?)?;
            offset += len;
            if offset >= n {
                break;
            }
        }
    }
    Ok(())
}

fn parquet_error(path: &Path, e: &dyn std::fmt::Display) -> Error {
    Error::Read { path: path.to_path_buf(), format: "Parquet", message: e.to_string() }
}

/// Rows of one Parquet file, from its metadata.
pub fn rows_in_file(path: &Path) -> Result<usize> {
    row_count(path)
}

/// Rows of a Parquet table, from its metadata.
fn row_count(path: &Path) -> Result<usize> {
    let file = std::fs::File::open(path).map_err(|e| parquet_error(path, &e))?;
    ParquetReader::new(file).num_rows().map_err(|e| parquet_error(path, &e))
}

/// Rows `offset..offset + len` of a Parquet table (only the row groups they lie in are read).
fn read_slice(path: &Path, offset: usize, len: usize) -> Result<DataFrame> {
    let file = std::fs::File::open(path).map_err(|e| parquet_error(path, &e))?;
    ParquetReader::new(file).with_slice(Some((offset, len))).finish().map_err(|e| parquet_error(path, &e))
}

/// Rows per slice of a [`RowCursor`]: one row group of the tables written as their rows
/// arrive ([`crate::tables::parquet::ROW_GROUP_ROWS`]), so a slice decodes the groups it
/// covers once, and a slice of rows (about 45 MB of node rows) is small enough to hold a few.
pub const CURSOR_SLICE_ROWS: usize = crate::tables::parquet::ROW_GROUP_ROWS;

/// The rows of a large table read in order, [`CURSOR_SLICE_ROWS`] at a time, as they are asked
/// for. A thread of the cursor's own reads and decodes the next slice while the rows of the
/// one before are used (one slice ahead).
pub struct RowCursor<T> {
    slices: Option<std::sync::mpsc::Receiver<Result<Vec<T>>>>,
    reader: Option<std::thread::JoinHandle<()>>,
    buffer: std::collections::VecDeque<T>,
}

impl<T: Send + 'static> RowCursor<T> {
    fn open(path: &Path, read: fn(&DataFrame, &Path) -> Result<Vec<T>>) -> Result<Self> {
        let files = table_files(path)?;
        let counts = files.iter().map(|f| row_count(f)).collect::<Result<Vec<_>>>()?;
        let (tx, rx) = std::sync::mpsc::sync_channel::<Result<Vec<T>>>(1);
        let reader = std::thread::spawn(move || {
            for (path, rows) in files.iter().zip(counts) {
                let mut offset = 0;
                while offset < rows {
                    let len = CURSOR_SLICE_ROWS.min(rows - offset);
                    let slice = read_slice(path, offset, len).and_then(|df| read(&df, path));
                    let failed = slice.is_err();
                    // A closed channel: the cursor was dropped; nothing more is wanted.
                    if tx.send(slice).is_err() || failed {
                        return;
                    }
                    offset += len;
                }
            }
        });
        Ok(RowCursor { slices: Some(rx), reader: Some(reader), buffer: Default::default() })
    }
}

impl<T> RowCursor<T> {
    fn fill(&mut self) -> Result<()> {
        while self.buffer.is_empty() {
            let Some(rx) = &self.slices else { return Ok(()) };
            match rx.recv() {
                Ok(slice) => self.buffer.extend(slice?),
                // The reader is done: every slice was handed over (or it panicked).
                Err(_) => {
                    self.slices = None;
                    if let Some(h) = self.reader.take() {
                        h.join().map_err(|_| Error::Internal("a table's reader thread panicked".into()))?;
                    }
                }
            }
        }
        Ok(())
    }

    /// The next row, without taking it.
    pub fn peek(&mut self) -> Result<Option<&T>> {
        self.fill()?;
        Ok(self.buffer.front())
    }

    /// Takes the next row.
    pub fn next_row(&mut self) -> Result<Option<T>> {
        self.fill()?;
        Ok(self.buffer.pop_front())
    }
}

/// A table's rows, read [`CURSOR_SLICE_ROWS`] at a time as they are asked for.
pub fn cursor<T: super::Table + Send + 'static>(path: &Path) -> Result<RowCursor<T>> {
    RowCursor::open(path, super::rows_of::<T>)
}

/// Calls `f` with the rows of consecutive slices of a table, in table order.
pub fn slices<T: super::Table>(path: &Path, mut f: impl FnMut(Vec<T>) -> Result<()>) -> Result<()> {
    for_each_slice(path, |df| f(super::rows_of::<T>(df, path)?))
}

pub fn bools(df: &DataFrame, path: &Path, name: &str) -> Result<Vec<Option<bool>>> {
    let c = df.column(name).map_err(|e| err(path, name, e))?;
    Ok(c.bool().map_err(|e| err(path, name, e))?.iter().collect())
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::text::RowStatus;

    #[test]
    fn a_text_form_cell_reads_back_or_names_the_column_row_and_choices() {
        let p = Path::new("t.parquet");
        assert_eq!(text_form::<RowStatus>(Some("floored"), "status", p, 0).unwrap(), RowStatus::Floored);
        let e = text_form::<RowStatus>(Some("fine"), "status", p, 4).unwrap_err().to_string();
        assert!(
            e.contains("t.parquet")
                && e.contains("column status, row 5")
                && e.contains("\"fine\"")
                && e.contains("curve_failed"),
            "{e}"
        );
        assert!(text_form::<RowStatus>(None, "status", p, 0).is_err(), "an empty cell is not a status");
    }
}
