//! Locating a table's files and reading them into typed column views.

use crate::error::{Error, Result};
use chrono::NaiveDate;
use polars::prelude::*;
use std::path::{Path, PathBuf};

/// One rejected input row: which table, which file and 1-based data row, the row's key, a
/// reason code and a sentence with the offending value.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Reject {
    pub table: &'static str,
    pub source: String,
    /// 1-based data row within the file (the header is not counted).
    pub row: u64,
    /// A short stable code, e.g. `unparseable_number`.
    pub reason: &'static str,
    pub detail: String,
    /// Key columns of the row, where they could be read.
    pub date: Option<NaiveDate>,
    pub entity: Option<String>,
    /// The rest of the key (tenor, currency, bond, grade, ...), as text.
    pub key: String,
}

impl Reject {
    pub fn new(table: &'static str, source: &str, row: u64, reason: &'static str, detail: String) -> Reject {
        Reject { table, source: source.to_string(), row, reason, detail, date: None, entity: None, key: String::new() }
    }
}

/// A value as read, before it is interpreted.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Cell<'a> {
    Null,
    Str(&'a str),
    /// A number as stored (NaN and infinities included: they are refused when read as a
    /// number, as the same text is in a CSV file).
    Num(f64),
    Date(NaiveDate),
    /// A stored date no calendar date matches (days from 1970-01-01).
    DateOutOfRange(i64),
}

impl<'a> Cell<'a> {
    /// The raw value as text, for messages.
    pub fn show(&self) -> String {
        match self {
            Cell::Null => "(empty)".to_string(),
            Cell::Str(s) => format!("{s:?}"),
            Cell::Num(v) => format!("{v}"),
            Cell::Date(d) => d.to_string(),
            Cell::DateOutOfRange(n) => format!("a date {n} days from 1970-01-01, out of range"),
        }
    }

    /// A finite number, from a numeric column or a text cell. `None` for empty; `Err` for text
    /// that is not a number, and for NaN or an infinity however it is stored.
    pub fn number(&self) -> std::result::Result<Option<f64>, ()> {
        let finite = |v: f64| if v.is_finite() { Ok(Some(v)) } else { Err(()) };
        match *self {
            Cell::Null => Ok(None),
            Cell::Num(v) => finite(v),
            Cell::Str(s) => {
                let t = s.trim();
                if t.is_empty() {
                    Ok(None)
                } else {
                    t.parse::<f64>().map_err(|_| ()).and_then(finite)
                }
            }
            Cell::Date(_) | Cell::DateOutOfRange(_) => Err(()),
        }
    }

    /// A date, from a Parquet date column or ISO text.
    pub fn date(&self) -> std::result::Result<Option<NaiveDate>, ()> {
        match *self {
            Cell::Null => Ok(None),
            Cell::Date(d) => Ok(Some(d)),
            Cell::Str(s) if s.trim().is_empty() => Ok(None),
            Cell::Str(s) => crate::time::parse_iso_date(s).map(Some).ok_or(()),
            Cell::Num(_) | Cell::DateOutOfRange(_) => Err(()),
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
            Cell::DateOutOfRange(n) => Some(format!("{n} days from 1970-01-01")),
        }
    }
}

/// One column of one file, held in a form rows can be read from directly.
enum Values {
    Str(StringChunked),
    F64(Float64Chunked),
    Date(Int32Chunked),
    /// A value taken from a hive partition folder name (`date=2021-03-31/`).
    Const(String),
    Absent,
}

/// One batch of rows of one file of a table, with the columns a reader asked for.
pub struct RawFile {
    pub path: PathBuf,
    pub height: usize,
    /// 0-based row of the file where this batch starts.
    pub row_offset: usize,
    columns: Vec<(String, Values)>,
}

/// Days from 0001-01-01 (chrono's CE day 1) to 1970-01-01, polars' date epoch.
const EPOCH_CE_DAYS: i32 = 719_163;

