//! Per-period summaries of each series: per entity (level, spread of values, daily moves,
//! moves against the market, calibration counts), and per grade and for the universe (the
//! cross-section of entity means), with period-on-period changes; and per-date cross-sectional
//! quantile bands.
//!
//! Cross-sections use one value per entity: its mean over the period (or, per date, its value
//! that day), so that an entity with more observation days does not weigh more. An entity whose
//! grade changes within a period counts in each grade with the mean of its days in that grade.

use super::inputs::{daily_moves, DailyMove, Panel, PeriodCounts, Point};
use super::period::Period;
use super::settings::StabilitySettings;
use super::summary::{mean, quantile_sorted, quantiles_unsorted, relative_change, sample_sd, sorted};
use chrono::NaiveDate;
use std::collections::BTreeMap;

/// The series name of the rows that carry an entity's calibration counts on their own (so a
/// period in which every calibration failed, and no parameter exists, still has a row).
pub const CALIBRATION_SERIES: &str = "calibration";

/// Who a row summarises.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub enum Scope {
    /// One entity; `key` is the entity.
    Entity,
    /// One internal grade; `key` is the grade number.
    Grade,
    /// All entities; `key` is `all`.
    Universe,
}
crate::text_form!(Scope { Entity => "entity", Grade => "grade", Universe => "universe" });

/// One row of the `stability` table: one series over one review period for one entity, grade
/// or the universe. Statistics that do not apply to the scope are `None`.
#[derive(Debug, Clone, PartialEq)]
pub struct StabilityRow {
    /// Period label (`2024Q1`, ...).
    pub period: String,
    /// Series name (or [`CALIBRATION_SERIES`]).
    pub series: String,
    /// Entity, grade or universe.
    pub scope: Scope,
    /// Entity name, grade number, or `all`.
    pub key: String,
    /// Observations (entity), entities (grade, universe), or dates with counts (calibration).
    pub n: usize,
    /// Mean of the values (entity) or of the entity means (grade, universe).
    pub mean: Option<f64>,
    /// Sample standard deviation of the same values.
    pub sd: Option<f64>,
    /// sd / |mean|; `None` when the mean is zero.
    pub cv: Option<f64>,
    /// Median of the same values.
    pub median: Option<f64>,
    /// 10% quantile of the same values.
    pub p10: Option<f64>,
    /// 90% quantile of the same values.
    pub p90: Option<f64>,
    /// Daily moves ending in the period (entity rows).
    pub moves: Option<usize>,
    /// Largest |daily move| in the series' unit.
    pub max_abs_move: Option<f64>,
    /// Date of that move.
    pub max_move_date: Option<NaiveDate>,
    /// Share of moves over the series' large-move threshold.
    pub large_move_share: Option<f64>,
    /// Mean |relative daily move| of the parameter.
    pub param_rel_move: Option<f64>,
    /// Mean relative daily move of the entity's spreads in the period.
    pub market_rel_move: Option<f64>,
    /// param_rel_move / max(market_rel_move, market_move_floor).
    pub move_ratio: Option<f64>,
    /// Calibration failures of the entity in the period.
    pub failures: Option<u64>,
    /// Infeasible calibrations of the entity in the period.
    pub infeasible: Option<u64>,
    /// Relative change of the mean against the previous period's row of the same key.
    pub mean_change: Option<f64>,
    /// Relative change of the median against the previous period's row of the same key.
    pub median_change: Option<f64>,
}

impl StabilityRow {
    fn blank(period: &Period, series: &str, scope: Scope, key: &str, n: usize) -> StabilityRow {
        StabilityRow {
            period: period.label(),
            series: series.to_string(),
            scope,
            key: key.to_string(),
            n,
            mean: None,
            sd: None,
            cv: None,
            median: None,
            p10: None,
            p90: None,
            moves: None,
            max_abs_move: None,
            max_move_date: None,
            large_move_share: None,
            param_rel_move: None,
            market_rel_move: None,
            move_ratio: None,
            failures: None,
            infeasible: None,
            mean_change: None,
            median_change: None,
        }
    }

