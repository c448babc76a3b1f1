//! `calibration_residuals`: one row per repriced quote (model minus market), from the CDS
//! bootstrap, the bond fits and the CIR fits; written as the rows arrive in fixed row groups,
//! as one file or (large runs) a folder of a file per method and year.

use super::parquet::{FileKey, RowGroupWriter, SplitWriter, TableBuilder, TableWriter};
use super::readback::{dates, fixed_labels, floats, labels, opt_fixed_labels, opt_labels, strs, text_form};
use super::{col, curves::Label, metadata_of, Column, Kind::*, Table};
use crate::error::Result;
use crate::text::{FitMethod, RowStatus};
use chrono::{Datelike, NaiveDate};
use polars::prelude::DataFrame;
use std::path::Path;

/// The instruments a residual can be of.
pub const INSTRUMENTS: &[&str] = &["cds_par_spread", "cds_upfront", "bond_price"];

/// One repriced quote.
#[derive(Debug, Clone, PartialEq)]
pub struct ResidualRow {
    pub date: NaiveDate,
    pub entity: Label,
    pub currency: Label,
    /// The tier of a CDS curve (None when the quotes give none; always None for bonds).
    pub seniority: Option<Label>,
    pub doc_clause: Option<Label>,
    pub method: FitMethod,
    /// One of [`INSTRUMENTS`].
    pub instrument: &'static str,
    pub tenor_or_bond: Label,
    pub market: f64,
    pub model: f64,
    pub residual_bp: f64,
    pub status: RowStatus,
    /// The quote conversions of a bootstrap row (None on other rows, and on a row whose
    /// quote was not calibrated): the quote type as given, the currency's standard coupon,
    /// and on the calibrated curve the par spread, the upfront at the standard coupon and
    /// the quoted spread (the par spread of the flat hazard that gives that upfront).
    pub conversion: Option<QuoteConversion>,
}

/// One quote in the three conventions (see [`ResidualRow::conversion`]).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct QuoteConversion {
    /// `par_spread`, `quoted_spread` or `upfront`.
    pub quote_type: &'static str,
    pub standard_coupon_bp: f64,
    pub par_spread_bp: f64,
    pub standard_upfront: f64,
    /// None when no flat hazard gives the upfront (one below the zero-hazard value).
    pub quoted_spread_bp: Option<f64>,
}

/// The quote types a conversion names.
pub const QUOTE_TYPES: &[&str] = &["par_spread", "quoted_spread", "upfront"];

/// The five conversion columns, shared by `calibration_residuals` and `cds_quote_conversions`
/// (empty where a row has none).
fn with_conversions<'a>(b: TableBuilder, c: impl Iterator<Item = Option<&'a QuoteConversion>> + Clone) -> TableBuilder {
    b.strings("quote_type", c.clone().map(|c| c.map(|c| c.quote_type)))
        .floats("standard_coupon_bp", c.clone().map(|c| c.map(|c| c.standard_coupon_bp)))
        .floats("par_spread_bp", c.clone().map(|c| c.map(|c| c.par_spread_bp)))
        .floats("standard_upfront", c.clone().map(|c| c.map(|c| c.standard_upfront)))
        .floats("quoted_spread_bp", c.map(|c| c.and_then(|c| c.quoted_spread_bp)))
}

/// The conversion columns read back, per row (None where `quote_type` is empty).
fn read_conversions(df: &DataFrame, path: &Path) -> Result<Vec<Option<QuoteConversion>>> {
    let (qt, sc, ps, su, qs) = (
        opt_fixed_labels(df, path, "quote_type", QUOTE_TYPES)?,
        floats(df, path, "standard_coupon_bp")?,
        floats(df, path, "par_spread_bp")?,
        floats(df, path, "standard_upfront")?,
        floats(df, path, "quoted_spread_bp")?,
    );
    Ok((0..df.height())
        .map(|i| {
            qt[i].map(|quote_type| QuoteConversion {
                quote_type,
                standard_coupon_bp: sc[i].unwrap_or(f64::NAN),
                par_spread_bp: ps[i].unwrap_or(f64::NAN),
                standard_upfront: su[i].unwrap_or(f64::NAN),
                quoted_spread_bp: qs[i],
            })
        })
        .collect())
}

