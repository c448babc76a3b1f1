//! Locating a table's files and reading them into typed column views.

use crate::error::{Error, Result};
use chrono::NaiveDate;
use polars::prelude::*;
use std::path::{Path, PathBuf};

/// One rejected input row: which table, which file and 1-based data row, a reason code and a
/// sentence with the offending value.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Reject {
    pub table: &'static str,
    pub source: String,
    /// 1-based data row within the file (the header is not counted).
    pub row: u64,
    /// A short stable code, e.g. `unparseable_number`.
    pub reason: &'static str,
    pub detail: String,
}

/// A value as read, before it is interpreted.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Cell<'a> {
    Null,
    Str(&'a str),
    Num(f64),
    Date(NaiveDate),
}

impl<'a> Cell<'a> {
    /// The raw value as text, for messages.
    pub fn show(&self) -> String {
        match self {
            Cell::Null => "(empty)".to_string(),
            Cell::Str(s) => format!("{s:?}"),
            Cell::Num(v) => format!("{v}"),
            Cell::Date(d) => d.to_string(),
        }
    }

    /// A number, from a numeric column or a text cell. `None` for empty; `Err` for text that
    /// is not a number.
    pub fn number(&self) -> std::result::Result<Option<f64>, ()> {
        match *self {
            Cell::Null => Ok(None),
            Cell::Num(v) => Ok(Some(v)),
            Cell::Str(s) => {
                let t = s.trim();
                if t.is_empty() {
                    Ok(None)
                } else {
                    t.parse::<f64>().map(Some).map_err(|_| ())
                }
            }
            Cell::Date(_) => Err(()),
        }
    }

    /// A date, from a Parquet date column or ISO text.
    pub fn date(&self) -> std::result::Result<Option<NaiveDate>, ()> {
        match *self {
            Cell::Null => Ok(None),
            Cell::Date(d) => Ok(Some(d)),
            Cell::Str(s) if s.trim().is_empty() => Ok(None),
            Cell::Str(s) => crate::time::parse_iso_date(s).map(Some).ok_or(()),
            Cell::Num(_) => Err(()),
        }
    }

    /// Text, from any column type.
    pub fn text(&self) -> Option<String> {
        match *self {
            Cell::Null => None,
            Cell::Str(s) if s.trim().is_empty() => None,
            Cell::Str(s) => Some(s.trim().to_string()),
            Cell::Num(v) => Some(format!("{v}")),
            Cell::Date(d) => Some(d.to_string()),
        }
    }
}

/// One column of one file, held in a form rows can be read from directly.
enum Values {
    Str(StringChunked),
    F64(Float64Chunked),
    Date(Int32Chunked),
    Absent,
}

/// One file of a table, with the columns a reader asked for.
pub struct RawFile {
    pub path: PathBuf,
    pub height: usize,
    columns: Vec<(String, Values)>,
}

/// Days from 0001-01-01 (chrono's CE day 1) to 1970-01-01, polars' date epoch.
const EPOCH_CE_DAYS: i32 = 719_163;

impl RawFile {
    /// Reads the cell of `column` at 0-based `row`.
    pub fn cell(&self, column: usize, row: usize) -> Cell<'_> {
        match &self.columns[column].1 {
            Values::Str(ca) => ca.get(row).map_or(Cell::Null, Cell::Str),
            Values::F64(ca) => ca.get(row).map_or(Cell::Null, |v| if v.is_nan() { Cell::Null } else { Cell::Num(v) }),
            Values::Date(ca) => ca.get(row).map_or(Cell::Null, |d| {
                NaiveDate::from_num_days_from_ce_opt(d + EPOCH_CE_DAYS).map_or(Cell::Null, Cell::Date)
            }),
            Values::Absent => Cell::Null,
        }
    }

    pub fn has_column(&self, column: usize) -> bool {
        !matches!(self.columns[column].1, Values::Absent)
    }

    pub fn source(&self) -> String {
        self.path.display().to_string()
    }
}

/// A whole table: its files in a fixed (sorted) order.
pub struct RawTable {
    pub name: &'static str,
    pub files: Vec<RawFile>,
    /// Extra columns present in the files and ignored.
    pub ignored_columns: Vec<String>,
}

impl RawTable {
    pub fn rows(&self) -> usize {
        self.files.iter().map(|f| f.height).sum()
    }
}

/// What kind of values a column must hold.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Kind {
    Text,
    Number,
    Date,
}

/// A column a reader asks for.
#[derive(Debug, Clone, Copy)]
pub struct ColumnSpec {
    pub name: &'static str,
    pub kind: Kind,
    pub required: bool,
}

/// The files of a table: the path itself, or every .csv / .parquet file under a folder
/// (recursively, sorted by path so the order never depends on the file system).
pub fn table_files(path: &Path) -> Result<Vec<PathBuf>> {
    if path.is_file() {
        return Ok(vec![path.to_path_buf()]);
    }
    if !path.is_dir() {
        return Err(Error::NotFound { path: path.to_path_buf() });
    }
    let mut out = Vec::new();
    let mut stack = vec![path.to_path_buf()];
    while let Some(dir) = stack.pop() {
        let entries = std::fs::read_dir(&dir).map_err(|e| Error::Read { path: dir.clone(), format: "folder", message: e.to_string() })?;
        for entry in entries {
            let entry = entry.map_err(|e| Error::Read { path: dir.clone(), format: "folder", message: e.to_string() })?;
            let p = entry.path();
            if p.is_dir() {
                stack.push(p);
            } else if matches!(extension(&p).as_deref(), Some("csv") | Some("parquet")) {
                out.push(p);
            }
        }
    }
    out.sort();
    if out.is_empty() {
        return Err(Error::EmptyFolder { path: path.to_path_buf() });
    }
    Ok(out)
}

