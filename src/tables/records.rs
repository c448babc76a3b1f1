//! The output tables of docs/design.md, "Output tables" that exist so far, as plain records and their
//! Parquet schemas. Column names and types here are a contract with every consumer.

use super::parquet::{write_parquet, FileKey, RowGroupWriter, SplitWriter, TableBuilder, TableWriter};
use chrono::Datelike;
use polars::prelude::DataFrame;
use crate::error::Result;
use crate::ingest::load::DataQualityRow;
use crate::ingest::{QualityFlag, Reject};
use chrono::NaiveDate;
use std::path::Path;

/// One node of a calibrated hazard curve.
#[derive(Debug, Clone, PartialEq)]
pub struct HazardCurveRow {
    pub date: NaiveDate,
    /// Shared by every row of the curve (one allocation per curve, not per node).
    pub entity: Label,
    pub currency: Label,
    /// `cds` or `bond`.
    pub source: &'static str,
    pub tenor: Label,
    /// Unadjusted contract maturity.
    pub maturity: NaiveDate,
    /// End of the flat segment (adjusted maturity + 1 day).
    pub node_date: NaiveDate,
    /// Flat hazard of the segment ending at this node, per year (Act/365F).
    pub hazard: Option<f64>,
    /// S(maturity).
    pub survival: Option<f64>,
    pub status: &'static str,
    pub recovery: f64,
    pub iterations: i64,
    pub detail: Option<String>,
}

/// A text value repeated on many rows (entity, currency, tenor): reference-counted, so the
/// rows of one curve share one allocation.
pub type Label = std::sync::Arc<str>;

/// The label of a tenor, one allocation per tenor and thread.
pub fn tenor_label(t: crate::time::Tenor) -> Label {
    thread_local! {
        static CACHE: std::cell::RefCell<std::collections::HashMap<crate::time::Tenor, Label>> = Default::default();
    }
    CACHE.with(|c| c.borrow_mut().entry(t).or_insert_with(|| t.to_string().into()).clone())
}

/// One pillar of a discount curve as used.
#[derive(Debug, Clone, PartialEq)]
pub struct DiscountCurveRow {
    pub date: NaiveDate,
    pub currency: String,
    pub pillar_date: NaiveDate,
    pub zero_rate: f64,
    pub discount_factor: f64,
}

pub fn write_discount_curves(rows: &[DiscountCurveRow], path: &Path, meta: &[(String, String)]) -> Result<()> {
    let mut df = TableBuilder::new()
        .dates("date", rows.iter().map(|r| Some(r.date)))
        .strings("currency", rows.iter().map(|r| Some(&r.currency)))
        .dates("pillar_date", rows.iter().map(|r| Some(r.pillar_date)))
        .floats("zero_rate", rows.iter().map(|r| Some(r.zero_rate)))
        .floats("discount_factor", rows.iter().map(|r| Some(r.discount_factor)))
        .finish()?;
    let mut meta = meta.to_vec();
    meta.push(("hazardline.units".into(), "zero_rate: continuously compounded, Act/365F, decimal; discount_factor to pillar_date".into()));
    write_parquet(&mut df, path, &meta)
}

/// One repriced quote.
#[derive(Debug, Clone, PartialEq)]
pub struct ResidualRow {
    pub date: NaiveDate,
    pub entity: Label,
    pub currency: Label,
    pub method: &'static str,
    pub instrument: &'static str,
    pub tenor_or_bond: Label,
    pub market: f64,
    pub model: f64,
    pub residual_bp: f64,
    pub status: &'static str,
}

fn hazard_meta(meta: &[(String, String)]) -> Vec<(String, String)> {
    let mut meta = meta.to_vec();
    meta.push(("hazardline.units".into(), "hazard: per year on Act/365F from date; survival: probability to maturity; recovery: fraction".into()));
    meta
}

/// Starts `hazard_curves` at `path`, written as its rows arrive ([`RowGroupWriter`]).
pub fn hazard_writer(path: &Path, meta: &[(String, String)]) -> Result<RowGroupWriter<HazardCurveRow>> {
    RowGroupWriter::create(path, &hazard_meta(meta), hazard_frame)
}

/// Where a `hazard_curves` row goes in the folder form: the CDS nodes first, then the bond
/// nodes, a file per year of the curve date (the table's order, see `partition::sort_hazard`).
fn hazard_key(r: &HazardCurveRow) -> FileKey {
    (1 + u8::from(r.source != "cds"), r.source, r.date.year())
}

