//! `sensitivities`: per CDS curve on the run's sensitivity dates, each shift of
//! `calibrate::sensitivity` (quotes +1 bp, recovery +-5 points, discount +1 bp, the accrual
//! variants, the other infeasible policy) with the three measures and their change from the
//! base row.

use super::parquet::{FrameTable, TableBuilder};
use super::readback::{dates, floats, ints, strs, text_form};
use super::{col, Column, Kind::*, Table};
use crate::calibrate::sensitivity::Shift;
use crate::error::Result;
use chrono::NaiveDate;
use polars::prelude::DataFrame;
use std::path::Path;

/// One shift of one curve.
#[derive(Debug, Clone, PartialEq)]
pub struct SensitivityRow {
    pub date: NaiveDate,
    pub entity: String,
    pub currency: String,
    pub seniority: Option<String>,
    pub doc_clause: Option<String>,
    /// The entity's grade on the date (None without a grades table or a grade by then).
    pub grade: Option<i64>,
    pub shift: Shift,
    /// See `calibrate::sensitivity::ShiftResult::status`.
    pub status: String,
    /// Running coupon (bp) of the 5Y contract whose upfront is measured.
    pub coupon_bp: f64,
    pub pd_1y: Option<f64>,
    pub hazard_5y: Option<f64>,
    pub upfront_5y: Option<f64>,
    /// This row's measure minus the base row's (None when either is missing).
    pub pd_1y_change: Option<f64>,
    pub hazard_5y_change: Option<f64>,
    pub upfront_5y_change: Option<f64>,
    pub floored_nodes: i64,
}

impl Table for SensitivityRow {
    const NAME: &'static str = "sensitivities";
    const COLUMNS: &'static [Column] = &[
        col("date", Date),
        col("entity", Text),
        col("currency", Text),
        col("seniority", Text),
        col("doc_clause", Text),
        col("grade", Int),
        col("shift", Text),
        col("status", Text),
        col("coupon_bp", Float),
        col("pd_1y", Float),
        col("hazard_5y", Float),
        col("upfront_5y", Float),
        col("pd_1y_change", Float),
        col("hazard_5y_change", Float),
        col("upfront_5y_change", Float),
        col("floored_nodes", Int),
    ];

    fn metadata() -> Vec<(String, String)> {
        vec![(
            "hazardline.units".into(),
            "pd_1y = 1 - S(1Y); hazard_5y per year (Act/365F); upfront_5y: clean upfront of the standard 5Y contract at coupon_bp per unit notional, positive when the protection buyer pays; *_change = shifted - base (upfront_5y_change under quotes_up_1bp is the CS01 in upfront per unit notional)".into(),
        )]
    }

    fn frame(rows: &[Self]) -> Result<DataFrame> {
        TableBuilder::new()
            .dates("date", rows.iter().map(|r| Some(r.date)))
            .strings("entity", rows.iter().map(|r| Some(&r.entity)))
            .strings("currency", rows.iter().map(|r| Some(&r.currency)))
            .strings("seniority", rows.iter().map(|r| r.seniority.as_deref()))
            .strings("doc_clause", rows.iter().map(|r| r.doc_clause.as_deref()))
            .ints("grade", rows.iter().map(|r| r.grade))
            .strings("shift", rows.iter().map(|r| Some(r.shift.as_str())))
            .strings("status", rows.iter().map(|r| Some(&r.status)))
            .floats("coupon_bp", rows.iter().map(|r| Some(r.coupon_bp)))
            .floats("pd_1y", rows.iter().map(|r| r.pd_1y))
            .floats("hazard_5y", rows.iter().map(|r| r.hazard_5y))
            .floats("upfront_5y", rows.iter().map(|r| r.upfront_5y))
            .floats("pd_1y_change", rows.iter().map(|r| r.pd_1y_change))
            .floats("hazard_5y_change", rows.iter().map(|r| r.hazard_5y_change))
            .floats("upfront_5y_change", rows.iter().map(|r| r.upfront_5y_change))
            .ints("floored_nodes", rows.iter().map(|r| Some(r.floored_nodes)))
            .finish()
    }

    fn rows(df: &DataFrame, path: &Path) -> Result<Vec<Self>> {
        let (d, mut e, mut c, mut s, mut dc, g, sh, mut st, cp) = (
            dates(df, path, "date")?,
            strs(df, path, "entity")?,
            strs(df, path, "currency")?,
            strs(df, path, "seniority")?,
            strs(df, path, "doc_clause")?,
            ints(df, path, "grade")?,
            strs(df, path, "shift")?,
            strs(df, path, "status")?,
            floats(df, path, "coupon_bp")?,
        );
        let (p, h, u, pc, hc, uc, fl) = (
            floats(df, path, "pd_1y")?,
            floats(df, path, "hazard_5y")?,
            floats(df, path, "upfront_5y")?,
            floats(df, path, "pd_1y_change")?,
            floats(df, path, "hazard_5y_change")?,
            floats(df, path, "upfront_5y_change")?,
            ints(df, path, "floored_nodes")?,
        );
        (0..df.height())
            .map(|i| {
                Ok(SensitivityRow {
                    date: d[i].unwrap_or_default(),
                    entity: e[i].take().unwrap_or_default(),
                    currency: c[i].take().unwrap_or_default(),
                    seniority: s[i].take(),
                    doc_clause: dc[i].take(),
                    grade: g[i],
                    shift: text_form(sh[i].as_deref(), "shift", path, i)?,
                    status: st[i].take().unwrap_or_default(),
                    coupon_bp: cp[i].unwrap_or(f64::NAN),
                    pd_1y: p[i],
                    hazard_5y: h[i],
                    upfront_5y: u[i],
                    pd_1y_change: pc[i],
                    hazard_5y_change: hc[i],
                    upfront_5y_change: uc[i],
                    floored_nodes: fl[i].unwrap_or(0),
                })
            })
            .collect()
    }
}