    fn with_values(mut self, values: &[f64]) -> StabilityRow {
        let s = sorted(values);
        self.mean = mean(values);
        self.sd = sample_sd(values);
        self.cv = match (self.sd, self.mean) {
            (Some(sd), Some(m)) if m != 0.0 => Some(sd / m.abs()),
            _ => None,
        };
        self.median = quantile_sorted(&s, 0.5);
        self.p10 = quantile_sorted(&s, 0.1);
        self.p90 = quantile_sorted(&s, 0.9);
        self
    }
}

/// Cross-sectional 10/50/90% quantiles of one series on one date.
#[derive(Debug, Clone, PartialEq)]
pub struct CrossSectionRow {
    /// Observation date.
    pub date: NaiveDate,
    /// Label of the date's period.
    pub period: String,
    /// Series name.
    pub series: String,
    /// Grade or universe.
    pub scope: Scope,
    /// Grade number or `all`.
    pub key: String,
    /// Entities observed that day.
    pub n: usize,
    /// 10% quantile.
    pub p10: f64,
    /// Median.
    pub p50: f64,
    /// 90% quantile.
    pub p90: f64,
}

/// Entity-level inputs besides the panel.
pub(crate) struct EntityContext<'a> {
    pub market: &'a BTreeMap<(String, Period), f64>,
    pub counts: &'a BTreeMap<(String, Period), PeriodCounts>,
    pub settings: &'a StabilitySettings,
}

fn group_by_period<T: Copy>(
    items: &[T],
    date: impl Fn(&T) -> NaiveDate,
    settings: &StabilitySettings,
) -> BTreeMap<Period, Vec<T>> {
    let mut out: BTreeMap<Period, Vec<T>> = BTreeMap::new();
    for it in items {
        out.entry(settings.period.of(date(it))).or_default().push(*it);
    }
    out
}

fn set_moves(row: &mut StabilityRow, moves: &[DailyMove], series: &str, settings: &StabilitySettings) {
    row.moves = Some(moves.len());
    let largest = moves.iter().max_by(|a, b| a.abs_change().total_cmp(&b.abs_change()));
    row.max_abs_move = largest.map(DailyMove::abs_change);
    row.max_move_date = largest.map(|m| m.date);
    let threshold = settings.move_threshold(series);
    let large = moves.iter().filter(|m| threshold.exceeded(m.previous, m.value)).count();
    row.large_move_share = (!moves.is_empty()).then(|| large as f64 / moves.len() as f64);
    let rel: Vec<f64> = moves.iter().filter_map(DailyMove::abs_relative).collect();
    row.param_rel_move = mean(&rel);
}

fn entity_period_row(
    series: &str,
    entity: &str,
    period: &Period,
    points: &[Point],
    moves: &[DailyMove],
    ctx: &EntityContext,
) -> StabilityRow {
    let values: Vec<f64> = points.iter().map(|p| p.value).collect();
    let mut row = StabilityRow::blank(period, series, Scope::Entity, entity, values.len()).with_values(&values);
    set_moves(&mut row, moves, series, ctx.settings);
    let key = (entity.to_string(), *period);
    row.market_rel_move = ctx.market.get(&key).copied();
    row.move_ratio = match (row.param_rel_move, row.market_rel_move) {
        (Some(p), Some(m)) => Some(p / m.max(ctx.settings.market_move_floor)),
        _ => None,
    };
    let counts = ctx.counts.get(&key).copied().unwrap_or_default();
    row.failures = Some(counts.failures);
    row.infeasible = Some(counts.infeasible);
    row
}

/// Entity rows of every series and period (periods with at least one observation).
pub(crate) fn entity_rows(panel: &Panel, ctx: &EntityContext) -> Vec<(Period, StabilityRow)> {
    use rayon::prelude::*;
    // Histories are independent: in parallel, concatenated in panel order.
    let histories: Vec<(&(String, String), &Vec<Point>)> = panel.iter().collect();
    let per_history: Vec<Vec<(Period, StabilityRow)>> = histories
        .par_iter()
        .map(|((series, entity), points)| {
            let moves = group_by_period(&daily_moves(points, ctx.settings.max_gap_days), |m| m.date, ctx.settings);
            group_by_period(points, |p| p.date, ctx.settings)
                .into_iter()
                .map(|(period, pts)| {
                    let mv = moves.get(&period).map_or(&[][..], Vec::as_slice);
                    let row = entity_period_row(series, entity, &period, &pts, mv, ctx);
                    (period, row)
                })
                .collect()
        })
        .collect();
    per_history.into_iter().flatten().collect()
}