/// Where a `calibration_residuals` row goes in the folder form: the bootstrap's first, then
/// each other method's, a file per year (the table's order, see `partition::sort_residuals`).
fn residual_key(r: &ResidualRow) -> FileKey {
    (1 + u8::from(r.method != "bootstrap"), r.method, r.date.year())
}

/// Starts `hazard_curves` in the folder `tables`: one file, `hazard_curves.parquet`, or
/// (`split`) a folder `hazard_curves/` of a file per source and year ([`SplitWriter`]).
pub fn hazard_table(tables: &Path, meta: &[(String, String)], split: bool) -> Result<TableWriter<HazardCurveRow>> {
    if split {
        SplitWriter::create(&tables.join("hazard_curves"), &hazard_meta(meta), hazard_frame, hazard_key).map(TableWriter::Split)
    } else {
        hazard_writer(&tables.join("hazard_curves.parquet"), meta).map(TableWriter::One)
    }
}

/// Starts `calibration_residuals` in the folder `tables`, as [`hazard_table`] does (a file per
/// method and year when `split`).
pub fn residual_table(tables: &Path, meta: &[(String, String)], split: bool) -> Result<TableWriter<ResidualRow>> {
    if split {
        SplitWriter::create(&tables.join("calibration_residuals"), &residual_meta(meta), residual_frame, residual_key).map(TableWriter::Split)
    } else {
        residual_writer(&tables.join("calibration_residuals.parquet"), meta).map(TableWriter::One)
    }
}

/// Writes `hazard_curves` (see [`hazard_writer`]).
pub fn write_hazard_curves(rows: &[HazardCurveRow], path: &Path, meta: &[(String, String)]) -> Result<()> {
    let mut w = hazard_writer(path, meta)?;
    w.push(rows.iter().cloned())?;
    w.finish().map(|_| ())
}

fn hazard_frame(rows: &[HazardCurveRow]) -> Result<DataFrame> {
    TableBuilder::new()
        .dates("date", rows.iter().map(|r| Some(r.date)))
        .strings("entity", rows.iter().map(|r| Some(&r.entity)))
        .strings("currency", rows.iter().map(|r| Some(&r.currency)))
        .strings("source", rows.iter().map(|r| Some(r.source)))
        .strings("tenor", rows.iter().map(|r| Some(&r.tenor)))
        .dates("maturity", rows.iter().map(|r| Some(r.maturity)))
        .dates("node_date", rows.iter().map(|r| Some(r.node_date)))
        .floats("hazard", rows.iter().map(|r| r.hazard))
        .floats("survival", rows.iter().map(|r| r.survival))
        .strings("status", rows.iter().map(|r| Some(r.status)))
        .floats("recovery", rows.iter().map(|r| Some(r.recovery)))
        .ints("iterations", rows.iter().map(|r| Some(r.iterations)))
        .strings("detail", rows.iter().map(|r| r.detail.as_deref()))
        .finish()
}

/// Starts `calibration_residuals` at `path`, written as its rows arrive ([`RowGroupWriter`]).
pub fn residual_writer(path: &Path, meta: &[(String, String)]) -> Result<RowGroupWriter<ResidualRow>> {
    RowGroupWriter::create(path, &residual_meta(meta), residual_frame)
}

fn residual_meta(meta: &[(String, String)]) -> Vec<(String, String)> {
    let mut meta = meta.to_vec();
    meta.push((
        "hazardline.units".into(),
        "market/model: par spread in bp for cds_par_spread, upfront as fraction of notional for cds_upfront; residual_bp = model - market in bp of running spread".into(),
    ));
    meta
}

/// Writes `calibration_residuals` (see [`residual_writer`]).
pub fn write_residuals(rows: &[ResidualRow], path: &Path, meta: &[(String, String)]) -> Result<()> {
    let mut w = residual_writer(path, meta)?;
    w.push(rows.iter().cloned())?;
    w.finish().map(|_| ())
}