impl Table for ResidualRow {
    const NAME: &'static str = "calibration_residuals";
    const COLUMNS: &'static [Column] = &[
        col("date", Date),
        col("entity", Text),
        col("currency", Text),
        col("seniority", Text),
        col("doc_clause", Text),
        col("method", Text),
        col("instrument", Text),
        col("tenor_or_bond", Text),
        col("market", Float),
        col("model", Float),
        col("residual_bp", Float),
        col("status", Text),
        col("quote_type", Text),
        col("standard_coupon_bp", Float),
        col("par_spread_bp", Float),
        col("standard_upfront", Float),
        col("quoted_spread_bp", Float),
    ];

    fn metadata() -> Vec<(String, String)> {
        vec![(
            "hazardline.units".into(),
            "market/model: par spread in bp for cds_par_spread, upfront as fraction of notional for cds_upfront; residual_bp = model - market in bp of running spread".into(),
        )]
    }

    fn frame(rows: &[Self]) -> Result<DataFrame> {
        let b = TableBuilder::new()
            .dates("date", rows.iter().map(|r| Some(r.date)))
            .strings("entity", rows.iter().map(|r| Some(&r.entity)))
            .strings("currency", rows.iter().map(|r| Some(&r.currency)))
            .strings("seniority", rows.iter().map(|r| r.seniority.as_deref()))
            .strings("doc_clause", rows.iter().map(|r| r.doc_clause.as_deref()))
            .strings("method", rows.iter().map(|r| Some(r.method.as_str())))
            .strings("instrument", rows.iter().map(|r| Some(r.instrument)))
            .strings("tenor_or_bond", rows.iter().map(|r| Some(&r.tenor_or_bond)))
            .floats("market", rows.iter().map(|r| Some(r.market)))
            .floats("model", rows.iter().map(|r| Some(r.model)))
            .floats("residual_bp", rows.iter().map(|r| Some(r.residual_bp)))
            .strings("status", rows.iter().map(|r| Some(r.status.as_str())));
        with_conversions(b, rows.iter().map(|r| r.conversion.as_ref())).finish()
    }

    fn rows(df: &DataFrame, path: &Path) -> Result<Vec<Self>> {
        let (sen, doc) = (opt_labels(df, path, "seniority")?, opt_labels(df, path, "doc_clause")?);
        let mut conversions = read_conversions(df, path)?;
        let (d, e, c, me, ins, t, mk, mo, r, st) = (
            dates(df, path, "date")?,
            labels(df, path, "entity")?,
            labels(df, path, "currency")?,
            strs(df, path, "method")?,
            fixed_labels(df, path, "instrument", INSTRUMENTS)?,
            labels(df, path, "tenor_or_bond")?,
            floats(df, path, "market")?,
            floats(df, path, "model")?,
            floats(df, path, "residual_bp")?,
            strs(df, path, "status")?,
        );
        (0..df.height())
            .map(|i| {
                let method = text_form(me[i].as_deref(), "method", path, i)?;
                Ok(ResidualRow {
                    date: d[i].unwrap_or_default(),
                    entity: e[i].clone(),
                    currency: c[i].clone(),
                    seniority: sen[i].clone(),
                    doc_clause: doc[i].clone(),
                    method,
                    instrument: ins[i],
                    tenor_or_bond: t[i].clone(),
                    market: mk[i].unwrap_or(f64::NAN),
                    model: mo[i].unwrap_or(f64::NAN),
                    residual_bp: r[i].unwrap_or(f64::NAN),
                    status: text_form(st[i].as_deref(), "status", path, i)?,
                    conversion: conversions[i].take(),
                })
            })
            .collect()
    }
}