/// One [`CALIBRATION_SERIES`] row per (entity, period) with calibration counts.
pub(crate) fn calibration_rows(counts: &BTreeMap<(String, Period), PeriodCounts>) -> Vec<(Period, StabilityRow)> {
    counts
        .iter()
        .map(|((entity, period), c)| {
            let mut row = StabilityRow::blank(period, CALIBRATION_SERIES, Scope::Entity, entity, c.dates);
            row.failures = Some(c.failures);
            row.infeasible = Some(c.infeasible);
            (*period, row)
        })
        .collect()
}

type GroupKey = (String, Period, Scope, String);

/// Entity means per (series, period, scope, key), for grade and universe cross-sections.
///
/// Each history's means per period are worked out on its own (histories in parallel), then
/// pushed to their groups in panel order, as one pass over the panel pushes them, so each
/// group's means are in the same order (and the grade and universe rows' sums the same).
/// The histories of one series are consecutive in the panel: their means gather under keys
/// without the series' name, which each group gets once, when the series ends.
pub(crate) fn entity_means(panel: &Panel, settings: &StabilitySettings) -> BTreeMap<GroupKey, Vec<f64>> {
    use rayon::prelude::*;
    /// A history's mean of all its values in a period and of each grade's values (grades in
    /// order; None where the mean is undefined).
    type PeriodMeans = (Period, Option<f64>, Vec<(u32, Option<f64>)>);
    let histories: Vec<(&(String, String), &Vec<Point>)> = panel.iter().collect();
    let per_history: Vec<Vec<PeriodMeans>> = histories
        .par_iter()
        .map(|(_, points)| {
            group_by_period(points, |p| p.date, settings)
                .into_iter()
                .map(|(period, pts)| {
                    let all: Vec<f64> = pts.iter().map(|p| p.value).collect();
                    let mut by_grade: BTreeMap<u32, Vec<f64>> = BTreeMap::new();
                    for p in &pts {
                        if let Some(g) = p.grade() {
                            by_grade.entry(g).or_default().push(p.value);
                        }
                    }
                    (period, mean(&all), by_grade.into_iter().map(|(g, v)| (g, mean(&v))).collect())
                })
                .collect()
        })
        .collect();
    let mut groups: BTreeMap<GroupKey, Vec<f64>> = BTreeMap::new();
    // The current series' groups: (period, scope, grade; 0 for the universe).
    let mut series_groups: BTreeMap<(Period, Scope, u32), Vec<f64>> = BTreeMap::new();
    let flush = |series: &str,
                 series_groups: &mut BTreeMap<(Period, Scope, u32), Vec<f64>>,
                 groups: &mut BTreeMap<GroupKey, Vec<f64>>| {
        for ((period, scope, g), v) in std::mem::take(series_groups) {
            let key = if scope == Scope::Universe { "all".to_string() } else { g.to_string() };
            groups.entry((series.to_string(), period, scope, key)).or_default().extend(v);
        }
    };
    let mut current: Option<&str> = None;
    for (((series, _), _), periods) in histories.iter().zip(per_history) {
        if current != Some(series.as_str()) {
            if let Some(done) = current {
                flush(done, &mut series_groups, &mut groups);
            }
            current = Some(series.as_str());
        }
        for (period, all, grades) in periods {
            if let Some(m) = all {
                series_groups.entry((period, Scope::Universe, 0)).or_default().push(m);
            }
            for (g, m) in grades {
                if let Some(m) = m {
                    series_groups.entry((period, Scope::Grade, g)).or_default().push(m);
                }
            }
        }
    }
    if let Some(done) = current {
        flush(done, &mut series_groups, &mut groups);
    }
    groups
}

/// Grade and universe rows from the entity means.
pub(crate) fn group_rows(means: &BTreeMap<GroupKey, Vec<f64>>) -> Vec<(Period, StabilityRow)> {
    means
        .iter()
        .map(|((series, period, scope, key), v)| {
            (*period, StabilityRow::blank(period, series, *scope, key, v.len()).with_values(v))
        })
        .collect()
}

