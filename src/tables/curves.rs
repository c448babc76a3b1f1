//! `hazard_curves`: one row per node of a calibrated hazard curve (CDS bootstrap and bond
//! fits), written as the rows arrive in fixed row groups, as one file or (large runs) a folder
//! of a file per source and year; and `discount_curves`: one row per pillar of a discount curve
//! a run built.

use super::parquet::{FileKey, RowGroupWriter, SplitWriter, TableBuilder, TableWriter};
use super::readback::{dates, fixed_labels, floats, ints, labels, opt_labels, strs, text_form};
use super::{col, metadata_of, Column, Kind::*, Table};
use crate::error::Result;
use crate::text::{CurveSource, RowStatus};
use chrono::{Datelike, NaiveDate};
use polars::prelude::DataFrame;
use std::path::Path;

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

/// One node of a calibrated hazard curve.
#[derive(Debug, Clone, PartialEq)]
pub struct HazardCurveRow {
    pub date: NaiveDate,
    /// Shared by the rows that carry it (a CDS curve's rows point at its panel's one label per
    /// entity: `CdsPanel::shared`).
    pub entity: Label,
    pub currency: Label,
    /// The tier of a CDS curve (None when the quotes give none; always None for bonds).
    pub seniority: Option<Label>,
    pub doc_clause: Option<Label>,
    pub source: CurveSource,
    pub tenor: Label,
    /// Unadjusted contract maturity.
    pub maturity: NaiveDate,
    /// End of the flat segment (adjusted maturity + 1 day).
    pub node_date: NaiveDate,
    /// Flat hazard of the segment ending at this node, per year (Act/365F).
    pub hazard: Option<f64>,
    /// S(maturity).
    pub survival: Option<f64>,
    pub status: RowStatus,
    pub recovery: f64,
    pub iterations: i64,
    pub detail: Option<String>,
}

impl Table for HazardCurveRow {
    const NAME: &'static str = "hazard_curves";
    const COLUMNS: &'static [Column] = &[
        col("date", Date),
        col("entity", Text),
        col("currency", Text),
        col("seniority", Text),
        col("doc_clause", Text),
        col("source", Text),
        col("tenor", Text),
        col("maturity", Date),
        col("node_date", Date),
        col("hazard", Float),
        col("survival", Float),
        col("status", Text),
        col("recovery", Float),
        col("iterations", Int),
        col("detail", Text),
    ];

    fn metadata() -> Vec<(String, String)> {
        vec![(
            "hazardline.units".into(),
            "hazard: per year on Act/365F from date; survival: probability to maturity; recovery: fraction".into(),
        )]
    }

    fn frame(rows: &[Self]) -> Result<DataFrame> {
        TableBuilder::new()
            .dates("date", rows.iter().map(|r| Some(r.date)))
            .strings("entity", rows.iter().map(|r| Some(&r.entity)))
            .strings("currency", rows.iter().map(|r| Some(&r.currency)))
            .strings("seniority", rows.iter().map(|r| r.seniority.as_deref()))
            .strings("doc_clause", rows.iter().map(|r| r.doc_clause.as_deref()))
            .strings("source", rows.iter().map(|r| Some(r.source.as_str())))
            .strings("tenor", rows.iter().map(|r| Some(&r.tenor)))
            .dates("maturity", rows.iter().map(|r| Some(r.maturity)))
            .dates("node_date", rows.iter().map(|r| Some(r.node_date)))
            .floats("hazard", rows.iter().map(|r| r.hazard))
            .floats("survival", rows.iter().map(|r| r.survival))
            .strings("status", rows.iter().map(|r| Some(r.status.as_str())))
            .floats("recovery", rows.iter().map(|r| Some(r.recovery)))
            .ints("iterations", rows.iter().map(|r| Some(r.iterations)))
            .strings("detail", rows.iter().map(|r| r.detail.as_deref()))
            .finish()
    }

    fn rows(df: &DataFrame, path: &Path) -> Result<Vec<Self>> {
        let (sen, doc) = (opt_labels(df, path, "seniority")?, opt_labels(df, path, "doc_clause")?);
        let (d, e, c, src, t, m, nd, h, s, st, r, it, mut de) = (
            dates(df, path, "date")?,
            labels(df, path, "entity")?,
            labels(df, path, "currency")?,
            strs(df, path, "source")?,
            labels(df, path, "tenor")?,
            dates(df, path, "maturity")?,
            dates(df, path, "node_date")?,
            floats(df, path, "hazard")?,
            floats(df, path, "survival")?,
            strs(df, path, "status")?,
            floats(df, path, "recovery")?,
            ints(df, path, "iterations")?,
            strs(df, path, "detail")?,
        );
        (0..df.height())
            .map(|i| {
                Ok(HazardCurveRow {
                    date: d[i].unwrap_or_default(),
                    entity: e[i].clone(),
                    currency: c[i].clone(),
                    seniority: sen[i].clone(),
                    doc_clause: doc[i].clone(),
                    source: text_form(src[i].as_deref(), "source", path, i)?,
                    tenor: t[i].clone(),
                    maturity: m[i].unwrap_or_default(),
                    node_date: nd[i].unwrap_or_default(),
                    hazard: h[i],
                    survival: s[i],
                    status: text_form(st[i].as_deref(), "status", path, i)?,
                    recovery: r[i].unwrap_or(f64::NAN),
                    iterations: it[i].unwrap_or(0),
                    detail: de[i].take(),
                })
            })
            .collect()
    }
}

