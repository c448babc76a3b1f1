//! The tables only a part folder holds (a `run --shard` / `--dates` part, read back by
//! `merge`): `stability_series` (the curve series of the stability review), `stability_market`
//! (the entities' daily spread moves), `stability_edges` (each entity's first and last curve
//! spreads in the part, for the moves across a date boundary) and `backtest_members`.
//! The series table is written straight from the panel and read straight into one, without a
//! record per point held in between (it has a point per curve and series).

use super::parquet::TableBuilder;
use super::readback::{dates, err, floats, ints, labels, strs, text_form};
use super::{col, Column, Kind::*, Table};
use crate::backtest::{Bucket, Observation as Member};
use crate::error::{Error, Result};
use crate::stability::{MarketMove, Observation as SeriesPoint, PanelBuilder, SpreadEdge};
use polars::prelude::DataFrame;
use std::collections::BTreeMap;
use std::path::Path;
use std::sync::Arc;

fn missing(path: &Path, column: &str, row: usize) -> Error {
    Error::Read {
        path: path.to_path_buf(),
        format: "Parquet",
        message: format!("row {}: column {column} is empty", row + 1),
    }
}

/// A text column with no empty cell, as shared labels.
fn required_labels(df: &DataFrame, path: &Path, name: &str) -> Result<Vec<super::curves::Label>> {
    let nulls = df.column(name).map(|c| c.null_count()).unwrap_or(0);
    if nulls > 0 {
        let i = strs(df, path, name)?.iter().position(Option::is_none).unwrap_or(0);
        return Err(missing(path, name, i));
    }
    labels(df, path, name)
}

fn series_frame<I: Iterator<Item = SeriesPoint>>(points: impl Fn() -> I) -> Result<DataFrame> {
    TableBuilder::new()
        .strings("series", points().map(|x| Some(x.series)))
        .strings("entity", points().map(|x| Some(x.entity)))
        .ints("grade", points().map(|x| x.grade.map(i64::from)))
        .dates("date", points().map(|x| Some(x.date)))
        .floats("value", points().map(|x| Some(x.value)))
        .finish()
}

/// Calls `f` with each point of a `stability_series` frame.
fn each_point(df: &DataFrame, path: &Path, mut f: impl FnMut(SeriesPoint)) -> Result<()> {
    let (s, e, g, d, v) = (
        required_labels(df, path, "series")?,
        required_labels(df, path, "entity")?,
        ints(df, path, "grade")?,
        dates(df, path, "date")?,
        floats(df, path, "value")?,
    );
    for i in 0..df.height() {
        f(SeriesPoint {
            series: s[i].clone(),
            entity: e[i].clone(),
            grade: g[i].map(|x| x as u32),
            date: d[i].ok_or_else(|| missing(path, "date", i))?,
            value: v[i].ok_or_else(|| missing(path, "value", i))?,
        });
    }
    Ok(())
}

impl Table for SeriesPoint {
    const NAME: &'static str = "stability_series";
    const COLUMNS: &'static [Column] =
        &[col("series", Text), col("entity", Text), col("grade", Int), col("date", Date), col("value", Float)];

    fn frame(rows: &[Self]) -> Result<DataFrame> {
        series_frame(|| rows.iter().cloned())
    }

    fn rows(df: &DataFrame, path: &Path) -> Result<Vec<Self>> {
        let mut out = Vec::with_capacity(df.height());
        each_point(df, path, |p| out.push(p))?;
        Ok(out)
    }
}

/// Writes the panel's points as `stability_series` into the part folder `dir`.
pub fn write_series(panel: &PanelBuilder, dir: &Path) -> Result<()> {
    let mut df = series_frame(|| panel.observations())?;
    super::check_frame::<SeriesPoint>(&df)?;
    super::parquet::write_parquet(&mut df, &super::file_of::<SeriesPoint>(dir), &[])
}