/// The order of the `calibration_residuals` table: the bootstrap's residuals first, by (date,
/// entity, currency, seniority, doc_clause), then the other methods' by (method, date, entity,
/// currency); a curve's residuals keep their order (a stable sort).
pub fn sort_residuals(rows: &mut [ResidualRow]) {
    let key = |r: &ResidualRow| (r.method != FitMethod::Bootstrap, r.method.as_str(), r.date);
    rows.sort_by(|a, b| {
        (key(a), &a.entity, &a.currency, &a.seniority, &a.doc_clause).cmp(&(
            key(b),
            &b.entity,
            &b.currency,
            &b.seniority,
            &b.doc_clause,
        ))
    });
}

/// Starts `calibration_residuals` at `path`, written as its rows arrive ([`RowGroupWriter`]).
pub fn residual_writer(path: &Path, meta: &[(String, String)]) -> Result<RowGroupWriter<ResidualRow>> {
    RowGroupWriter::create(path, &metadata_of::<ResidualRow>(meta), super::framed::<ResidualRow>)
}

/// Where a `calibration_residuals` row goes in the folder form: the bootstrap's first, then
/// each other method's, a file per year (the table's order, see [`sort_residuals`]).
fn residual_key(r: &ResidualRow) -> FileKey {
    (1 + u8::from(r.method != FitMethod::Bootstrap), r.method.as_str(), r.date.year())
}

/// Starts `calibration_residuals` in the folder `tables`, as
/// [`hazard_table`](super::curves::hazard_table) does (a file per method and year when
/// `split`).
pub fn residual_table(tables: &Path, meta: &[(String, String)], split: bool) -> Result<TableWriter<ResidualRow>> {
    if split {
        SplitWriter::create(
            &tables.join(ResidualRow::NAME),
            &metadata_of::<ResidualRow>(meta),
            super::framed::<ResidualRow>,
            residual_key,
        )
        .map(TableWriter::Split)
    } else {
        residual_writer(&super::file_of::<ResidualRow>(tables), meta).map(TableWriter::One)
    }
}

/// One row of `cds_quote_conversions`: a calibrated CDS quote in the three conventions, on
/// its curve (the bootstrap rows of `calibration_residuals` that carry a conversion, in that
/// table's order).
#[derive(Debug, Clone, PartialEq)]
pub struct QuoteConversionRow {
    pub date: NaiveDate,
    pub entity: Label,
    pub currency: Label,
    pub seniority: Option<Label>,
    pub doc_clause: Option<Label>,
    pub tenor: Label,
    /// The node's status (a quote not calibrated as quoted converts its curve's value).
    pub status: RowStatus,
    pub conversion: QuoteConversion,
}

impl QuoteConversionRow {
    /// The conversion row of a residual row, when it carries one.
    pub fn of(r: &ResidualRow) -> Option<QuoteConversionRow> {
        Some(QuoteConversionRow {
            date: r.date,
            entity: r.entity.clone(),
            currency: r.currency.clone(),
            seniority: r.seniority.clone(),
            doc_clause: r.doc_clause.clone(),
            tenor: r.tenor_or_bond.clone(),
            status: r.status,
            conversion: r.conversion?,
        })
    }
}

