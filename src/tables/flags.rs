//! The one flags shape: every finding that keeps its row, from the data-quality rules (with
//! the input table, file and row it points to) and from the review stages. A run writes it as
//! `flags`; the `check` and `calibrate` commands write the data-quality findings alone, in the
//! same shape, as `quality_flags`.

use super::parquet::TableBuilder;
use super::readback::{dates, fixed_labels, floats, intern, ints, strs, text_form};
use super::{col, Column, Kind::*, Table};
use crate::error::Result;
use crate::ingest::load::INPUT_TABLES;
use crate::ingest::QualityFlag;
use crate::stability::FlagRow;
use crate::text::{FlagRule, Severity};
use polars::prelude::DataFrame;
use std::path::Path;

/// The stage of the data-quality rules.
pub const DATA_QUALITY: &str = "data_quality";
/// The stage of the stability and residual review.
pub const STABILITY: &str = "stability";
/// The file stem the `check` and `calibrate` commands write the data-quality flags to.
pub const QUALITY_FLAGS: &str = "quality_flags";

/// A flag of any stage: the review's [`FlagRow`], the stage that raised it, and for a
/// data-quality flag the input table, file and 1-based row it points to.
#[derive(Debug, Clone, PartialEq)]
pub struct FlagRecord {
    pub stage: &'static str,
    pub flag: FlagRow,
    pub table: Option<String>,
    pub source: Option<String>,
    pub row: Option<u64>,
}

impl FlagRecord {
    /// A review stage's flag.
    pub fn review(stage: &'static str, flag: &FlagRow) -> FlagRecord {
        FlagRecord { stage, flag: flag.clone(), table: None, source: None, row: None }
    }

    /// A data-quality finding (its period is its date).
    pub fn quality(f: &QualityFlag) -> FlagRecord {
        FlagRecord {
            stage: DATA_QUALITY,
            flag: FlagRow {
                rule: f.rule,
                severity: f.severity,
                entity: Some(f.entity.clone()),
                series: f.series.clone(),
                period: f.date.to_string(),
                date: Some(f.date),
                value: f.value,
                threshold: f.threshold,
                explanation: f.explanation.clone(),
            },
            table: Some(f.table.to_string()),
            source: Some(f.source.clone()),
            row: Some(f.row),
        }
    }
}

impl Table for FlagRecord {
    const NAME: &'static str = "flags";
    const COLUMNS: &'static [Column] = &[
        col("rule", Text),
        col("severity", Text),
        col("entity", Text),
        col("series", Text),
        col("period", Text),
        col("date", Date),
        col("value", Float),
        col("threshold", Float),
        col("explanation", Text),
        col("stage", Text),
        col("table", Text),
        col("source", Text),
        col("row", Int),
    ];

    fn frame(flags: &[Self]) -> Result<DataFrame> {
        TableBuilder::new()
            .strings("rule", flags.iter().map(|r| Some(r.flag.rule.as_str())))
            .strings("severity", flags.iter().map(|r| Some(r.flag.severity.as_str())))
            .strings("entity", flags.iter().map(|r| r.flag.entity.as_ref()))
            .strings("series", flags.iter().map(|r| Some(&r.flag.series)))
            .strings("period", flags.iter().map(|r| Some(&r.flag.period)))
            .dates("date", flags.iter().map(|r| r.flag.date))
            .floats("value", flags.iter().map(|r| Some(r.flag.value)))
            .floats("threshold", flags.iter().map(|r| Some(r.flag.threshold)))
            .strings("explanation", flags.iter().map(|r| Some(&r.flag.explanation)))
            .strings("stage", flags.iter().map(|r| Some(r.stage)))
            .strings("table", flags.iter().map(|r| r.table.as_ref()))
            .strings("source", flags.iter().map(|r| r.source.as_ref()))
            .ints("row", flags.iter().map(|r| r.row.map(|x| x as i64)))
            .finish()
    }

    fn rows(df: &DataFrame, path: &Path) -> Result<Vec<Self>> {
        let (ru, sv, mut e, mut se, mut pe, d) = (
            strs(df, path, "rule")?,
            strs(df, path, "severity")?,
            strs(df, path, "entity")?,
            strs(df, path, "series")?,
            strs(df, path, "period")?,
            dates(df, path, "date")?,
        );
        let (v, t, mut x, st) = (
            floats(df, path, "value")?,
            floats(df, path, "threshold")?,
            strs(df, path, "explanation")?,
            strs(df, path, "stage")?,
        );
        let (tb, mut so, r) =
            (fixed_labels(df, path, "table", &INPUT_TABLES)?, strs(df, path, "source")?, ints(df, path, "row")?);
        (0..df.height())
            .map(|i| {
                Ok(FlagRecord {
                    stage: intern(st[i].as_deref().unwrap_or("")),
                    flag: FlagRow {
                        rule: text_form::<FlagRule>(ru[i].as_deref(), "rule", path, i)?,
                        severity: text_form::<Severity>(sv[i].as_deref(), "severity", path, i)?,
                        entity: e[i].take(),
                        series: se[i].take().unwrap_or_default(),
                        period: pe[i].take().unwrap_or_default(),
                        date: d[i],
                        value: v[i].unwrap_or(f64::NAN),
                        threshold: t[i].unwrap_or(f64::NAN),
                        explanation: x[i].take().unwrap_or_default(),
                    },
                    table: (!tb[i].is_empty()).then(|| tb[i].to_string()),
                    source: so[i].take(),
                    row: r[i].map(|x| x.max(0) as u64),
                })
            })
            .collect()
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::tables::testing::{refuses_a_missing_column, round_trip};
    use chrono::NaiveDate;

    #[test]
    fn flags_round_trip_in_one_shape_for_every_stage() {
        let day = NaiveDate::from_ymd_opt(2024, 5, 2).unwrap();
        let quality = QualityFlag {
            rule: FlagRule::Spike,
            severity: Severity::Warning,
            table: "cds_quotes",
            entity: "Alder Works".into(),
            series: "USD 5Y".into(),
            date: day,
            value: 4.2,
            threshold: 3.0,
            explanation: "a spike that reverted".into(),
            source: "quotes.csv".into(),
            row: 17,
        };
        let review = FlagRow {
            rule: FlagRule::PsiShift,
            severity: Severity::Red,
            entity: None,
            series: "pd_1y".into(),
            period: "2024Q2".into(),
            date: None,
            value: 0.3,
            threshold: 0.25,
            explanation: "shifted".into(),
        };
        let rows = vec![FlagRecord::quality(&quality), FlagRecord::review(STABILITY, &review)];
        assert_eq!(round_trip(&rows), rows);
        refuses_a_missing_column(&rows);
    }
}