fn residual_frame(rows: &[ResidualRow]) -> Result<DataFrame> {
    TableBuilder::new()
        .dates("date", rows.iter().map(|r| Some(r.date)))
        .strings("entity", rows.iter().map(|r| Some(&r.entity)))
        .strings("currency", rows.iter().map(|r| Some(&r.currency)))
        .strings("method", rows.iter().map(|r| Some(r.method)))
        .strings("instrument", rows.iter().map(|r| Some(r.instrument)))
        .strings("tenor_or_bond", rows.iter().map(|r| Some(&r.tenor_or_bond)))
        .floats("market", rows.iter().map(|r| Some(r.market)))
        .floats("model", rows.iter().map(|r| Some(r.model)))
        .floats("residual_bp", rows.iter().map(|r| Some(r.residual_bp)))
        .strings("status", rows.iter().map(|r| Some(r.status)))
        .finish()
}

pub fn write_rejects(rows: &[Reject], path: &Path, meta: &[(String, String)]) -> Result<()> {
    let mut df = TableBuilder::new()
        .strings("table", rows.iter().map(|r| Some(r.table)))
        .strings("source", rows.iter().map(|r| Some(&r.source)))
        .ints("row", rows.iter().map(|r| Some(r.row as i64)))
        .dates("date", rows.iter().map(|r| r.date))
        .strings("entity", rows.iter().map(|r| r.entity.as_deref()))
        .strings("key", rows.iter().map(|r| Some(&r.key)))
        .strings("reason", rows.iter().map(|r| Some(r.reason)))
        .strings("detail", rows.iter().map(|r| Some(&r.detail)))
        .finish()?;
    write_parquet(&mut df, path, meta)
}

pub fn write_data_quality(rows: &[DataQualityRow], path: &Path, meta: &[(String, String)]) -> Result<()> {
    let mut df = TableBuilder::new()
        .strings("scope", rows.iter().map(|r| Some(r.scope)))
        .strings("table", rows.iter().map(|r| Some(r.table)))
        .dates("date", rows.iter().map(|r| r.date))
        .strings("entity", rows.iter().map(|r| r.entity.as_deref()))
        .ints("rows_read", rows.iter().map(|r| Some(r.rows_read as i64)))
        .ints("rows_used", rows.iter().map(|r| Some(r.rows_used as i64)))
        .ints("rows_rejected", rows.iter().map(|r| Some(r.rows_rejected as i64)))
        .ints("rows_flagged", rows.iter().map(|r| Some(r.rows_flagged as i64)))
        .dates("first_date", rows.iter().map(|r| r.first_date))
        .dates("last_date", rows.iter().map(|r| r.last_date))
        .ints("days_quoted", rows.iter().map(|r| r.days_quoted.map(|v| v as i64)))
        .floats("coverage", rows.iter().map(|r| r.coverage))
        .ints("stale_rows", rows.iter().map(|r| r.stale_rows.map(|v| v as i64)))
        .ints("spike_rows", rows.iter().map(|r| r.spike_rows.map(|v| v as i64)))
        .finish()?;
    let mut meta = meta.to_vec();
    meta.push((
        "hazardline.scopes".into(),
        "date: per table and date; table: per table without a date column; entity: per entity of cds_quotes (coverage = days quoted / business days of the panel)".into(),
    ));
    write_parquet(&mut df, path, &meta)
}

/// Data-quality flags in the shape of the flags table (rule, severity, entity, series, period,
/// date, value, threshold, explanation), with the table, source file and row they point to.
pub fn write_quality_flags(rows: &[QualityFlag], path: &Path, meta: &[(String, String)]) -> Result<()> {
    let mut df = TableBuilder::new()
        .strings("rule", rows.iter().map(|r| Some(r.rule)))
        .strings("severity", rows.iter().map(|r| Some(r.severity)))
        .strings("entity", rows.iter().map(|r| Some(&r.entity)))
        .strings("series", rows.iter().map(|r| Some(&r.series)))
        .strings("period", rows.iter().map(|r| Some(r.date.format("%Y-%m-%d").to_string())))
        .dates("date", rows.iter().map(|r| Some(r.date)))
        .floats("value", rows.iter().map(|r| Some(r.value)))
        .floats("threshold", rows.iter().map(|r| Some(r.threshold)))
        .strings("explanation", rows.iter().map(|r| Some(&r.explanation)))
        .strings("table", rows.iter().map(|r| Some(r.table)))
        .strings("source", rows.iter().map(|r| Some(&r.source)))
        .ints("row", rows.iter().map(|r| Some(r.row as i64)))
        .finish()?;
    write_parquet(&mut df, path, meta)
}