impl Table for QuoteConversionRow {
    const NAME: &'static str = "cds_quote_conversions";
    const COLUMNS: &'static [Column] = &[
        col("date", Date),
        col("entity", Text),
        col("currency", Text),
        col("seniority", Text),
        col("doc_clause", Text),
        col("tenor", Text),
        col("status", Text),
        col("quote_type", Text),
        col("standard_coupon_bp", Float),
        col("par_spread_bp", Float),
        col("standard_upfront", Float),
        col("quoted_spread_bp", Float),
    ];

    fn metadata() -> Vec<(String, String)> {
        vec![(
            "hazardline.units".into(),
            "par_spread_bp: par spread on the calibrated curve; standard_upfront: clean upfront at standard_coupon_bp per unit notional, positive when the protection buyer pays; quoted_spread_bp: par spread of the flat hazard that gives that upfront (empty when none does)".into(),
        )]
    }

    fn frame(rows: &[Self]) -> Result<DataFrame> {
        let b = TableBuilder::new()
            .dates("date", rows.iter().map(|r| Some(r.date)))
            .strings("entity", rows.iter().map(|r| Some(&r.entity)))
            .strings("currency", rows.iter().map(|r| Some(&r.currency)))
            .strings("seniority", rows.iter().map(|r| r.seniority.as_deref()))
            .strings("doc_clause", rows.iter().map(|r| r.doc_clause.as_deref()))
            .strings("tenor", rows.iter().map(|r| Some(&r.tenor)))
            .strings("status", rows.iter().map(|r| Some(r.status.as_str())));
        with_conversions(b, rows.iter().map(|r| Some(&r.conversion))).finish()
    }

    fn rows(df: &DataFrame, path: &Path) -> Result<Vec<Self>> {
        let (d, e, c, t, st) = (
            dates(df, path, "date")?,
            labels(df, path, "entity")?,
            labels(df, path, "currency")?,
            labels(df, path, "tenor")?,
            strs(df, path, "status")?,
        );
        let (sen, doc) = (opt_labels(df, path, "seniority")?, opt_labels(df, path, "doc_clause")?);
        let mut conversions = read_conversions(df, path)?;
        (0..df.height())
            .map(|i| {
                Ok(QuoteConversionRow {
                    date: d[i].unwrap_or_default(),
                    entity: e[i].clone(),
                    currency: c[i].clone(),
                    seniority: sen[i].clone(),
                    doc_clause: doc[i].clone(),
                    tenor: t[i].clone(),
                    status: text_form(st[i].as_deref(), "status", path, i)?,
                    conversion: conversions[i].take().ok_or_else(|| crate::error::Error::Read {
                        path: path.to_path_buf(),
                        format: "Parquet",
                        message: format!("column quote_type, row {}: empty", i + 1),
                    })?,
                })
            })
            .collect()
    }
}

/// Starts `cds_quote_conversions` in the folder `tables` (a file per year when `split`).
pub fn conversion_table(
    tables: &Path,
    meta: &[(String, String)],
    split: bool,
) -> Result<TableWriter<QuoteConversionRow>> {
    if split {
        SplitWriter::create(
            &tables.join(QuoteConversionRow::NAME),
            &metadata_of::<QuoteConversionRow>(meta),
            super::framed::<QuoteConversionRow>,
            |r: &QuoteConversionRow| (1, "conversions", r.date.year()),
        )
        .map(TableWriter::Split)
    } else {
        RowGroupWriter::create(
            &super::file_of::<QuoteConversionRow>(tables),
            &metadata_of::<QuoteConversionRow>(meta),
            super::framed::<QuoteConversionRow>,
        )
        .map(TableWriter::One)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::tables::testing::{refuses_a_missing_column, round_trip};

    #[test]
    fn calibration_residuals_round_trip_and_sort_bootstrap_first() {
        let d = NaiveDate::from_ymd_opt(2024, 5, 2).unwrap();
        let row = |method, entity: &str| ResidualRow {
            date: d,
            entity: entity.into(),
            currency: "EUR".into(),
            seniority: Some("subordinated".into()),
            doc_clause: Some("no_restructuring".into()),
            method,
            instrument: "cds_par_spread",
            tenor_or_bond: "5Y".into(),
            market: 101.5,
            model: 101.5 + 1e-9,
            residual_bp: 1e-9,
            status: RowStatus::Ok,
            conversion: (method == FitMethod::Bootstrap).then_some(QuoteConversion {
                quote_type: "quoted_spread",
                standard_coupon_bp: 100.0,
                par_spread_bp: 123.4,
                standard_upfront: 0.011,
                quoted_spread_bp: Some(123.0),
            }),
        };
        let mut rows = vec![row(FitMethod::Cir, "A"), row(FitMethod::BondFit, "B"), row(FitMethod::Bootstrap, "C")];
        assert_eq!(round_trip(&rows), rows);
        refuses_a_missing_column(&rows);
        sort_residuals(&mut rows);
        let order: Vec<FitMethod> = rows.iter().map(|r| r.method).collect();
        assert_eq!(order, [FitMethod::Bootstrap, FitMethod::BondFit, FitMethod::Cir]);
    }
}