/// The order of the `hazard_curves` table: CDS nodes first, by (date, entity, currency,
/// seniority, doc_clause), then the bond nodes by the same key; a curve's nodes keep their
/// order (a stable sort).
pub fn sort_hazard(rows: &mut [HazardCurveRow]) {
    rows.sort_by(|a, b| {
        (a.source != CurveSource::Cds, a.date, &a.entity, &a.currency, &a.seniority, &a.doc_clause).cmp(&(
            b.source != CurveSource::Cds,
            b.date,
            &b.entity,
            &b.currency,
            &b.seniority,
            &b.doc_clause,
        ))
    });
}

/// Starts `hazard_curves` at `path`, written as its rows arrive ([`RowGroupWriter`]).
pub fn hazard_writer(path: &Path, meta: &[(String, String)]) -> Result<RowGroupWriter<HazardCurveRow>> {
    RowGroupWriter::create(path, &metadata_of::<HazardCurveRow>(meta), super::framed::<HazardCurveRow>)
}

/// Where a `hazard_curves` row goes in the folder form: the CDS nodes first, then the bond
/// nodes, a file per year of the curve date (the table's order, see [`sort_hazard`]).
fn hazard_key(r: &HazardCurveRow) -> FileKey {
    (1 + u8::from(r.source != CurveSource::Cds), r.source.as_str(), r.date.year())
}

/// Starts `hazard_curves` in the folder `tables`: one file, `hazard_curves.parquet`, or
/// (`split`) a folder `hazard_curves/` of a file per source and year ([`SplitWriter`]).
pub fn hazard_table(tables: &Path, meta: &[(String, String)], split: bool) -> Result<TableWriter<HazardCurveRow>> {
    if split {
        SplitWriter::create(
            &tables.join(HazardCurveRow::NAME),
            &metadata_of::<HazardCurveRow>(meta),
            super::framed::<HazardCurveRow>,
            hazard_key,
        )
        .map(TableWriter::Split)
    } else {
        hazard_writer(&super::file_of::<HazardCurveRow>(tables), meta).map(TableWriter::One)
    }
}

/// One pillar of a discount curve as used.
#[derive(Debug, Clone, PartialEq)]
pub struct DiscountCurveRow {
    pub date: NaiveDate,
    pub currency: String,
    /// Where the curve comes from: `discount` (the discount table) or `rate_quotes` (the
    /// standard curve built from deposits and swaps).
    pub source: &'static str,
    pub pillar_date: NaiveDate,
    pub zero_rate: f64,
    pub discount_factor: f64,
}

impl Table for DiscountCurveRow {
    const NAME: &'static str = "discount_curves";
    const COLUMNS: &'static [Column] = &[
        col("date", Date),
        col("currency", Text),
        col("source", Text),
        col("pillar_date", Date),
        col("zero_rate", Float),
        col("discount_factor", Float),
    ];

    fn metadata() -> Vec<(String, String)> {
        vec![(
            "hazardline.units".into(),
            "zero_rate: continuously compounded, Act/365F, decimal; discount_factor to pillar_date".into(),
        )]
    }

    fn frame(rows: &[Self]) -> Result<DataFrame> {
        TableBuilder::new()
            .dates("date", rows.iter().map(|r| Some(r.date)))
            .strings("currency", rows.iter().map(|r| Some(&r.currency)))
            .strings("source", rows.iter().map(|r| Some(r.source)))
            .dates("pillar_date", rows.iter().map(|r| Some(r.pillar_date)))
            .floats("zero_rate", rows.iter().map(|r| Some(r.zero_rate)))
            .floats("discount_factor", rows.iter().map(|r| Some(r.discount_factor)))
            .finish()
    }

    fn rows(df: &DataFrame, path: &Path) -> Result<Vec<Self>> {
        let (d, mut c, so, p, z, f) = (
            dates(df, path, "date")?,
            strs(df, path, "currency")?,
            fixed_labels(df, path, "source", &["discount", "rate_quotes"])?,
            dates(df, path, "pillar_date")?,
            floats(df, path, "zero_rate")?,
            floats(df, path, "discount_factor")?,
        );
        Ok((0..df.height())
            .map(|i| DiscountCurveRow {
                date: d[i].unwrap_or_default(),
                currency: c[i].take().unwrap_or_default(),
                source: so[i],
                pillar_date: p[i].unwrap_or_default(),
                zero_rate: z[i].unwrap_or(f64::NAN),
                discount_factor: f[i].unwrap_or(f64::NAN),
            })
            .collect())
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::tables::testing::{refuses_a_missing_column, round_trip};

    fn node(day: u32, source: CurveSource, detail: Option<&str>) -> HazardCurveRow {
        let date = NaiveDate::from_ymd_opt(2024, 5, day).unwrap();
        HazardCurveRow {
            date,
            entity: "Alder Works".into(),
            currency: "EUR".into(),
            seniority: (source == CurveSource::Cds).then(|| "senior".into()),
            doc_clause: None,
            source,
            tenor: "5Y".into(),
            maturity: date,
            node_date: date.succ_opt().unwrap(),
            hazard: Some(0.0123),
            survival: None,
            status: RowStatus::Ok,
            recovery: 0.4,
            iterations: 3,
            detail: detail.map(str::to_string),
        }
    }

    #[test]
    fn hazard_curves_round_trip() {
        let rows = vec![node(2, CurveSource::Cds, None), node(3, CurveSource::Bond, Some("floored at zero"))];
        assert_eq!(round_trip(&rows), rows);
        refuses_a_missing_column(&rows);
    }

    #[test]
    fn discount_curves_round_trip() {
        let d = NaiveDate::from_ymd_opt(2024, 5, 2).unwrap();
        let rows = vec![DiscountCurveRow {
            date: d,
            currency: "USD".into(),
            source: "rate_quotes",
            pillar_date: d + chrono::Duration::days(365),
            zero_rate: 0.031,
            discount_factor: 0.969_47,
        }];
        assert_eq!(round_trip(&rows), rows);
        refuses_a_missing_column(&rows);
    }
}