/// Fills the period-on-period changes of the mean and the median: each row against the row of
/// the same series, scope and key in the immediately preceding period (none if that is absent).
pub(crate) fn fill_changes(rows: &mut [(Period, StabilityRow)]) {
    type Centre = (Option<f64>, Option<f64>);
    // Keyed by the rows' own texts (no copy per row); a key met twice keeps its last row, as a
    // map collected from the rows does.
    let base: crate::hash::FastMap<(&str, Scope, &str, Period), Centre> =
        rows.iter().map(|(p, r)| ((r.series.as_str(), r.scope, r.key.as_str(), *p), (r.mean, r.median))).collect();
    let changes: Vec<Option<Centre>> = rows
        .iter()
        .map(|(p, r)| {
            let &(m0, med0) = base.get(&(r.series.as_str(), r.scope, r.key.as_str(), p.previous()))?;
            Some((
                m0.zip(r.mean).and_then(|(a, b)| relative_change(a, b)),
                med0.zip(r.median).and_then(|(a, b)| relative_change(a, b)),
            ))
        })
        .collect();
    drop(base);
    for ((_, r), change) in rows.iter_mut().zip(changes) {
        if let Some((mean_change, median_change)) = change {
            r.mean_change = mean_change;
            r.median_change = median_change;
        }
    }
}

