//! The backtest stage of a run: cohorts from the calibrated curves, grades and defaults,
//! bucket tests, risk premia, recovery scenarios (curves re-bootstrapped at the cohort dates
//! with a shifted recovery), and the cohort-history comparison; and its tables.

use crate::backtest::cohort_dates;
use crate::backtest::{
    self, compare_cohort_history, BacktestOutput, BacktestSettings, CohortHistoryRecord, CurveSet, DatedCurve,
    EntityFacts, GradeSpell, HistoryRow, QuotedSpread,
};
use crate::calibrate::{bootstrap, BootstrapQuote};
use crate::config::BacktestStage;
use crate::error::{Error, Result};
use crate::ingest::Dataset;
use crate::instruments::CdsQuote;
use crate::stages::calibrate::{Calibration, CalibrationParams};
use crate::tables::{self, BucketRecord, DiscriminationRecord, HosmerLemeshowRecord, TermStructureRecord};
use chrono::NaiveDate;
use rayon::prelude::*;
use std::collections::{BTreeMap, BTreeSet};
use std::path::Path;

/// The stage's results.
#[derive(Debug, Clone, Default)]
pub struct BacktestResults {
    /// Base recovery first, then the scenarios.
    pub outputs: Vec<BacktestOutput>,
    pub history: Vec<HistoryRow>,
    pub cohort_dates: Vec<NaiveDate>,
    /// Where realised outcomes came from: `entity_defaults`, `cohort_history` or both.
    pub outcome_sources: Vec<&'static str>,
    /// Entities with a defaults row but no curve (reported, not used).
    pub defaults_without_curves: usize,
    /// The last date outcomes are observed to (configured, or the last curve date).
    pub outcome_end: Option<NaiveDate>,
    /// One status per test family, from the base recovery's rows.
    pub verdicts: Vec<backtest::VerdictRow>,
    /// One-year grade migration, per cohort year and pooled.
    pub migration: Vec<backtest::MigrationRow>,
}

/// The par-spread quotes of a curve in bp by tenor (upfront quotes have no par spread).
pub fn spreads_of(quotes: &[BootstrapQuote]) -> Vec<QuotedSpread> {
    spread_quotes(quotes).collect()
}

/// [`spreads_of`] one by one.
pub fn spread_quotes(quotes: &[BootstrapQuote]) -> impl Iterator<Item = QuotedSpread> + '_ {
    quotes.iter().filter_map(|q| match q.quote {
        CdsQuote::ParSpread(s) => Some(QuotedSpread { tenor_months: q.tenor.months(), spread_bp: s * 1e4 }),
        CdsQuote::Upfront { .. } => None,
    })
}

/// Entity facts of the entities with curves: grade spells, first default, and the end of
/// coverage from the entities table (none: covered to the outcome end). The end of an
/// entity's quotes censors nothing: the defaults table observes every entity it covers.
fn facts<'a>(ds: &Dataset, entities: impl Iterator<Item = &'a String>) -> Vec<EntityFacts> {
    let mut spells: BTreeMap<&str, Vec<GradeSpell>> = BTreeMap::new();
    if let Some(g) = &ds.grades {
        for (r, _) in &g.rows {
            spells.entry(r.entity.as_str()).or_default().push(GradeSpell { from_date: r.from_date, grade: r.grade });
        }
    }
    let mut coverage: BTreeMap<&str, NaiveDate> = BTreeMap::new();
    if let Some(t) = &ds.entities {
        for (r, _) in &t.rows {
            if let Some(end) = r.coverage_end {
                coverage.insert(r.entity.as_str(), end);
            }
        }
    }
    let defaults = first_defaults(ds);
    entities
        .map(|e| EntityFacts {
            entity: e.clone(),
            grades: spells.get(e.as_str()).cloned().unwrap_or_default(),
            default_date: defaults.get(e.as_str()).copied(),
            coverage_end: coverage.get(e.as_str()).copied(),
        })
        .collect()
}

