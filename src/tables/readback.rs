//! Reading the run's own tables back from Parquet, so that the report is always rendered
//! from exactly what was written (and `hazardline report RUN_DIR` can re-render it later).

use super::records::{BasisRow, DiscountCurveRow, HazardCurveRow, IntensityParamRow, Label, ResidualRow};
use crate::error::{Error, Result};
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
                    all.vstack_mut(&df).map_err(|e| Error::Read { path: f.clone(), format: "Parquet", message: e.to_string() })?;
                }
            }
        }
        return out.ok_or_else(|| Error::Read { path: path.to_path_buf(), format: "Parquet", message: "the table's folder holds no .parquet file".into() });
    }
    let shown = path.display().to_string();
    LazyFrame::scan_parquet(PlRefPath::new(shown.as_str()), ScanArgsParquet::default())
        .and_then(|lf| lf.collect())
        .map_err(|e| Error::Read { path: path.to_path_buf(), format: "Parquet", message: e.to_string() })
}

fn err(path: &Path, column: &str, e: impl std::fmt::Display) -> Error {
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
fn fixed_labels(df: &DataFrame, path: &Path, name: &str, known: &[&'static str]) -> Result<Vec<&'static str>> {
    let c = df.column(name).map_err(|e| err(path, name, e))?;
    Ok(c.str().map_err(|e| err(path, name, e))?.iter().map(|v| label(v.unwrap_or(""), known)).collect())
}

/// Interns a string read back from a table into one of the fixed labels the records use; a
/// label outside `known` is kept as read (interned once per distinct value), so reading back
/// never changes a table.
fn label(v: &str, known: &[&'static str]) -> &'static str {
    known.iter().copied().find(|k| *k == v).unwrap_or_else(|| intern(v))
}

/// A `'static` copy of `v`, one per distinct value for the life of the process.
pub fn intern(v: &str) -> &'static str {
    static SEEN: std::sync::OnceLock<std::sync::Mutex<std::collections::HashSet<&'static str>>> = std::sync::OnceLock::new();
    let mut seen = SEEN.get_or_init(Default::default).lock().unwrap_or_else(|e| e.into_inner());
    if let Some(s) = seen.get(v) {
        return s;
    }
    let s: &'static str = Box::leak(v.to_string().into_boxed_str());
    seen.insert(s);
    s
}

/// Reads a rejects table back.
pub fn rejects(path: &Path) -> Result<Vec<crate::ingest::Reject>> {
    let df = read_frame(path)?;
    let (t, mut s, r, d, mut e, mut k, re, mut de) = (
        strs(&df, path, "table")?,
        strs(&df, path, "source")?,
        ints(&df, path, "row")?,
        dates(&df, path, "date")?,
        strs(&df, path, "entity")?,
        strs(&df, path, "key")?,
        strs(&df, path, "reason")?,
        strs(&df, path, "detail")?,
    );
    Ok((0..df.height())
        .map(|i| crate::ingest::Reject {
            table: label(t[i].as_deref().unwrap_or(""), &crate::ingest::load::INPUT_TABLES),
            source: s[i].take().unwrap_or_default(),
            row: r[i].unwrap_or_default() as u64,
            reason: intern(re[i].as_deref().unwrap_or("")),
            detail: de[i].take().unwrap_or_default(),
            date: d[i],
            entity: e[i].take(),
            key: k[i].take().unwrap_or_default(),
        })
        .collect())
}

pub const STATUSES: &[&str] = &["ok", "floored", "infeasible", "failed", "curve_failed", "not_calibrated", "at_upper_bound", "max_iterations"];

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
        .filter(|p| p.is_file() && p.extension().is_some_and(|x| x == "parquet") && !p.file_name().is_some_and(|n| n.to_string_lossy().starts_with('.')))
        .collect();
    files.sort();
    if files.is_empty() {
        return Err(Error::Read { path: path.to_path_buf(), format: "Parquet", message: "the table's folder holds no .parquet file".into() });
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

/// The rows of a large table read in order, [`SLICE_ROWS`] at a time, as they are asked for.
pub struct RowCursor<T> {
    /// The table's files still to read, next first (see [`table_files`]).
    files: std::collections::VecDeque<std::path::PathBuf>,
    rows: usize,
    offset: usize,
    read: fn(&DataFrame, &Path) -> Result<Vec<T>>,
    buffer: std::collections::VecDeque<T>,
}

impl<T> RowCursor<T> {
    fn open(path: &Path, read: fn(&DataFrame, &Path) -> Result<Vec<T>>) -> Result<Self> {
        let files: std::collections::VecDeque<_> = table_files(path)?.into();
        let rows = files.front().map(|f| row_count(f)).transpose()?.unwrap_or(0);
        Ok(RowCursor { files, rows, offset: 0, read, buffer: Default::default() })
    }

    fn fill(&mut self) -> Result<()> {
        while self.buffer.is_empty() {
            let Some(path) = self.files.front() else { return Ok(()) };
            if self.offset < self.rows {
                let len = SLICE_ROWS.min(self.rows - self.offset);
                let df = read_slice(path, self.offset, len)?;
                self.buffer.extend((self.read)(&df, path)?);
                self.offset += len;
            } else {
                self.files.pop_front();
                self.offset = 0;
                self.rows = self.files.front().map(|f| row_count(f)).transpose()?.unwrap_or(0);
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

/// A hazard_curves table's rows, read as they are asked for.
pub fn hazard_cursor(path: &Path) -> Result<RowCursor<HazardCurveRow>> {
    RowCursor::open(path, hazard_rows)
}

/// A calibration_residuals table's rows, read as they are asked for.
pub fn residual_cursor(path: &Path) -> Result<RowCursor<ResidualRow>> {
    RowCursor::open(path, residual_rows)
}

/// Reads a hazard_curves table back.
pub fn hazard_curves(path: &Path) -> Result<Vec<HazardCurveRow>> {
    hazard_rows(&read_frame(path)?, path)
}

/// Calls `f` with the rows of consecutive slices of a hazard_curves table, in table order.
pub fn hazard_curve_slices(path: &Path, mut f: impl FnMut(Vec<HazardCurveRow>) -> Result<()>) -> Result<()> {
    for_each_slice(path, |df| f(hazard_rows(df, path)?))
}

/// Calls `f` with the rows of consecutive slices of a calibration_residuals table, in table order.
pub fn residual_slices(path: &Path, mut f: impl FnMut(Vec<ResidualRow>) -> Result<()>) -> Result<()> {
    for_each_slice(path, |df| f(residual_rows(df, path)?))
}

fn hazard_rows(df: &DataFrame, path: &Path) -> Result<Vec<HazardCurveRow>> {
    let (d, e, c, src, t, m, nd, h, s, st, r, it, mut de) = (
        dates(df, path, "date")?,
        labels(df, path, "entity")?,
        labels(df, path, "currency")?,
        fixed_labels(df, path, "source", &["cds", "bond"])?,
        labels(df, path, "tenor")?,
        dates(df, path, "maturity")?,
        dates(df, path, "node_date")?,
        floats(df, path, "hazard")?,
        floats(df, path, "survival")?,
        fixed_labels(df, path, "status", STATUSES)?,
        floats(df, path, "recovery")?,
        ints(df, path, "iterations")?,
        strs(df, path, "detail")?,
    );
    Ok((0..df.height())
        .map(|i| HazardCurveRow {
            date: d[i].unwrap_or_default(),
            entity: e[i].clone(),
            currency: c[i].clone(),
            source: src[i],
            tenor: t[i].clone(),
            maturity: m[i].unwrap_or_default(),
            node_date: nd[i].unwrap_or_default(),
            hazard: h[i],
            survival: s[i],
            status: st[i],
            recovery: r[i].unwrap_or(f64::NAN),
            iterations: it[i].unwrap_or(0),
            detail: de[i].take(),
        })
        .collect())
}

/// Reads a calibration_residuals table back.
pub fn residuals(path: &Path) -> Result<Vec<ResidualRow>> {
    residual_rows(&read_frame(path)?, path)
}

fn residual_rows(df: &DataFrame, path: &Path) -> Result<Vec<ResidualRow>> {
    let (d, e, c, me, ins, t, mk, mo, r, st) = (
        dates(df, path, "date")?,
        labels(df, path, "entity")?,
        labels(df, path, "currency")?,
        fixed_labels(df, path, "method", &["bootstrap", "bond_fit", "cir"])?,
        fixed_labels(df, path, "instrument", &["cds_par_spread", "cds_upfront", "bond_price"])?,
        labels(df, path, "tenor_or_bond")?,
        floats(df, path, "market")?,
        floats(df, path, "model")?,
        floats(df, path, "residual_bp")?,
        fixed_labels(df, path, "status", STATUSES)?,
    );
    Ok((0..df.height())
        .map(|i| ResidualRow {
            date: d[i].unwrap_or_default(),
            entity: e[i].clone(),
            currency: c[i].clone(),
            method: me[i],
            instrument: ins[i],
            tenor_or_bond: t[i].clone(),
            market: mk[i].unwrap_or(f64::NAN),
            model: mo[i].unwrap_or(f64::NAN),
            residual_bp: r[i].unwrap_or(f64::NAN),
            status: st[i],
        })
        .collect())
}

pub fn discount_curves(path: &Path) -> Result<Vec<DiscountCurveRow>> {
    let df = read_frame(path)?;
    let (d, mut c, p, z, f) = (
        dates(&df, path, "date")?,
        strs(&df, path, "currency")?,
        dates(&df, path, "pillar_date")?,
        floats(&df, path, "zero_rate")?,
        floats(&df, path, "discount_factor")?,
    );
    Ok((0..df.height())
        .map(|i| DiscountCurveRow {
            date: d[i].unwrap_or_default(),
            currency: c[i].take().unwrap_or_default(),
            pillar_date: p[i].unwrap_or_default(),
            zero_rate: z[i].unwrap_or(f64::NAN),
            discount_factor: f[i].unwrap_or(f64::NAN),
        })
        .collect())
}

/// (rule, severity, entity, series, date, value, threshold, explanation, stage, period) of the
/// flags table.
pub type FlagRecord = (String, String, String, String, Option<NaiveDate>, f64, f64, String, String, String);

pub fn flags(path: &Path) -> Result<Vec<FlagRecord>> {
    let df = read_frame(path)?;
    let (mut r, mut s, mut e, mut se, d, v, t, mut x) = (
        strs(&df, path, "rule")?,
        strs(&df, path, "severity")?,
        strs(&df, path, "entity")?,
        strs(&df, path, "series")?,
        dates(&df, path, "date")?,
        floats(&df, path, "value")?,
        floats(&df, path, "threshold")?,
        strs(&df, path, "explanation")?,
    );
    let stage = if df.get_column_names().iter().any(|c| c.as_str() == "stage") { strs(&df, path, "stage")? } else { vec![Some("data_quality".to_string()); df.height()] };
    let period = strs(&df, path, "period")?;
    Ok((0..df.height())
        .map(|i| {
            (
                r[i].take().unwrap_or_default(),
                s[i].take().unwrap_or_default(),
                e[i].take().unwrap_or_default(),
                se[i].take().unwrap_or_default(),
                d[i],
                v[i].unwrap_or(f64::NAN),
                t[i].unwrap_or(f64::NAN),
                x[i].take().unwrap_or_default(),
                stage[i].clone().unwrap_or_default(),
                period[i].clone().unwrap_or_default(),
            )
        })
        .collect())
}

/// (table, reason, count) of the rejects table, most frequent first.
pub fn reject_reasons(path: &Path) -> Result<Vec<(String, String, usize)>> {
    let df = read_frame(path)?;
    let (mut t, mut r) = (strs(&df, path, "table")?, strs(&df, path, "reason")?);
    let mut m: std::collections::BTreeMap<(String, String), usize> = Default::default();
    for i in 0..df.height() {
        *m.entry((t[i].take().unwrap_or_default(), r[i].take().unwrap_or_default())).or_default() += 1;
    }
    let mut v: Vec<(String, String, usize)> = m.into_iter().map(|((a, b), c)| (a, b, c)).collect();
    v.sort_by(|a, b| b.2.cmp(&a.2).then(a.0.cmp(&b.0)).then(a.1.cmp(&b.1)));
    Ok(v)
}

pub fn bools(df: &DataFrame, path: &Path, name: &str) -> Result<Vec<Option<bool>>> {
    let c = df.column(name).map_err(|e| err(path, name, e))?;
    Ok(c.bool().map_err(|e| err(path, name, e))?.iter().collect())
}

/// The intensity_params table; empty when the run folder has none (runs before the CIR fit).
pub fn intensity_params(path: &Path) -> Result<Vec<IntensityParamRow>> {
    if !path.exists() {
        return Ok(Vec::new());
    }
    let df = read_frame(path)?;
    let (d, mut e, mut c, mo, k, th, sg, l0, rm, fe, st, it, ev, mut de) = (
        dates(&df, path, "date")?,
        strs(&df, path, "entity")?,
        strs(&df, path, "currency")?,
        strs(&df, path, "mode")?,
        floats(&df, path, "kappa")?,
        floats(&df, path, "theta")?,
        floats(&df, path, "sigma")?,
        floats(&df, path, "lambda0")?,
        floats(&df, path, "rmse_bp")?,
        bools(&df, path, "feller")?,
        strs(&df, path, "status")?,
        ints(&df, path, "iterations")?,
        ints(&df, path, "evaluations")?,
        strs(&df, path, "detail")?,
    );
    Ok((0..df.height())
        .map(|i| IntensityParamRow {
            date: d[i].unwrap_or_default(),
            entity: e[i].take().unwrap_or_default(),
            currency: c[i].take().unwrap_or_default(),
            mode: label(mo[i].as_deref().unwrap_or(""), &["free", "fixed_kappa_sigma"]),
            kappa: k[i],
            theta: th[i],
            sigma: sg[i],
            lambda0: l0[i],
            rmse_bp: rm[i],
            feller: fe[i],
            status: label(st[i].as_deref().unwrap_or(""), STATUSES),
            iterations: it[i].unwrap_or(0),
            evaluations: ev[i].unwrap_or(0),
            detail: de[i].take(),
        })
        .collect())
}

/// The cds_bond_basis table; empty when the run folder has none.
pub fn basis(path: &Path) -> Result<Vec<BasisRow>> {
    if !path.exists() {
        return Ok(Vec::new());
    }
    let df = read_frame(path)?;
    let (d, mut e, mut c, m, t, hb, hc, hbp, sb, sc, b) = (
        dates(&df, path, "date")?,
        strs(&df, path, "entity")?,
        strs(&df, path, "currency")?,
        dates(&df, path, "maturity")?,
        floats(&df, path, "time")?,
        floats(&df, path, "bond_average_hazard")?,
        floats(&df, path, "cds_average_hazard")?,
        floats(&df, path, "hazard_basis_bp")?,
        floats(&df, path, "bond_par_spread_bp")?,
        floats(&df, path, "cds_par_spread_bp")?,
        floats(&df, path, "basis_bp")?,
    );
    let f = |v: &Vec<Option<f64>>, i: usize| v[i].unwrap_or(f64::NAN);
    Ok((0..df.height())
        .map(|i| BasisRow {
            date: d[i].unwrap_or_default(),
            entity: e[i].take().unwrap_or_default(),
            currency: c[i].take().unwrap_or_default(),
            maturity: m[i].unwrap_or_default(),
            time: f(&t, i),
            bond_average_hazard: f(&hb, i),
            cds_average_hazard: f(&hc, i),
            hazard_basis_bp: f(&hbp, i),
            bond_par_spread_bp: f(&sb, i),
            cds_par_spread_bp: f(&sc, i),
            basis_bp: f(&b, i),
        })
        .collect())
}