/// Reads the part folder `dir`'s `stability_series` into `panel`.
///
/// The table holds each history's points together (it is written history by history), so the
/// points go to the panel a run of one (series, entity) at a time: the two labels are compared
/// as text from one row to the next and made into labels once per run, not once per point (a
/// part at 2,000 names x 5 years holds 22 to 25 M points).
pub fn read_series(dir: &Path, panel: &mut PanelBuilder) -> Result<()> {
    let path = super::file_of::<SeriesPoint>(dir);
    let df = super::readback::read_frame(&path)?;
    super::check_columns::<SeriesPoint>(&df, &path)?;
    let text = |name: &str| df.column(name).and_then(|c| c.str().cloned()).map_err(|e| err(&path, name, e));
    let (series, entity) = (text("series")?, text("entity")?);
    let (g, d, v) = (ints(&df, &path, "grade")?, dates(&df, &path, "date")?, floats(&df, &path, "value")?);
    let point = |i: usize| -> Result<(Option<u32>, chrono::NaiveDate, f64)> {
        Ok((
            g[i].map(|x| x as u32),
            d[i].ok_or_else(|| missing(&path, "date", i))?,
            v[i].ok_or_else(|| missing(&path, "value", i))?,
        ))
    };
    let mut run: Option<(&str, &str, usize)> = None;
    let flush = |run: Option<(&str, &str, usize)>, end: usize, panel: &mut PanelBuilder| -> Result<()> {
        if let Some((s, e, start)) = run {
            let points = (start..end).map(point).collect::<Result<Vec<_>>>()?;
            panel.push_run(&Arc::from(s), &Arc::from(e), points.into_iter());
        }
        Ok(())
    };
    for (i, (s, e)) in series.iter().zip(entity.iter()).enumerate() {
        let s = s.ok_or_else(|| missing(&path, "series", i))?;
        let e = e.ok_or_else(|| missing(&path, "entity", i))?;
        if run.is_some_and(|(s0, e0, _)| s0 == s && e0 == e) {
            continue;
        }
        flush(run, i, panel)?;
        run = Some((s, e, i));
    }
    flush(run, df.height(), panel)
}

impl Table for MarketMove {
    const NAME: &'static str = "stability_market";
    const COLUMNS: &'static [Column] =
        &[col("entity", Text), col("date", Date), col("mean_abs_change_bp", Float), col("mean_level_bp", Float)];

    fn frame(m: &[Self]) -> Result<DataFrame> {
        TableBuilder::new()
            .strings("entity", m.iter().map(|x| Some(&x.entity)))
            .dates("date", m.iter().map(|x| Some(x.date)))
            .floats("mean_abs_change_bp", m.iter().map(|x| Some(x.mean_abs_change_bp)))
            .floats("mean_level_bp", m.iter().map(|x| Some(x.mean_level_bp)))
            .finish()
    }

    fn rows(df: &DataFrame, path: &Path) -> Result<Vec<Self>> {
        let (e, d, c, l) = (
            required_labels(df, path, "entity")?,
            dates(df, path, "date")?,
            floats(df, path, "mean_abs_change_bp")?,
            floats(df, path, "mean_level_bp")?,
        );
        (0..df.height())
            .map(|i| {
                Ok(MarketMove {
                    entity: e[i].clone(),
                    date: d[i].ok_or_else(|| missing(path, "date", i))?,
                    mean_abs_change_bp: c[i].ok_or_else(|| missing(path, "mean_abs_change_bp", i))?,
                    mean_level_bp: l[i].ok_or_else(|| missing(path, "mean_level_bp", i))?,
                })
            })
            .collect()
    }
}

/// A row of `stability_edges`: one tenor's par spread of an entity's first or last curve in
/// the part. An edge without par spreads (upfront quotes only) keeps one row with empty tenor
/// and spread, since it still ends the carry of the part before.
#[derive(Debug, Clone, PartialEq)]
pub struct EdgeRow {
    pub entity: super::curves::Label,
    pub last: bool,
    pub date: chrono::NaiveDate,
    pub tenor_months: Option<u32>,
    pub spread_bp: Option<f64>,
}

/// The rows of `edges`, a row per (edge, tenor).
pub fn edge_rows(edges: &[SpreadEdge]) -> Vec<EdgeRow> {
    edges
        .iter()
        .flat_map(|x| {
            let spreads: Vec<Option<(u32, f64)>> =
                if x.spreads.is_empty() { vec![None] } else { x.spreads.iter().map(|(t, v)| Some((*t, *v))).collect() };
            spreads.into_iter().map(move |r| EdgeRow {
                entity: x.entity.clone(),
                last: x.last,
                date: x.date,
                tenor_months: r.map(|r| r.0),
                spread_bp: r.map(|r| r.1),
            })
        })
        .collect()
}

/// The edges of rows in table order (the inverse of [`edge_rows`]).
pub fn edges_of(rows: &[EdgeRow]) -> Vec<SpreadEdge> {
    let mut edges: Vec<SpreadEdge> = Vec::new();
    for r in rows {
        let same = edges.last().is_some_and(|x| x.last == r.last && x.date == r.date && x.entity == r.entity);
        if !same {
            edges.push(SpreadEdge { entity: r.entity.clone(), date: r.date, last: r.last, spreads: BTreeMap::new() });
        }
        if let (Some(t), Some(v), Some(x)) = (r.tenor_months, r.spread_bp, edges.last_mut()) {
            x.spreads.insert(t, v);
        }
    }
    edges
}