/// Entity facts of every entity of the grades table, for the migration matrices (which need
/// no curve).
pub fn graded_facts(ds: &Dataset) -> Vec<EntityFacts> {
    let names: BTreeSet<String> =
        ds.grades.as_ref().map(|g| g.rows.iter().map(|(r, _)| r.entity.clone()).collect()).unwrap_or_default();
    facts(ds, names.iter())
}

/// Where the calibrated CDS curves lie: the first and last curve date, and each entity's
/// last curve date. Gathered as the curves stream past, so the curves themselves need not be
/// kept for it.
#[derive(Debug, Clone, Default)]
pub struct CurveCoverage {
    pub dates: Option<(NaiveDate, NaiveDate)>,
    /// Asked once per curve (millions): FNV hashing rather than an ordered map.
    pub last_by_entity: crate::hash::FastMap<String, NaiveDate>,
}

impl CurveCoverage {
    pub fn add(&mut self, date: NaiveDate, entity: &str) {
        self.dates = Some(self.dates.map_or((date, date), |(a, b)| (a.min(date), b.max(date))));
        match self.last_by_entity.get_mut(entity) {
            Some(d) => *d = (*d).max(date),
            None => {
                self.last_by_entity.insert(entity.to_string(), date);
            }
        }
    }
}

/// Whether a curve dated `date` can serve some cohort of a run whose quotes span `period`:
/// it lies within the look-back on or before a cohort date. The cohort dates of the run (or of
/// a shard, see [`backtest_members_stage`]) are a subset of those counted here, so the curves
/// this keeps are all the members can ask for.
pub fn may_serve_a_cohort(
    period: Option<(NaiveDate, NaiveDate)>,
    p: &CalibrationParams,
    stage: &BacktestStage,
) -> impl Fn(NaiveDate) -> bool {
    let lookback = stage.core.lookback_days.max(0);
    let mut dates = period
        .map(|(a, b)| {
            cohort_dates(
                a,
                b.checked_add_signed(chrono::Duration::days(lookback)).unwrap_or(b),
                stage.frequency,
                &p.calendar,
            )
        })
        .unwrap_or_default();
    dates.sort();
    move |d| dates.get(dates.partition_point(|t| *t < d)).is_some_and(|t| (*t - d).num_days() <= lookback)
}

/// The discrimination rows of a reference run at `recovery` (this run's base recovery); when
/// the reference holds none at that recovery, all of its rows (their first match is used).
pub fn reference_discrimination(run: &Path, recovery: f64) -> Result<Vec<backtest::DiscriminationRow>> {
    let rows = tables::read_from::<DiscriminationRecord>(&run.join("tables").join("backtest_discrimination.parquet"))?;
    let same: Vec<backtest::DiscriminationRow> =
        rows.iter().filter(|r| (r.recovery - recovery).abs() < 1e-9).map(|r| r.row.clone()).collect();
    Ok(if same.is_empty() { rows.into_iter().map(|r| r.row).collect() } else { same })
}

/// The first default date per entity of the defaults table.
pub fn first_defaults(ds: &Dataset) -> BTreeMap<&str, NaiveDate> {
    let mut defaults: BTreeMap<&str, NaiveDate> = BTreeMap::new();
    if let Some(d) = &ds.defaults {
        for (r, _) in &d.rows {
            let slot = defaults.entry(r.entity.as_str()).or_insert(r.default_date);
            if r.default_date < *slot {
                *slot = r.default_date;
            }
        }
    }
    defaults
}

/// The base curve set: the fully calibrated CDS curves a cohort can use, those dated within
/// `lookback` days on or before a cohort date (`dates` sorted). A member only ever looks up
/// the latest curve in that window ([`CurveSet::latest_within`]), so no other is copied.
fn base_curves(cal: &Calibration, recovery: f64, dates: &[NaiveDate], lookback: i64) -> CurveSet {
    let usable =
        |d: NaiveDate| dates.get(dates.partition_point(|t| *t < d)).is_some_and(|t| (*t - d).num_days() <= lookback);
    CurveSet::from_keyed(
        recovery,
        cal.cds_curves.iter().filter(|((d, _, _), _)| usable(*d)).filter_map(|((d, e, ccy), c)| {
            c.curve.as_ref().map(|h| {
                let dc =
                    DatedCurve { date: *d, currency: ccy.clone(), curve: h.clone(), spreads: spreads_of(&c.quotes) };
                (e.clone(), dc)
            })
        }),
    )
}

