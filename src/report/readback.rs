//! Reading the run's own tables back from Parquet, so that the report is always rendered
//! from exactly what was written (and `hazardline report RUN_DIR` can re-render it later).

use super::tables::{DiscountCurveRow, HazardCurveRow, ResidualRow};
use crate::error::{Error, Result};
use chrono::NaiveDate;
use polars::prelude::*;
use std::path::Path;

const EPOCH_CE_DAYS: i32 = 719_163;

pub fn read_frame(path: &Path) -> Result<DataFrame> {
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

/// Interns a string read back from a table into one of the fixed labels the records use.
fn label(v: &str, known: &[&'static str]) -> &'static str {
    known.iter().copied().find(|k| *k == v).unwrap_or("other")
}

pub const STATUSES: &[&str] = &["ok", "floored", "infeasible", "failed", "curve_failed", "not_calibrated"];

pub fn hazard_curves(path: &Path) -> Result<Vec<HazardCurveRow>> {
    let df = read_frame(path)?;
    let (d, e, c, src, t, m, nd, h, s, st, r, it, de) = (
        dates(&df, path, "date")?,
        strs(&df, path, "entity")?,
        strs(&df, path, "currency")?,
        strs(&df, path, "source")?,
        strs(&df, path, "tenor")?,
        dates(&df, path, "maturity")?,
        dates(&df, path, "node_date")?,
        floats(&df, path, "hazard")?,
        floats(&df, path, "survival")?,
        strs(&df, path, "status")?,
        floats(&df, path, "recovery")?,
        ints(&df, path, "iterations")?,
        strs(&df, path, "detail")?,
    );
    Ok((0..df.height())
        .map(|i| HazardCurveRow {
            date: d[i].unwrap_or_default(),
            entity: e[i].clone().unwrap_or_default(),
            currency: c[i].clone().unwrap_or_default(),
            source: label(src[i].as_deref().unwrap_or(""), &["cds", "bond"]),
            tenor: t[i].clone().unwrap_or_default(),
            maturity: m[i].unwrap_or_default(),
            node_date: nd[i].unwrap_or_default(),
            hazard: h[i],
            survival: s[i],
            status: label(st[i].as_deref().unwrap_or(""), STATUSES),
            recovery: r[i].unwrap_or(f64::NAN),
            iterations: it[i].unwrap_or(0),
            detail: de[i].clone(),
        })
        .collect())
}

pub fn residuals(path: &Path) -> Result<Vec<ResidualRow>> {
    let df = read_frame(path)?;
    let (d, e, c, me, ins, t, mk, mo, r, st) = (
        dates(&df, path, "date")?,
        strs(&df, path, "entity")?,
        strs(&df, path, "currency")?,
        strs(&df, path, "method")?,
        strs(&df, path, "instrument")?,
        strs(&df, path, "tenor_or_bond")?,
        floats(&df, path, "market")?,
        floats(&df, path, "model")?,
        floats(&df, path, "residual_bp")?,
        strs(&df, path, "status")?,
    );
    Ok((0..df.height())
        .map(|i| ResidualRow {
            date: d[i].unwrap_or_default(),
            entity: e[i].clone().unwrap_or_default(),
            currency: c[i].clone().unwrap_or_default(),
            method: label(me[i].as_deref().unwrap_or(""), &["bootstrap", "bond_fit", "cir"]),
            instrument: label(ins[i].as_deref().unwrap_or(""), &["cds_par_spread", "cds_upfront", "bond_price"]),
            tenor_or_bond: t[i].clone().unwrap_or_default(),
            market: mk[i].unwrap_or(f64::NAN),
            model: mo[i].unwrap_or(f64::NAN),
            residual_bp: r[i].unwrap_or(f64::NAN),
            status: label(st[i].as_deref().unwrap_or(""), STATUSES),
        })
        .collect())
}

pub fn discount_curves(path: &Path) -> Result<Vec<DiscountCurveRow>> {
    let df = read_frame(path)?;
    let (d, c, p, z, f) = (
        dates(&df, path, "date")?,
        strs(&df, path, "currency")?,
        dates(&df, path, "pillar_date")?,
        floats(&df, path, "zero_rate")?,
        floats(&df, path, "discount_factor")?,
    );
    Ok((0..df.height())
        .map(|i| DiscountCurveRow {
            date: d[i].unwrap_or_default(),
            currency: c[i].clone().unwrap_or_default(),
            pillar_date: p[i].unwrap_or_default(),
            zero_rate: z[i].unwrap_or(f64::NAN),
            discount_factor: f[i].unwrap_or(f64::NAN),
        })
        .collect())
}

/// (rule, severity, entity, series, date, value, threshold, explanation) of the flags table.
pub type FlagRecord = (String, String, String, String, Option<NaiveDate>, f64, f64, String);

pub fn flags(path: &Path) -> Result<Vec<FlagRecord>> {
    let df = read_frame(path)?;
    let (r, s, e, se, d, v, t, x) = (
        strs(&df, path, "rule")?,
        strs(&df, path, "severity")?,
        strs(&df, path, "entity")?,
        strs(&df, path, "series")?,
        dates(&df, path, "date")?,
        floats(&df, path, "value")?,
        floats(&df, path, "threshold")?,
        strs(&df, path, "explanation")?,
    );
    Ok((0..df.height())
        .map(|i| {
            (
                r[i].clone().unwrap_or_default(),
                s[i].clone().unwrap_or_default(),
                e[i].clone().unwrap_or_default(),
                se[i].clone().unwrap_or_default(),
                d[i],
                v[i].unwrap_or(f64::NAN),
                t[i].unwrap_or(f64::NAN),
                x[i].clone().unwrap_or_default(),
            )
        })
        .collect())
}

/// (table, reason, count) of the rejects table, most frequent first.
pub fn reject_reasons(path: &Path) -> Result<Vec<(String, String, usize)>> {
    let df = read_frame(path)?;
    let (t, r) = (strs(&df, path, "table")?, strs(&df, path, "reason")?);
    let mut m: std::collections::BTreeMap<(String, String), usize> = Default::default();
    for i in 0..df.height() {
        *m.entry((t[i].clone().unwrap_or_default(), r[i].clone().unwrap_or_default())).or_default() += 1;
    }
    let mut v: Vec<(String, String, usize)> = m.into_iter().map(|((a, b), c)| (a, b, c)).collect();
    v.sort_by(|a, b| b.2.cmp(&a.2).then(a.0.cmp(&b.0)).then(a.1.cmp(&b.1)));
    Ok(v)
}