impl Table for EdgeRow {
    const NAME: &'static str = "stability_edges";
    const COLUMNS: &'static [Column] =
        &[col("entity", Text), col("edge", Text), col("date", Date), col("tenor_months", Int), col("spread_bp", Float)];

    fn frame(e: &[Self]) -> Result<DataFrame> {
        TableBuilder::new()
            .strings("entity", e.iter().map(|x| Some(&*x.entity)))
            .strings("edge", e.iter().map(|x| Some(if x.last { "last" } else { "first" })))
            .dates("date", e.iter().map(|x| Some(x.date)))
            .ints("tenor_months", e.iter().map(|x| x.tenor_months.map(i64::from)))
            .floats("spread_bp", e.iter().map(|x| x.spread_bp))
            .finish()
    }

    fn rows(df: &DataFrame, path: &Path) -> Result<Vec<Self>> {
        let (e, side, d, t, v) = (
            required_labels(df, path, "entity")?,
            strs(df, path, "edge")?,
            dates(df, path, "date")?,
            ints(df, path, "tenor_months")?,
            floats(df, path, "spread_bp")?,
        );
        (0..df.height())
            .map(|i| {
                let last = match side[i].as_deref() {
                    Some("last") => true,
                    Some("first") => false,
                    _ => {
                        return Err(Error::Read {
                            path: path.to_path_buf(),
                            format: "Parquet",
                            message: format!("row {}: column edge is not `first` or `last`", i + 1),
                        })
                    }
                };
                Ok(EdgeRow {
                    entity: e[i].clone(),
                    last,
                    date: d[i].ok_or_else(|| missing(path, "date", i))?,
                    tenor_months: t[i].map(|x| x as u32),
                    spread_bp: v[i],
                })
            })
            .collect()
    }
}

/// A row of `backtest_members`: a member of a cohort at a horizon under one recovery. The
/// run folder's table holds every member of the final backtest, bucketed and cut at the
/// outcome end, so every bucket, interval, AUC and ratio can be recomputed from it; a part
/// folder's holds the part's members before both (their bucket column reads `ungraded` and
/// their outcome runs to the horizon end).
#[derive(Debug, Clone, PartialEq)]
pub struct MemberRecord {
    pub recovery: f64,
    pub member: Member,
}