/// A recovery scenario: the curves a cohort uses, re-bootstrapped with `recovery` on every
/// quote (quotes carrying their own recovery included: the scenario shifts the assumption).
fn scenario_curves(
    cal: &Calibration,
    base: &CurveSet,
    dates: &[NaiveDate],
    lookback: i64,
    recovery: f64,
    p: &CalibrationParams,
) -> CurveSet {
    let mut wanted: BTreeSet<(NaiveDate, String)> = BTreeSet::new();
    for e in base.curves.keys() {
        for &t in dates {
            if let Some(c) = base.latest_within(e, t, lookback) {
                wanted.insert((c.date, e.clone()));
            }
        }
    }
    let by_key: BTreeMap<(NaiveDate, &str), (&String, &crate::stages::calibrate::CdsCurve)> =
        cal.cds_curves.iter().map(|((d, e, c), v)| ((*d, e.as_str()), (c, v))).collect();
    let wanted: Vec<(NaiveDate, String)> = wanted.into_iter().collect();
    let items: Vec<_> = wanted
        .par_iter()
        .filter_map(|(d, e)| {
            let (ccy, curve) = by_key.get(&(*d, e.as_str()))?;
            let disc = cal.discount_curves.get(&(*d, (*ccy).clone()))?;
            let quotes: Vec<BootstrapQuote> = curve.quotes.iter().map(|q| BootstrapQuote { recovery, ..*q }).collect();
            let fit = bootstrap(*d, &quotes, disc, p.cds_calendar(ccy), &p.bootstrap).ok()?;
            if fit.failed {
                return None;
            }
            let h = fit.curve?;
            (h.hazards().len() == quotes.len()).then(|| {
                (
                    e.clone(),
                    DatedCurve { date: *d, currency: (*ccy).clone(), curve: h, spreads: spreads_of(&curve.quotes) },
                )
            })
        })
        .collect();
    CurveSet::from_keyed(recovery, items)
}

/// The members of every cohort, per recovery (base first, then each scenario that differs
/// from it), for the entities this calibration covers.
///
/// The cohort dates of a run follow from the first and last curve date of the whole universe,
/// which one part (of an entity shard or a date range) does not know; members are built for
/// every cohort date a kept curve can reach (within the part's date range), and
/// [`backtest_from_members`] keeps those of the run's cohort dates. Every member depends on its
/// entity alone, and on the curves within the look-back before its cohort date (a date range's
/// part calibrates those as a margin), so the parts' members concatenate exactly. Outcomes
/// are observed to the run's outcome end (`scope.outcome_end`, a fact of the whole input), so
/// a window it cuts keeps its exact integrated hazard.
///
/// `cal.cds_curves` needs to hold only the curves [`may_serve_a_cohort`] keeps.
pub fn backtest_members_stage(
    ds: &Dataset,
    cal: &Calibration,
    scope: &crate::parts::DateScope,
    p: &CalibrationParams,
    stage: &BacktestStage,
) -> Result<Vec<(f64, Vec<backtest::Observation>)>> {
    // A member needs a curve of the kept set within the look-back on or before its cohort
    // date, so the cohort dates worth building lie between the first kept curve and the last
    // one plus the look-back; a part of a date range builds those in its range (the run's
    // cohort dates are a whole-history fact: the merge keeps those, see
    // `backtest_from_members`).
    let lookback = chrono::Duration::days(stage.core.lookback_days.max(0));
    let kept_first = cal.cds_curves.keys().map(|k| k.0).min();
    let kept_last = cal.cds_curves.keys().map(|k| k.0).max();
    let (Some(first), Some(reach)) = (
        scope.range.from.or(kept_first),
        scope.range.to.or(kept_last.map(|d| d.checked_add_signed(lookback).unwrap_or(d))),
    ) else {
        return Ok(Vec::new());
    };
    let dates = cohort_dates(first, reach, stage.frequency, &p.calendar);
    if dates.is_empty() {
        return Ok(Vec::new());
    }
    let core = BacktestSettings { cohort_dates: dates.clone(), outcome_end: scope.outcome_end, ..stage.core.clone() };
    let mk = |e: backtest::BacktestError| Error::Stage { stage: "backtest", source: e.into() };
    core.check().map_err(mk)?;
    let mut sorted = dates.clone();
    sorted.sort();
    let base = base_curves(cal, p.recovery, &sorted, core.lookback_days);
    let facts = facts(ds, base.curves.keys());
    let mut out = vec![(p.recovery, backtest::member_observations(&facts, &base, &core).map_err(mk)?)];
    for &r in &stage.recovery_scenarios {
        if (r - p.recovery).abs() < 1e-12 {
            continue;
        }
        let set = scenario_curves(cal, &base, &dates, core.lookback_days, r, p);
        out.push((r, backtest::member_observations(&facts, &set, &core).map_err(mk)?));
    }
    Ok(out)
}