/// One row of `intensity_params`: a CIR fit of one CDS curve.
#[derive(Debug, Clone, PartialEq)]
pub struct IntensityParamRow {
    pub date: NaiveDate,
    pub entity: String,
    pub currency: String,
    /// `free` or `fixed_kappa_sigma`.
    pub mode: &'static str,
    /// None when the fit failed.
    pub kappa: Option<f64>,
    pub theta: Option<f64>,
    pub sigma: Option<f64>,
    pub lambda0: Option<f64>,
    pub rmse_bp: Option<f64>,
    /// 2 kappa theta >= sigma^2.
    pub feller: Option<bool>,
    /// `ok`, `max_iterations` or `failed`.
    pub status: &'static str,
    pub iterations: i64,
    pub evaluations: i64,
    pub detail: Option<String>,
}

pub fn write_intensity_params(rows: &[IntensityParamRow], path: &Path, meta: &[(String, String)]) -> Result<()> {
    let mut df = TableBuilder::new()
        .dates("date", rows.iter().map(|r| Some(r.date)))
        .strings("entity", rows.iter().map(|r| Some(&r.entity)))
        .strings("currency", rows.iter().map(|r| Some(&r.currency)))
        .strings("mode", rows.iter().map(|r| Some(r.mode)))
        .floats("kappa", rows.iter().map(|r| r.kappa))
        .floats("theta", rows.iter().map(|r| r.theta))
        .floats("sigma", rows.iter().map(|r| r.sigma))
        .floats("lambda0", rows.iter().map(|r| r.lambda0))
        .floats("rmse_bp", rows.iter().map(|r| r.rmse_bp))
        .bools("feller", rows.iter().map(|r| r.feller))
        .strings("status", rows.iter().map(|r| Some(r.status)))
        .ints("iterations", rows.iter().map(|r| Some(r.iterations)))
        .ints("evaluations", rows.iter().map(|r| Some(r.evaluations)))
        .strings("detail", rows.iter().map(|r| r.detail.as_deref()))
        .finish()?;
    let mut meta = meta.to_vec();
    meta.push((
        "hazardline.units".into(),
        "CIR d lambda = kappa (theta - lambda) dt + sigma sqrt(lambda) dW: kappa per year, theta and lambda0 per year, sigma per sqrt(year); rmse_bp over the curve's quotes in bp of running spread; feller: 2 kappa theta >= sigma^2".into(),
    ));
    write_parquet(&mut df, path, &meta)
}

/// One row of `cds_bond_basis`: bond-implied against CDS-implied curve at one bond maturity.
#[derive(Debug, Clone, PartialEq)]
pub struct BasisRow {
    pub date: NaiveDate,
    pub entity: String,
    pub currency: String,
    pub maturity: NaiveDate,
    /// Act/365F years from date to maturity.
    pub time: f64,
    pub bond_average_hazard: f64,
    pub cds_average_hazard: f64,
    pub hazard_basis_bp: f64,
    pub bond_par_spread_bp: f64,
    pub cds_par_spread_bp: f64,
    pub basis_bp: f64,
}

pub fn write_basis(rows: &[BasisRow], path: &Path, meta: &[(String, String)]) -> Result<()> {
    let mut df = TableBuilder::new()
        .dates("date", rows.iter().map(|r| Some(r.date)))
        .strings("entity", rows.iter().map(|r| Some(&r.entity)))
        .strings("currency", rows.iter().map(|r| Some(&r.currency)))
        .dates("maturity", rows.iter().map(|r| Some(r.maturity)))
        .floats("time", rows.iter().map(|r| Some(r.time)))
        .floats("bond_average_hazard", rows.iter().map(|r| Some(r.bond_average_hazard)))
        .floats("cds_average_hazard", rows.iter().map(|r| Some(r.cds_average_hazard)))
        .floats("hazard_basis_bp", rows.iter().map(|r| Some(r.hazard_basis_bp)))
        .floats("bond_par_spread_bp", rows.iter().map(|r| Some(r.bond_par_spread_bp)))
        .floats("cds_par_spread_bp", rows.iter().map(|r| Some(r.cds_par_spread_bp)))
        .floats("basis_bp", rows.iter().map(|r| Some(r.basis_bp)))
        .finish()?;
    let mut meta = meta.to_vec();
    meta.push((
        "hazardline.units".into(),
        "average hazard -ln S(T) / T per year; par spreads in bp of a CDS to maturity priced on the bond-implied and on the CDS-implied curve; basis_bp = cds - bond par spread, hazard_basis_bp = cds - bond average hazard in bp".into(),
    ));
    write_parquet(&mut df, path, &meta)
}
