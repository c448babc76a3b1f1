//! The accounting of the input rows: `rejects` (one row per rejected input row, with the file,
//! row, key and reason) and `data_quality` (rows read, used, rejected and flagged, per table
//! and date, per table, and per entity of the CDS panel).

use super::parquet::TableBuilder;
use super::readback::{dates, fixed_labels, floats, intern, ints, strs};
use super::{col, Column, Kind::*, Table};
use crate::error::Result;
use crate::ingest::load::{DataQualityRow, INPUT_TABLES};
use crate::ingest::Reject;
use polars::prelude::DataFrame;
use std::path::Path;

impl Table for Reject {
    const NAME: &'static str = "rejects";
    const COLUMNS: &'static [Column] = &[
        col("table", Text),
        col("source", Text),
        col("row", Int),
        col("date", Date),
        col("entity", Text),
        col("key", Text),
        col("reason", Text),
        col("detail", Text),
    ];

    fn frame(rows: &[Self]) -> Result<DataFrame> {
        TableBuilder::new()
            .strings("table", rows.iter().map(|r| Some(r.table)))
            .strings("source", rows.iter().map(|r| Some(&r.source)))
            .ints("row", rows.iter().map(|r| Some(r.row as i64)))
            .dates("date", rows.iter().map(|r| r.date))
            .strings("entity", rows.iter().map(|r| r.entity.as_deref()))
            .strings("key", rows.iter().map(|r| Some(&r.key)))
            .strings("reason", rows.iter().map(|r| Some(r.reason)))
            .strings("detail", rows.iter().map(|r| Some(&r.detail)))
            .finish()
    }

    fn rows(df: &DataFrame, path: &Path) -> Result<Vec<Self>> {
        let (t, mut s, r, d, mut e, mut k, re, mut de) = (
            fixed_labels(df, path, "table", &INPUT_TABLES)?,
            strs(df, path, "source")?,
            ints(df, path, "row")?,
            dates(df, path, "date")?,
            strs(df, path, "entity")?,
            strs(df, path, "key")?,
            strs(df, path, "reason")?,
            strs(df, path, "detail")?,
        );
        Ok((0..df.height())
            .map(|i| Reject {
                table: t[i],
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
}

/// (table, reason, count) of the rejects, most frequent first.
pub fn reject_reasons(rows: &[Reject]) -> Vec<(String, String, usize)> {
    let mut m: std::collections::BTreeMap<(&str, &str), usize> = Default::default();
    for r in rows {
        *m.entry((r.table, r.reason)).or_default() += 1;
    }
    let mut v: Vec<(String, String, usize)> =
        m.into_iter().map(|((a, b), c)| (a.to_string(), b.to_string(), c)).collect();
    v.sort_by(|a, b| b.2.cmp(&a.2).then(a.0.cmp(&b.0)).then(a.1.cmp(&b.1)));
    v
}

/// The scopes of `data_quality` rows.
pub const SCOPES: &[&str] = &["date", "table", "entity"];

impl Table for DataQualityRow {
    const NAME: &'static str = "data_quality";
    const COLUMNS: &'static [Column] = &[
        col("scope", Text),
        col("table", Text),
        col("date", Date),
        col("entity", Text),
        col("rows_read", Int),
        col("rows_used", Int),
        col("rows_rejected", Int),
        col("rows_flagged", Int),
        col("first_date", Date),
        col("last_date", Date),
        col("days_quoted", Int),
        col("coverage", Float),
        col("stale_rows", Int),
        col("spike_rows", Int),
    ];

    fn metadata() -> Vec<(String, String)> {
        vec![(
            "hazardline.scopes".into(),
            "date: per table and date; table: per table without a date column; entity: per entity of cds_quotes (coverage = days quoted / business days of the panel)".into(),
        )]
    }

    fn frame(rows: &[Self]) -> Result<DataFrame> {
        TableBuilder::new()
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
            .finish()
    }

    fn rows(df: &DataFrame, path: &Path) -> Result<Vec<Self>> {
        let (sc, t, d, mut e) = (
            fixed_labels(df, path, "scope", SCOPES)?,
            fixed_labels(df, path, "table", &INPUT_TABLES)?,
            dates(df, path, "date")?,
            strs(df, path, "entity")?,
        );
        let (rr, ru, rj, rf) = (
            ints(df, path, "rows_read")?,
            ints(df, path, "rows_used")?,
            ints(df, path, "rows_rejected")?,
            ints(df, path, "rows_flagged")?,
        );
        let (fd, ld, dq, cv, st, sp) = (
            dates(df, path, "first_date")?,
            dates(df, path, "last_date")?,
            ints(df, path, "days_quoted")?,
            floats(df, path, "coverage")?,
            ints(df, path, "stale_rows")?,
            ints(df, path, "spike_rows")?,
        );
        let u = |v: Option<i64>| v.map(|x| x as u64);
        Ok((0..df.height())
            .map(|i| DataQualityRow {
                scope: sc[i],
                table: t[i],
                date: d[i],
                entity: e[i].take(),
                rows_read: u(rr[i]).unwrap_or(0),
                rows_used: u(ru[i]).unwrap_or(0),
                rows_rejected: u(rj[i]).unwrap_or(0),
                rows_flagged: u(rf[i]).unwrap_or(0),
                first_date: fd[i],
                last_date: ld[i],
                days_quoted: u(dq[i]),
                coverage: cv[i],
                stale_rows: u(st[i]),
                spike_rows: u(sp[i]),
            })
            .collect())
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::tables::testing::{refuses_a_missing_column, round_trip};
    use chrono::NaiveDate;

    #[test]
    fn rejects_round_trip_and_count_reasons() {
        let mut r = Reject::new(
            "cds_quotes",
            "quotes.csv",
            7,
            "unparseable_number",
            "par_spread_bp `1,2` is not a number".into(),
        );
        r.date = NaiveDate::from_ymd_opt(2024, 5, 2);
        r.entity = Some("Alder Works".into());
        r.key = "USD 5Y".into();
        let rows = vec![
            r.clone(),
            Reject::new("discount", "discount.parquet", 3, "implausible_rate", "zero_rate 0.9".into()),
            r,
        ];
        assert_eq!(round_trip(&rows), rows);
        refuses_a_missing_column(&rows);
        assert_eq!(reject_reasons(&rows)[0], ("cds_quotes".to_string(), "unparseable_number".to_string(), 2));
    }

    #[test]
    fn data_quality_round_trips() {
        let d = NaiveDate::from_ymd_opt(2024, 5, 2);
        let rows = vec![
            DataQualityRow {
                scope: "date",
                table: "cds_quotes",
                date: d,
                entity: None,
                rows_read: 10,
                rows_used: 8,
                rows_rejected: 2,
                rows_flagged: 1,
                first_date: None,
                last_date: None,
                days_quoted: None,
                coverage: None,
                stale_rows: None,
                spike_rows: None,
            },
            DataQualityRow {
                scope: "entity",
                table: "cds_quotes",
                date: None,
                entity: Some("Alder Works".into()),
                rows_read: 5,
                rows_used: 5,
                rows_rejected: 0,
                rows_flagged: 0,
                first_date: d,
                last_date: d,
                days_quoted: Some(1),
                coverage: Some(0.5),
                stale_rows: Some(0),
                spike_rows: Some(1),
            },
        ];
        assert_eq!(round_trip(&rows), rows);
        refuses_a_missing_column(&rows);
    }
}