/// What the backtest needs besides the members: the run's curve-date range, and the
/// outcome tables of the inputs.
pub struct BacktestContext<'a> {
    /// First and last CDS curve date of the whole run.
    pub curve_dates: Option<(NaiveDate, NaiveDate)>,
    /// The run's outcome end (the parts built their members with the same).
    pub outcome_end: Option<NaiveDate>,
    /// Every graded entity, for the migration matrices.
    pub graded: Vec<EntityFacts>,
    /// The pooled discrimination rows of the reference run (its base recovery), if one is set.
    pub reference: Vec<backtest::DiscriminationRow>,
    pub have_defaults: bool,
    pub cohort_history: Option<&'a crate::ingest::tables::Rows<crate::ingest::tables::CohortHistoryRow>>,
    /// Entities with a defaults row but no curve.
    pub defaults_without_curves: usize,
}

/// The stage's results from the members of every partition (concatenated in any order: they
/// are put in cohort, entity, horizon order here).
pub fn backtest_from_members(
    mut members: Vec<(f64, Vec<backtest::Observation>)>,
    ctx: &BacktestContext,
    p: &CalibrationParams,
    stage: &BacktestStage,
) -> Result<BacktestResults> {
    let Some((first, last)) = ctx.curve_dates else {
        return Ok(BacktestResults::default());
    };
    let dates = cohort_dates(first, last, stage.frequency, &p.calendar);
    let mut results = BacktestResults {
        cohort_dates: dates.clone(),
        defaults_without_curves: ctx.defaults_without_curves,
        ..Default::default()
    };
    if dates.is_empty() {
        return Ok(results);
    }
    // Outcomes are observed to the study's outcome end: the configured date, else the last
    // quote date of the input (the end of the input period).
    let outcome_end = ctx.outcome_end.or(stage.core.outcome_end).unwrap_or(last);
    let core = BacktestSettings { cohort_dates: dates.clone(), outcome_end: Some(outcome_end), ..stage.core.clone() };
    let mk = |e: backtest::BacktestError| Error::Stage { stage: "backtest", source: e.into() };
    let order = core.member_horizons();
    let horizon_rank = |h: u32| order.iter().position(|x| *x == h).unwrap_or(usize::MAX);
    let wanted: BTreeSet<NaiveDate> = dates.iter().copied().collect();
    let mut outputs = Vec::new();
    for (recovery, obs) in members.iter_mut() {
        obs.retain(|o| wanted.contains(&o.cohort));
        obs.sort_by(|a, b| {
            (a.cohort, &a.entity, horizon_rank(a.horizon_years)).cmp(&(
                b.cohort,
                &b.entity,
                horizon_rank(b.horizon_years),
            ))
        });
        outputs.push(backtest::backtest_members(std::mem::take(obs), &core, *recovery).map_err(mk)?);
    }
    if outputs.is_empty() {
        // No curve reached a cohort date: the base set is empty.
        outputs.push(backtest::backtest_members(Vec::new(), &core, p.recovery).map_err(mk)?);
    }
    if ctx.have_defaults {
        results.outcome_sources.push("entity_defaults");
    }
    if let Some(h) = ctx.cohort_history {
        let records: Vec<CohortHistoryRecord> = h
            .rows
            .iter()
            .map(|(r, _)| CohortHistoryRecord {
                year: r.year,
                grade: r.grade,
                obligors: r.obligors,
                defaults: r.defaults,
                withdrawn: r.withdrawn,
            })
            .collect();
        results.history =
            compare_cohort_history(&records, &outputs[0].buckets, &outputs[0].risk_premia, core.level, &core.zones)
                .map_err(|e| Error::Stage { stage: "backtest (cohort history)", source: e.into() })?;
        results.outcome_sources.push("cohort_history");
    }
    // Without a defaults table the entity-level outcomes are unknown (every member would look
    // like a survivor): only the implied PDs are used, against the cohort history.
    // The reference is read at the base recovery, so only the base rows are compared.
    if let Some(base) = outputs.first_mut() {
        backtest::compare_with_reference(&mut base.discrimination, &ctx.reference);
    }
    results.outputs = if ctx.have_defaults { outputs } else { Vec::new() };
    results.outcome_end = Some(outcome_end);
    results.migration = backtest::migration_rows(&ctx.graded, &dates, outcome_end).map_err(mk)?;
    if let Some(base) = results.outputs.first() {
        results.verdicts = backtest::verdict_rows(base, &core);
    }
    Ok(results)
}