impl Table for MemberRecord {
    const NAME: &'static str = "backtest_members";
    const COLUMNS: &'static [Column] = &[
        col("cohort", Date),
        col("horizon", Int),
        col("entity", Text),
        col("currency", Text),
        col("grade", Int),
        col("bucket", Text),
        col("recovery", Float),
        col("implied_pd", Float),
        col("curve_date", Date),
        col("outcome", Text),
        col("event_date", Date),
        col("exposure_years", Float),
        col("integrated_hazard", Float),
        col("spread_bp", Float),
    ];

    fn frame(rows: &[Self]) -> Result<DataFrame> {
        TableBuilder::new()
            .dates("cohort", rows.iter().map(|r| Some(r.member.cohort)))
            .ints("horizon", rows.iter().map(|r| Some(i64::from(r.member.horizon_years))))
            .strings("entity", rows.iter().map(|r| Some(&r.member.entity)))
            .strings("currency", rows.iter().map(|r| Some(&r.member.currency)))
            .ints("grade", rows.iter().map(|r| r.member.grade.map(i64::from)))
            .strings("bucket", rows.iter().map(|r| Some(r.member.bucket.label())))
            .floats("recovery", rows.iter().map(|r| Some(r.recovery)))
            .floats("implied_pd", rows.iter().map(|r| Some(r.member.implied_pd)))
            .dates("curve_date", rows.iter().map(|r| Some(r.member.curve_date)))
            .strings("outcome", rows.iter().map(|r| Some(r.member.outcome.as_str())))
            .dates("event_date", rows.iter().map(|r| r.member.event_date))
            .floats("exposure_years", rows.iter().map(|r| Some(r.member.exposure_years)))
            .floats("integrated_hazard", rows.iter().map(|r| r.member.integrated_hazard))
            .floats("spread_bp", rows.iter().map(|r| r.member.spread_bp))
            .finish()
    }

    /// The members as written; their bucket is assigned again by the pooled half of the run
    /// (it depends on every part's members), so it reads back as ungraded.
    fn rows(df: &DataFrame, path: &Path) -> Result<Vec<Self>> {
        let (r, mut e, mut cy, c, h, g, pd, cd, o, ed, x, ih, sp) = (
            floats(df, path, "recovery")?,
            strs(df, path, "entity")?,
            strs(df, path, "currency")?,
            dates(df, path, "cohort")?,
            ints(df, path, "horizon")?,
            ints(df, path, "grade")?,
            floats(df, path, "implied_pd")?,
            dates(df, path, "curve_date")?,
            strs(df, path, "outcome")?,
            dates(df, path, "event_date")?,
            floats(df, path, "exposure_years")?,
            floats(df, path, "integrated_hazard")?,
            floats(df, path, "spread_bp")?,
        );
        // The bucket column is checked for presence only (see above).
        strs(df, path, "bucket")?;
        (0..df.height())
            .map(|i| {
                let text = o[i].as_deref().ok_or_else(|| missing(path, "outcome", i))?;
                let outcome = text_form(Some(text), "outcome", path, i)?;
                Ok(MemberRecord {
                    recovery: r[i].ok_or_else(|| missing(path, "recovery", i))?,
                    member: Member {
                        entity: e[i].take().ok_or_else(|| missing(path, "entity", i))?,
                        currency: cy[i].take().ok_or_else(|| missing(path, "currency", i))?,
                        cohort: c[i].ok_or_else(|| missing(path, "cohort", i))?,
                        horizon_years: h[i].ok_or_else(|| missing(path, "horizon", i))? as u32,
                        grade: g[i].map(|x| x as u32),
                        bucket: Bucket::Ungraded,
                        curve_date: cd[i].ok_or_else(|| missing(path, "curve_date", i))?,
                        implied_pd: pd[i].ok_or_else(|| missing(path, "implied_pd", i))?,
                        outcome,
                        event_date: ed[i],
                        exposure_years: x[i].ok_or_else(|| missing(path, "exposure_years", i))?,
                        integrated_hazard: ih[i],
                        spread_bp: sp[i],
                    },
                })
            })
            .collect()
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::backtest::Outcome;
    use crate::tables::testing::{refuses_a_missing_column, round_trip};
    use chrono::NaiveDate;

    fn day(d: u32) -> NaiveDate {
        NaiveDate::from_ymd_opt(2024, 5, d).unwrap()
    }

    #[test]
    fn stability_series_round_trips_and_streams_into_a_panel() {
        let rows = vec![
            SeriesPoint {
                series: "pd_1y".into(),
                entity: "Alder Works".into(),
                grade: Some(3),
                date: day(2),
                value: 0.004,
            },
            SeriesPoint {
                series: "hazard_5y".into(),
                entity: "Birch Foods".into(),
                grade: None,
                date: day(3),
                value: 0.02,
            },
        ];
        assert_eq!(round_trip(&rows), rows);
        refuses_a_missing_column(&rows);
        let mut panel = PanelBuilder::default();
        rows.iter().for_each(|p| panel.push_observation(p));
        let dir = tempfile::tempdir().unwrap();
        write_series(&panel, dir.path()).unwrap();
        let mut back = PanelBuilder::default();
        read_series(dir.path(), &mut back).unwrap();
        assert_eq!(back.observations().collect::<Vec<_>>(), panel.observations().collect::<Vec<_>>());
    }

    #[test]
    fn stability_market_and_edges_round_trip() {
        let moves = vec![MarketMove {
            entity: "Alder Works".into(),
            date: day(3),
            mean_abs_change_bp: 1.5,
            mean_level_bp: 120.0,
        }];
        assert_eq!(round_trip(&moves), moves);
        refuses_a_missing_column(&moves);
        let edges = vec![
            SpreadEdge {
                entity: "Alder Works".into(),
                date: day(2),
                last: false,
                spreads: [(12, 80.0), (60, 120.0)].into_iter().collect(),
            },
            SpreadEdge { entity: "Alder Works".into(), date: day(9), last: true, spreads: BTreeMap::new() },
        ];
        let rows = edge_rows(&edges);
        assert_eq!(rows.len(), 3);
        assert_eq!(round_trip(&rows), rows);
        refuses_a_missing_column(&rows);
        assert_eq!(edges_of(&rows), edges);
    }

    #[test]
    fn backtest_members_round_trip() {
        let m = Member {
            entity: "Alder Works".into(),
            currency: "EUR".into(),
            cohort: day(2),
            horizon_years: 1,
            grade: Some(4),
            bucket: Bucket::Ungraded,
            curve_date: day(1),
            implied_pd: 0.012,
            outcome: Outcome::Censored,
            event_date: Some(day(20)),
            exposure_years: 0.4,
            integrated_hazard: Some(0.005),
            spread_bp: None,
        };
        let rows = vec![
            MemberRecord { recovery: 0.4, member: m.clone() },
            MemberRecord {
                recovery: 0.25,
                member: Member {
                    outcome: Outcome::Incomplete,
                    spread_bp: Some(140.0),
                    event_date: None,
                    integrated_hazard: None,
                    ..m
                },
            },
        ];
        assert_eq!(round_trip(&rows), rows);
        refuses_a_missing_column(&rows);
    }
}