/// Starts `sensitivities` in the folder `tables`, gathered as its rows come (in the table's
/// order) and written at the end, byte for byte as a whole write (see [`FrameTable`]).
pub fn sensitivity_table(tables: &Path, meta: &[(String, String)]) -> Result<FrameTable> {
    Ok(FrameTable::create(
        &super::file_of::<SensitivityRow>(tables),
        &super::metadata_of::<SensitivityRow>(meta),
        super::framed::<SensitivityRow>(&[])?,
    ))
}

/// The table's order: by (date, entity, currency, seniority, doc_clause), the shifts of a
/// curve in their fixed order.
pub fn sort_sensitivities(rows: &mut [SensitivityRow]) {
    rows.sort_by(|a, b| {
        (a.date, &a.entity, &a.currency, &a.seniority, &a.doc_clause, a.shift).cmp(&(
            b.date,
            &b.entity,
            &b.currency,
            &b.seniority,
            &b.doc_clause,
            b.shift,
        ))
    });
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::tables::testing::{refuses_a_missing_column, round_trip};

    #[test]
    fn sensitivities_round_trip() {
        let row = |shift, change: Option<f64>| SensitivityRow {
            date: NaiveDate::from_ymd_opt(2024, 5, 31).unwrap(),
            entity: "Alder Works".into(),
            currency: "EUR".into(),
            seniority: Some("senior".into()),
            doc_clause: None,
            grade: Some(3),
            shift,
            status: "ok".into(),
            coupon_bp: 100.0,
            pd_1y: Some(0.01),
            hazard_5y: Some(0.02),
            upfront_5y: Some(-0.01),
            pd_1y_change: change,
            hazard_5y_change: change,
            upfront_5y_change: change,
            floored_nodes: 0,
        };
        let rows = [row(Shift::Base, None), row(Shift::QuotesUp1bp, Some(1e-5))];
        assert_eq!(round_trip(&rows), rows.to_vec());
        refuses_a_missing_column::<SensitivityRow>(&[row(Shift::Base, None)]);
    }

    /// The table gathered as its rows come, in pieces of any size, is byte for byte the table
    /// written whole, in the groups of a whole write (two groups for this many rows) and with
    /// fewer rows than one group.
    #[test]
    fn streamed_table_equals_the_whole_write() {
        let shifts = [Shift::Base, Shift::QuotesUp1bp, Shift::RecoveryUp5, Shift::DiscountUp1bp];
        let n = 2 * crate::tables::parquet::ROW_GROUP_ROWS + 12_345;
        let rows: Vec<SensitivityRow> = (0..n)
            .map(|i| SensitivityRow {
                date: NaiveDate::from_ymd_opt(2020, 1, 31).unwrap() + chrono::Days::new((i / 4000) as u64),
                entity: format!("Entity {:04}", (i / 4) % 1000),
                currency: if i % 7 == 0 { "EUR" } else { "USD" }.into(),
                seniority: (i % 3 != 0).then(|| "senior".into()),
                doc_clause: (i % 5 == 0).then(|| "full".into()),
                grade: (i % 11 != 0).then_some((i % 9) as i64),
                shift: shifts[i % 4],
                status: if i % 13 == 0 { "infeasible" } else { "ok" }.into(),
                coupon_bp: 100.0,
                pd_1y: Some((i as f64).sqrt() * 1e-4),
                hazard_5y: (i % 17 != 0).then(|| (i as f64).ln_1p() * 1e-3),
                upfront_5y: Some(-(i as f64) * 1e-7),
                pd_1y_change: (i % 4 != 0).then_some((i % 100) as f64 * 1e-6),
                hazard_5y_change: None,
                upfront_5y_change: Some(1e-5),
                floored_nodes: (i % 3) as i64,
            })
            .collect();
        let dir = tempfile::tempdir().unwrap();
        let meta = vec![("units".to_string(), "bp".to_string())];
        let whole = dir.path().join("whole.parquet");
        crate::tables::write_to(&rows, &whole, &meta).unwrap();
        let streamed = dir.path().join("streamed");
        let mut w = sensitivity_table(&streamed, &meta).unwrap();
        let mut rest = rows.as_slice();
        for piece in [1usize, 70_000, 3, 262_144, 100_000].iter().cycle() {
            let k = (*piece).min(rest.len());
            w.push(crate::tables::framed(&rest[..k]).unwrap()).unwrap();
            rest = &rest[k..];
            if rest.is_empty() {
                break;
            }
        }
        assert_eq!(w.finish().unwrap(), n);
        let a = std::fs::read(&whole).unwrap();
        let b = std::fs::read(crate::tables::file_of::<SensitivityRow>(&streamed)).unwrap();
        assert!(a == b, "the gathered table differs from the whole write ({} and {} bytes)", a.len(), b.len());
        // Fewer rows than a group, in pieces.
        crate::tables::write_to(&rows[..5_000], &whole, &meta).unwrap();
        let mut w = sensitivity_table(&streamed, &meta).unwrap();
        for piece in rows[..5_000].chunks(1_234) {
            w.push(crate::tables::framed(piece).unwrap()).unwrap();
        }
        w.finish().unwrap();
        assert!(
            std::fs::read(&whole).unwrap()
                == std::fs::read(crate::tables::file_of::<SensitivityRow>(&streamed)).unwrap()
        );
    }
}