/// Writes `backtest_members`, `backtest_buckets`, `backtest_hosmer_lemeshow`,
/// `backtest_discrimination`, `backtest_term_structure`, `backtest_verdicts`,
/// `backtest_migration`, `risk_premia` and (with a cohort history)
/// `backtest_history`. Rows of every recovery scenario are in the same tables, told apart by
/// their `recovery` column; the verdicts are the base recovery's.
pub fn write_backtest_tables(r: &BacktestResults, dir: &Path, meta: &[(String, String)]) -> Result<()> {
    let members: Vec<tables::parts::MemberRecord> = r
        .outputs
        .iter()
        .flat_map(|o| {
            o.members.iter().map(move |m| tables::parts::MemberRecord { recovery: o.recovery, member: m.clone() })
        })
        .collect();
    let disc: Vec<DiscriminationRecord> = r
        .outputs
        .iter()
        .flat_map(|o| {
            o.discrimination.iter().map(move |d| DiscriminationRecord { recovery: o.recovery, row: d.clone() })
        })
        .collect();
    let ts: Vec<TermStructureRecord> = r
        .outputs
        .iter()
        .flat_map(|o| {
            o.term_structure.iter().map(move |t| TermStructureRecord { recovery: o.recovery, row: t.clone() })
        })
        .collect();
    let buckets: Vec<BucketRecord> = r
        .outputs
        .iter()
        .flat_map(|o| o.buckets.iter().map(move |b| BucketRecord { recovery: o.recovery, row: b.clone() }))
        .collect();
    let hl: Vec<HosmerLemeshowRecord> = r
        .outputs
        .iter()
        .flat_map(|o| {
            o.hosmer_lemeshow.iter().map(move |b| HosmerLemeshowRecord { recovery: o.recovery, row: b.clone() })
        })
        .collect();
    let rp: Vec<backtest::RiskPremiumRow> = r.outputs.iter().flat_map(|o| o.risk_premia.iter().cloned()).collect();
    // Each table is its own file: written side by side.
    tables::write_all(vec![
        Box::new(|| tables::write(&members, dir, meta)),
        Box::new(|| tables::write(&disc, dir, meta)),
        Box::new(|| tables::write(&ts, dir, meta)),
        Box::new(|| tables::write(&r.verdicts, dir, meta)),
        Box::new(|| tables::write(&r.migration, dir, meta)),
        Box::new(|| tables::write(&buckets, dir, meta)),
        Box::new(|| tables::write(&hl, dir, meta)),
        Box::new(|| tables::write(&rp, dir, meta)),
        Box::new(|| tables::write(&r.history, dir, meta)),
    ])
}