impl RawFile {
    /// Reads the cell of `column` at 0-based `row`.
    pub fn cell(&self, column: usize, row: usize) -> Cell<'_> {
        match &self.columns[column].1 {
            Values::Str(ca) => ca.get(row).map_or(Cell::Null, Cell::Str),
            Values::F64(ca) => ca.get(row).map_or(Cell::Null, Cell::Num),
            Values::Date(ca) => ca.get(row).map_or(Cell::Null, |d| {
                d.checked_add(EPOCH_CE_DAYS)
                    .and_then(NaiveDate::from_num_days_from_ce_opt)
                    .map_or(Cell::DateOutOfRange(i64::from(d)), Cell::Date)
            }),
            Values::Const(v) => Cell::Str(v),
            Values::Absent => Cell::Null,
        }
    }

    /// 1-based data row in the file of the batch's `i`-th row.
    pub fn file_row(&self, i: usize) -> u64 {
        (self.row_offset + i) as u64 + 1
    }

    pub fn has_column(&self, column: usize) -> bool {
        !matches!(self.columns[column].1, Values::Absent)
    }

    pub fn source(&self) -> String {
        self.path.display().to_string()
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
///
/// Links inside the folder are followed once: a link that leads back to a folder already on
/// the walk (a loop), or to a folder or file already reached by another way, stops the read
/// with an error naming the link and where it leads, since reading it again would count the
/// same rows twice.
pub fn table_files(path: &Path) -> Result<Vec<PathBuf>> {
    if path.is_file() {
        return Ok(vec![path.to_path_buf()]);
    }
    if !path.is_dir() {
        return Err(Error::NotFound { path: path.to_path_buf() });
    }
    let folder_error = |dir: &Path, e: std::io::Error| Error::Read {
        path: dir.to_path_buf(),
        format: "folder",
        message: e.to_string(),
    };
    let real = |p: &Path| std::fs::canonicalize(p).map_err(|e| folder_error(p, e));
    // Where each real folder and file was first reached, to name both ways in the message.
    let mut reached: std::collections::HashMap<PathBuf, PathBuf> = std::collections::HashMap::new();
    reached.insert(real(path)?, path.to_path_buf());
    let mut out = Vec::new();
    let mut stack = vec![path.to_path_buf()];
    while let Some(dir) = stack.pop() {
        let entries = std::fs::read_dir(&dir).map_err(|e| folder_error(&dir, e))?;
        for entry in entries {
            let p = entry.map_err(|e| folder_error(&dir, e))?.path();
            let is_dir = p.is_dir();
            let wanted = is_dir || matches!(extension(&p).as_deref(), Some("csv") | Some("parquet"));
            if !wanted {
                continue;
            }
            let target = real(&p)?;
            if let Some(first) = reached.get(&target) {
                return Err(Error::Read {
                    path: p.clone(),
                    format: "folder",
                    message: format!(
                        "this link leads to {}, which the read of {} already reached as {}; a link \
                         may lead into the input folder only once (remove it or the loop)",
                        target.display(),
                        path.display(),
                        first.display()
                    ),
                });
            }
            reached.insert(target, p.clone());
            if is_dir {
                stack.push(p);
            } else {
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

/// The table reader's message, short: its first line, at most [`MESSAGE_CHARS`] characters. A
/// malformed file can make the reader quote a large part of it, and its later lines suggest
/// the reader's own options, which mean nothing to a user of this tool.
fn reader_message(e: &dyn std::fmt::Display) -> String {
    let text = e.to_string();
    let first = text.lines().find(|l| !l.trim().is_empty()).unwrap_or("").trim();
    if first.chars().count() > MESSAGE_CHARS || text.trim() != first {
        let cut: String = first.chars().take(MESSAGE_CHARS).collect();
        format!("{cut} [the reader's message, shortened]")
    } else {
        first.to_string()
    }
}

/// Runs a call of the table reader on `path`, turning its error, and a panic of the reader on
/// a damaged file (found by the mutated-file property test), into an error naming the file.
fn guarded<T>(path: &Path, format: &'static str, read: impl FnOnce() -> PolarsResult<T>) -> Result<T> {
    match std::panic::catch_unwind(std::panic::AssertUnwindSafe(read)) {
        Ok(Ok(v)) => Ok(v),
        Ok(Err(e)) => Err(Error::Read { path: path.to_path_buf(), format, message: reader_message(&e) }),
        Err(_) => Err(Error::Read {
            path: path.to_path_buf(),
            format,
            message: "the file is damaged: the reader stopped inside it (see the reader's panic message above)".into(),
        }),
    }
}

/// Where a CSV file the reader refused goes wrong, found by a scan of its bytes that follows the
/// quoting rules (RFC 4180: a field that starts with `"` runs to the next lone `"`; `""` inside
/// is one quote): the line and field of a quote that is never closed, or the first record with
/// more fields than the header (a record with fewer is read, its missing cells rejected row by
/// row). `None` when the scan finds neither, and the reader's own message stands.
fn csv_fault(bytes: &[u8]) -> Option<String> {
    let mut header: Vec<String> = Vec::new();
    let mut field = Vec::new();
    let (mut line, mut record_line, mut fields) = (1usize, 1usize, 0usize);
    let (mut in_quotes, mut at_field_start, mut blank) = (false, true, true);
    let mut quote_at = (0usize, 0usize);
    // A header name is shown short and escaped: it comes from the file.
    let name = |header: &[String], k: usize| {
        header
            .get(k - 1)
            .map(|n| format!(" (`{}`)", n.chars().take(60).collect::<String>().escape_debug()))
            .unwrap_or_default()
    };
    let mut i = 0;
    while i <= bytes.len() {
        let b = bytes.get(i).copied();
        i += 1;
        if in_quotes {
            match b {
                Some(b'"') if bytes.get(i) == Some(&b'"') => i += 1,
                Some(b'"') => in_quotes = false,
                Some(b'\n') => line += 1,
                Some(c) if record_line == 1 => field.push(c),
                Some(_) => {}
                None => {
                    let (l, k) = quote_at;
                    return Some(format!(
                        "line {l}, field {k}{}: a quote opens here and is never closed",
                        name(&header, k)
                    ));
                }
            }
            continue;
        }
        match b {
            Some(b'"') if at_field_start => {
                in_quotes = true;
                quote_at = (line, fields + 1);
                at_field_start = false;
                blank = false;
            }
            Some(b',') => {
                if record_line == 1 {
                    header.push(String::from_utf8_lossy(&field).trim().to_string());
                    field.clear();
                }
                fields += 1;
                at_field_start = true;
                blank = false;
            }
            Some(b'\n') | None => {
                if record_line == 1 {
                    header.push(String::from_utf8_lossy(&field).trim().to_string());
                }
                if !blank && record_line > 1 && fields + 1 > header.len() {
                    return Some(format!(
                        "line {record_line}: {} fields where the header has {}; the extra ones start at field {}",
                        fields + 1,
                        header.len(),
                        header.len() + 1
                    ));
                }
                // The end of the file: nothing found.
                b?;
                line += 1;
                (record_line, fields, at_field_start, blank) = (line, 0, true, true);
                field.clear();
            }
            Some(b'\r') => {}
            Some(c) => {
                if record_line == 1 {
                    field.push(c);
                }
                at_field_start = false;
                blank = false;
            }
        }
    }
    None
}

/// The longest part of a reader's message shown.
const MESSAGE_CHARS: usize = 240;

/// A table file's format, from its extension; a Parquet file's footer is checked first.
fn format_of(path: &Path) -> Result<&'static str> {
    match extension(path).as_deref() {
        Some("csv") => Ok("CSV"),
        Some("parquet") => {
            // The file's footer is read here first, on this thread, where a reader that stops on a
            // damaged footer can be caught; the reader reads it again on its own threads, where
            // such a stop would end the process.
            super::parquet_check::check_parquet(path).map_err(|message| Error::Read {
                path: path.to_path_buf(),
                format: "Parquet",
                message,
            })?;
            Ok("Parquet")
        }
        _ => Err(Error::UnknownFormat { path: path.to_path_buf() }),
    }
}

/// The CSV reader's options: every column as text (numbers and dates are parsed by the
/// readers, so that one bad cell rejects one row instead of failing the file).
fn csv_options() -> CsvReadOptions {
    CsvReadOptions::default().with_infer_schema_length(Some(0)).with_has_header(true)
}

/// A CSV reader's refusal with the place in the file where it goes wrong: the reader's message
/// on a malformed CSV file names no line, a scan of the file finds it (read again only on this
/// error path).
fn located(e: Error) -> Error {
    match e {
        Error::Read { path, format: "CSV", message } => {
            let found = std::fs::read(&path).ok().and_then(|b| csv_fault(&b));
            Error::Read { path, format: "CSV", message: found.unwrap_or(message) }
        }
        other => other,
    }
}

/// The column names of a table file, in file order.
fn column_names(path: &Path, format: &'static str) -> Result<Vec<String>> {
    guarded(path, format, || {
        if format == "CSV" {
            let header =
                csv_options().with_n_rows(Some(0)).try_into_reader_with_file_path(Some(path.into()))?.finish()?;
            Ok(header.get_column_names().iter().map(|s| s.to_string()).collect())
        } else {
            let schema = ParquetReader::new(std::fs::File::open(path)?).schema()?;
            Ok(schema.iter_names().map(|s| s.to_string()).collect())
        }
    })
}

/// The columns `names` of a table file; of a Parquet file, `len` rows from `offset` only (the
/// row groups those rows are in).
fn read_columns(path: &Path, format: &'static str, names: &[&str], offset: usize, len: usize) -> Result<DataFrame> {
    guarded(path, format, || {
        if format == "CSV" {
            let cols: Arc<[PlSmallStr]> = names.iter().map(|n| PlSmallStr::from(*n)).collect();
            csv_options().with_columns(Some(cols)).try_into_reader_with_file_path(Some(path.into()))?.finish()
        } else {
            ParquetReader::new(std::fs::File::open(path)?)
                .with_columns(Some(names.iter().map(|n| n.to_string()).collect()))
                .with_slice(Some((offset, len)))
                .finish()
        }
    })
}

/// `name=value` folder names between the table's root and the file (hive partitioning).
fn hive_values(root: &Path, file: &Path) -> Vec<(String, String)> {
    let rel = file.strip_prefix(root).unwrap_or(file);
    rel.parent()
        .into_iter()
        .flat_map(|p| p.components())
        .filter_map(|c| c.as_os_str().to_str())
        .filter_map(|c| c.split_once('=').map(|(k, v)| (k.to_string(), v.to_string())))
        .collect()
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

/// What was read of a table, beyond its rows.
#[derive(Debug, Clone, Default)]
pub struct TableInfo {
    pub files: Vec<PathBuf>,
    pub rows: usize,
    /// Extra columns present in the files and ignored.
    pub ignored_columns: Vec<String>,
}

/// Rows per batch for Parquet files: large panels are read in slices so that memory holds one
/// batch of raw columns at a time, never the whole file.
pub const PARQUET_BATCH_ROWS: usize = 4_000_000;

/// Reads every file of a table (in sorted path order) in batches, checks its columns against
/// `specs` up front, and hands each batch to `each`.
pub fn read_table_batches(
    table: &'static str,
    path: &Path,
    specs: &[ColumnSpec],
    mut each: impl FnMut(&RawFile),
) -> Result<TableInfo> {
    let files = table_files(path)?;
    let mut info = TableInfo { files: files.clone(), ..TableInfo::default() };
    for file in files {
        let format = format_of(&file)?;
        let names = column_names(&file, format).map_err(located)?;
        // The CSV reader renames a repeated header column `x` to `x_duplicated_0`, ...: refuse
        // the file rather than read one of the copies.
        if let Some(base) = names.iter().find_map(|n| {
            n.split_once("_duplicated_")
                .filter(|(base, k)| k.parse::<usize>().is_ok() && names.iter().any(|m| m == base))
                .map(|(base, _)| base.to_string())
        }) {
            return Err(Error::Read {
                path: file.clone(),
                format,
                message: format!("column `{base}` appears more than once in the header; keep one"),
            });
        }
        let hive = if path.is_dir() { hive_values(path, &file) } else { Vec::new() };
        // Schema check before any row is read.
        let mut present: Vec<&'static str> = Vec::new();
        for spec in specs {
            let in_file = names.iter().any(|n| n == spec.name);
            let in_path = hive.iter().any(|(k, _)| k == spec.name);
            if in_file {
                present.push(spec.name);
            } else if spec.required && !in_path {
                return Err(Error::MissingColumn {
                    path: file.clone(),
                    table,
                    column: spec.name.to_string(),
                    found: names.join(", "),
                });
            }
        }
        for n in &names {
            if !specs.iter().any(|s| s.name == n) && !info.ignored_columns.contains(n) {
                info.ignored_columns.push(n.clone());
            }
        }
        let batch = if format == "Parquet" { PARQUET_BATCH_ROWS } else { usize::MAX };
        let mut offset = 0usize;
        loop {
            let frame = read_columns(&file, format, &present, offset, batch).map_err(located)?;
            let height = frame.height();
            if height == 0 && offset > 0 {
                break;
            }
            // The columns typed and made one chunk each on rayon's threads (the text columns'
            // copies are most of it); the first failing column in the specs' order is reported.
            let typed: Vec<Result<Values>> = {
                use rayon::prelude::*;
                specs
                    .par_iter()
                    .map(|spec| match frame.column(spec.name) {
                        Ok(c) => values_of(&file, table, spec, c),
                        Err(_) => Ok(match hive.iter().find(|(k, _)| k == spec.name) {
                            Some((_, v)) => Values::Const(v.clone()),
                            None => Values::Absent,
                        }),
                    })
                    .collect()
            };
            let mut columns = Vec::with_capacity(specs.len());
            for (spec, values) in specs.iter().zip(typed) {
                columns.push((spec.name.to_string(), values?));
            }
            drop(frame);
            let raw = RawFile { path: file.clone(), height, row_offset: offset, columns };
            each(&raw);
            info.rows += height;
            offset += height;
            if height < batch {
                break;
            }
        }
    }
    if !info.ignored_columns.is_empty() {
        tracing::info!(table, columns = %info.ignored_columns.join(", "), "extra columns ignored");
    }
    Ok(info)
}

/// The duplicate rule of the dated market tables (`discount`, `rate_quotes`): rows with one
/// key keep the first when every repeat carries the same value (the others are rejected as
/// `duplicate_row`), and are all rejected as `conflicting_duplicate` when the values differ.
/// `key` orders and groups the rows (ties keep input order), `same` compares two rows' values,
/// `conflict` words the conflict from the first row and the group's size, and `reject` turns a
/// dropped row into its reject. Returns the kept rows in input order.
pub(crate) fn dedupe_by_key<R, K: Ord>(
    rows: Vec<R>,
    key: impl Fn(&R) -> K,
    same: impl Fn(&R, &R) -> bool,
    conflict: impl Fn(&R, usize) -> String,
    repeats: impl Fn(&R) -> String,
    mut reject: impl FnMut(R, &'static str, String),
) -> Vec<R> {
    let mut order: Vec<usize> = (0..rows.len()).collect();
    order.sort_by(|&a, &b| (key(&rows[a]), a).cmp(&(key(&rows[b]), b)));
    let mut drop: Vec<Option<(&'static str, String)>> = vec![None; rows.len()];
    let mut i = 0;
    while i < order.len() {
        let first = &rows[order[i]];
        let mut j = i + 1;
        while j < order.len() && key(&rows[order[j]]) == key(first) {
            j += 1;
        }
        if j - i > 1 {
            let conflicting = order[i + 1..j].iter().any(|&k| !same(&rows[k], first));
            for (n, &k) in order[i..j].iter().enumerate() {
                if conflicting {
                    drop[k] = Some(("conflicting_duplicate", conflict(first, j - i)));
                } else if n > 0 {
                    drop[k] = Some(("duplicate_row", repeats(first)));
                }
            }
        }
        i = j;
    }
    let mut kept = Vec::with_capacity(rows.len());
    for (k, r) in rows.into_iter().enumerate() {
        match drop[k].take() {
            Some((reason, detail)) => reject(r, reason, detail),
            None => kept.push(r),
        }
    }
    kept
}

/// The key text of a rejected row: the given cells' texts, the empty ones left out, joined by
/// spaces.
pub(crate) fn key_text<const N: usize>(cells: [Option<String>; N]) -> String {
    cells.into_iter().flatten().collect::<Vec<_>>().join(" ")
}

#[cfg(test)]
mod tests {
    use super::csv_fault;

    #[test]
    fn csv_faults_are_located_by_line_and_field() {
        let head = "date,entity,tenor\n";
        // Clean files, short rows (read, their empty cells rejected later), blank lines, quoted
        // fields with commas, escaped quotes and line breaks: nothing to report.
        for ok in ["", "2024-01-02,A,5Y\n", "2024-01-02,A\n\n", "2024-01-02,\"A, \"\"B\"\"\nC\",5Y\r\n"] {
            assert_eq!(csv_fault(format!("{head}{ok}").as_bytes()), None, "{ok:?}");
        }
        let too_many = format!("{head}2024-01-02,A,5Y\n2024-01-03,\"A,\nB\",5Y\n2024-01-04,A,5Y,9,9");
        assert_eq!(
            csv_fault(too_many.as_bytes()).as_deref(),
            Some("line 5: 5 fields where the header has 3; the extra ones start at field 4")
        );
        let open = format!("{head}2024-01-02,A,5Y\n2024-01-02,\"A,5Y\n2024-01-03,A,5Y\n");
        assert_eq!(
            csv_fault(open.as_bytes()).as_deref(),
            Some("line 3, field 2 (`entity`): a quote opens here and is never closed")
        );
    }
}