/// Per-date 10/50/90% bands of each series, for the universe and per grade. Each series is
/// grouped on its own (series in parallel), by date and grade, and its rows come out in the
/// order of the owned (series, scope, key, date) keys: grade rows (by grade label, then date)
/// before universe rows (the order of `Scope`).
pub(crate) fn cross_sections(panel: &Panel, settings: &StabilitySettings) -> Vec<CrossSectionRow> {
    use rayon::prelude::*;
    // Inserted one by one: collecting an iterator into a map first gathers every item in a
    // vector (here a grade and a string per point, 1.7 GB at 1,000 names x 10 years).
    let mut grade_labels: BTreeMap<u32, String> = BTreeMap::new();
    for g in panel.values().flatten().filter_map(|p| p.grade()) {
        grade_labels.entry(g).or_insert_with(|| g.to_string());
    }
    // The panel is ordered by (series, entity): each series' histories are consecutive.
    let mut series: Vec<(&str, Vec<&Vec<Point>>)> = Vec::new();
    for ((name, _), points) in panel {
        match series.last_mut() {
            Some((s, v)) if *s == name.as_str() => v.push(points),
            _ => series.push((name.as_str(), vec![points])),
        }
    }
    let per_series: Vec<Vec<CrossSectionRow>> = series
        .par_iter()
        .map(|(name, histories)| {
            let mut universe: std::collections::HashMap<NaiveDate, Vec<f64>> = Default::default();
            let mut grades: std::collections::HashMap<(u32, NaiveDate), Vec<f64>> = Default::default();
            for p in histories.iter().flat_map(|h| h.iter()) {
                universe.entry(p.date).or_default().push(p.value);
                if let Some(g) = p.grade().filter(|g| grade_labels.contains_key(g)) {
                    grades.entry((g, p.date)).or_default().push(p.value);
                }
            }
            let mut grade_rows: Vec<((&str, NaiveDate), Vec<f64>)> =
                grades.into_iter().map(|((g, d), v)| ((grade_labels[&g].as_str(), d), v)).collect();
            grade_rows.sort_by(|a, b| a.0.cmp(&b.0));
            let mut universe_rows: Vec<(NaiveDate, Vec<f64>)> = universe.into_iter().collect();
            universe_rows.sort_by_key(|(d, _)| *d);
            let rows = grade_rows
                .into_iter()
                .map(|((key, date), v)| (Scope::Grade, key, date, v))
                .chain(universe_rows.into_iter().map(|(date, v)| (Scope::Universe, "all", date, v)));
            let mut out = Vec::new();
            for (scope, key, date, mut v) in rows {
                if let [Some(p10), Some(p50), Some(p90)] = quantiles_unsorted(&mut v, &[0.1, 0.5, 0.9])[..] {
                    out.push(CrossSectionRow {
                        date,
                        period: settings.period.of(date).label(),
                        series: name.to_string(),
                        scope,
                        key: key.to_string(),
                        n: v.len(),
                        p10,
                        p50,
                        p90,
                    });
                }
            }
            out
        })
        .collect();
    per_series.into_iter().flatten().collect()
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::stability::inputs::Point;
    use crate::stability::ReviewPeriod;

    /// The means and changes as one pass over the panel works them out (the form before the
    /// histories were taken in parallel and the rows' texts borrowed).
    fn entity_means_one_pass(panel: &Panel, settings: &StabilitySettings) -> BTreeMap<GroupKey, Vec<f64>> {
        let push = |groups: &mut BTreeMap<GroupKey, Vec<f64>>, key: GroupKey, values: &[f64]| {
            if let Some(m) = mean(values) {
                groups.entry(key).or_default().push(m);
            }
        };
        let mut groups: BTreeMap<GroupKey, Vec<f64>> = BTreeMap::new();
        for ((series, _), points) in panel {
            for (period, pts) in group_by_period(points, |p| p.date, settings) {
                let all: Vec<f64> = pts.iter().map(|p| p.value).collect();
                push(&mut groups, (series.clone(), period, Scope::Universe, "all".into()), &all);
                let mut by_grade: BTreeMap<u32, Vec<f64>> = BTreeMap::new();
                for p in &pts {
                    if let Some(g) = p.grade() {
                        by_grade.entry(g).or_default().push(p.value);
                    }
                }
                for (g, v) in by_grade {
                    push(&mut groups, (series.clone(), period, Scope::Grade, g.to_string()), &v);
                }
            }
        }
        groups
    }

    fn fill_changes_one_pass(rows: &mut [(Period, StabilityRow)]) {
        type Centre = (Option<f64>, Option<f64>);
        let base: BTreeMap<(String, Scope, String, Period), Centre> =
            rows.iter().map(|(p, r)| ((r.series.clone(), r.scope, r.key.clone(), *p), (r.mean, r.median))).collect();
        for (p, r) in rows.iter_mut() {
            let Some(&(m0, med0)) = base.get(&(r.series.clone(), r.scope, r.key.clone(), p.previous())) else {
                continue;
            };
            r.mean_change = m0.zip(r.mean).and_then(|(a, b)| relative_change(a, b));
            r.median_change = med0.zip(r.median).and_then(|(a, b)| relative_change(a, b));
        }
    }

    /// The entity means gathered from histories worked out apart, and the changes from the
    /// rows' borrowed texts, are the one-pass forms' bit for bit: three series, 60 entities
    /// with grades that change and entities with none, two years of points with gaps, values
    /// whose sums depend on their order; and the grade and universe rows made from them.
    #[test]
    fn means_and_changes_are_the_one_pass_forms() {
        let mut rng = crate::sim::rng::Rng::new(99);
        let mut next = move || rng.uniform();
        let start = NaiveDate::from_ymd_opt(2022, 1, 3).unwrap();
        let mut panel: Panel = BTreeMap::new();
        for series in ["hazard_5y", "pd_1y", "zz_other"] {
            for e in 0..60 {
                let mut points = Vec::new();
                for day in 0..730 {
                    if next() < 0.3 {
                        continue;
                    }
                    let grade = if e % 7 == 0 { None } else { Some(((e + day / 200) % 5) as u32) };
                    let value = (1.0 + next()) * 10f64.powi((e % 5) - 3);
                    points.push(Point::new(start + chrono::Days::new(day as u64), value, grade));
                }
                panel.insert((series.to_string(), format!("Name {e:02}")), points);
            }
        }
        for period in [ReviewPeriod::Quarter, ReviewPeriod::Month] {
            let settings = StabilitySettings { period, ..StabilitySettings::default() };
            let (got, want) = (entity_means(&panel, &settings), entity_means_one_pass(&panel, &settings));
            assert_eq!(got.len(), want.len());
            assert!(got.len() > 100, "{} groups", got.len());
            for ((kg, vg), (kw, vw)) in got.iter().zip(&want) {
                assert_eq!(kg, kw);
                assert_eq!(
                    vg.iter().map(|v| v.to_bits()).collect::<Vec<_>>(),
                    vw.iter().map(|v| v.to_bits()).collect::<Vec<_>>(),
                    "{kg:?}"
                );
            }
            let mut rows = group_rows(&got);
            let mut reference = rows.clone();
            fill_changes(&mut rows);
            fill_changes_one_pass(&mut reference);
            assert!(rows.iter().filter(|(_, r)| r.mean_change.is_some()).count() > 50);
            assert_eq!(format!("{rows:?}"), format!("{reference:?}"));
        }
    }
}