fn extension(p: &Path) -> Option<String> {
    p.extension().and_then(|e| e.to_str()).map(|e| e.to_ascii_lowercase())
}

fn read_frame(path: &Path) -> Result<DataFrame> {
    let shown = path.display().to_string();
    match extension(path).as_deref() {
        Some("csv") => {
            // Every column as text: numbers and dates are parsed by the readers, so that one
            // bad cell rejects one row instead of failing the file.
            LazyCsvReader::new(PlRefPath::new(shown.as_str()))
                .with_infer_schema_length(Some(0))
                .with_has_header(true)
                .finish()
                .and_then(|lf| lf.collect())
                .map_err(|e| Error::Read { path: path.to_path_buf(), format: "CSV", message: e.to_string() })
        }
        Some("parquet") => LazyFrame::scan_parquet(PlRefPath::new(shown.as_str()), ScanArgsParquet::default())
            .and_then(|lf| lf.collect())
            .map_err(|e| Error::Read { path: path.to_path_buf(), format: "Parquet", message: e.to_string() }),
        _ => Err(Error::UnknownFormat { path: path.to_path_buf() }),
    }
}

fn expected(kind: Kind) -> &'static str {
    match kind {
        Kind::Text => "text",
        Kind::Number => "a number (or text holding one)",
        Kind::Date => "a date (or ISO yyyy-mm-dd text)",
    }
}

fn values_of(path: &Path, table: &'static str, spec: &ColumnSpec, col: &Column) -> Result<Values> {
    let dt = col.dtype().clone();
    let type_error = || Error::ColumnType {
        path: path.to_path_buf(),
        table,
        column: spec.name.to_string(),
        found: format!("{dt}"),
        expected: expected(spec.kind),
    };
    let as_str = |c: &Column| -> Result<Values> {
        let s = c.cast(&DataType::String).map_err(|_| type_error())?;
        Ok(Values::Str(s.str().map_err(|_| type_error())?.rechunk().into_owned()))
    };
    match (&dt, spec.kind) {
        (DataType::String, _) => Ok(Values::Str(col.str().map_err(|_| type_error())?.rechunk().into_owned())),
        (DataType::Null, _) => Ok(Values::Absent),
        (DataType::Date, Kind::Date) => {
            let phys = col.cast(&DataType::Int32).map_err(|_| type_error())?;
            Ok(Values::Date(phys.i32().map_err(|_| type_error())?.rechunk().into_owned()))
        }
        (DataType::Date, Kind::Text) => as_str(col),
        (DataType::Date, Kind::Number) => Err(type_error()),
        (d, Kind::Number) if d.is_primitive_numeric() => {
            let c = col.cast(&DataType::Float64).map_err(|_| type_error())?;
            Ok(Values::F64(c.f64().map_err(|_| type_error())?.rechunk().into_owned()))
        }
        (d, Kind::Text) if d.is_primitive_numeric() => as_str(col),
        (DataType::Datetime(_, _), Kind::Date) => {
            let c = col.cast(&DataType::Date).and_then(|c| c.cast(&DataType::Int32)).map_err(|_| type_error())?;
            Ok(Values::Date(c.i32().map_err(|_| type_error())?.rechunk().into_owned()))
        }
        _ => Err(type_error()),
    }
}

/// Reads every file of a table and checks its columns against `specs`.
pub fn read_table(table: &'static str, path: &Path, specs: &[ColumnSpec]) -> Result<RawTable> {
    let files = table_files(path)?;
    let mut out = Vec::with_capacity(files.len());
    let mut ignored: Vec<String> = Vec::new();
    for file in files {
        let df = read_frame(&file)?;
        let names: Vec<String> = df.get_column_names().iter().map(|s| s.to_string()).collect();
        let mut columns = Vec::with_capacity(specs.len());
        for spec in specs {
            match df.column(spec.name) {
                Ok(col) => columns.push((spec.name.to_string(), values_of(&file, table, spec, col)?)),
                Err(_) if spec.required => {
                    return Err(Error::MissingColumn {
                        path: file.clone(),
                        table,
                        column: spec.name.to_string(),
                        found: names.join(", "),
                    })
                }
                Err(_) => columns.push((spec.name.to_string(), Values::Absent)),
            }
        }
        for n in &names {
            if !specs.iter().any(|s| s.name == n) && !ignored.contains(n) {
                ignored.push(n.clone());
            }
        }
        out.push(RawFile { path: file, height: df.height(), columns });
    }
    if !ignored.is_empty() {
        tracing::info!(table, columns = %ignored.join(", "), "extra columns ignored");
    }
    Ok(RawTable { name: table, files: out, ignored_columns: ignored })
}
