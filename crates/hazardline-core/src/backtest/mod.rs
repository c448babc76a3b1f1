//! Backtest core: cohorts of calibrated names, implied PD against realised defaults, binomial
//! and Hosmer-Lemeshow tests per bucket, and the risk premium lambda_Q / lambda_P.
//!
//! Reads plain structs (no tables, no I/O): per entity its grade history, default date and the
//! last date its data covers ([`EntityFacts`]), and one or more [`CurveSet`]s, calibrated hazard
//! curves keyed by (date, entity) together with the recovery they were calibrated with. Writes
//! rows shaped like the `backtest_buckets` and `risk_premia` tables of docs/design.md, "Output tables"
//! ([`BucketRow`], [`HosmerLemeshowRow`], [`RiskPremiumRow`]) and, from an institution's own
//! counts, [`HistoryRow`]s.
//!
//! Conventions (docs/design.md, "Backtest and risk premium"):
//! - members at cohort date t: not defaulted on or before t, data covering t, and a curve dated
//!   within `lookback_days` before or at t (the latest such curve);
//! - the curve is used as of its own date: implied PD for horizon h is 1 - S(h) read from that
//!   curve at time h, as if it had been calibrated at t. The gap between curve date and t (at
//!   most the look-back) is not rolled forward; with a short look-back that is the honest
//!   choice, since rolling a piecewise-flat curve forward would invent a term structure;
//! - horizon end = t + 12 h calendar months; h in years on Act/365F from t to that date;
//! - outcome: default in (t, t + h]; otherwise censored when the data ends before t + h, else
//!   survived. [`CensoringPolicy`] decides whether censored members count in n;
//! - exposure: from t to the default, the end of the data or the horizon end, whichever comes
//!   first (exact under censoring).
//!
//! Must not: read files, log, or panic; every problem is a [`BacktestError`] or a row status.

pub mod buckets;
pub mod calendar;
pub mod cohort;
pub mod history;
pub mod premia;

pub use buckets::{bucket_rows, hosmer_lemeshow_rows, BucketRow, HosmerLemeshowRow};
pub use calendar::{cohort_dates, CohortFrequency, GradeBook};
pub use cohort::{bucket_observations, build_observations, member_observations, Bucket, Observation, Outcome};
pub use history::{compare_cohort_history, CohortHistoryRecord, HistoryRow};
pub use premia::{risk_premium_rows, RiskPremiumRow};

use crate::curves::HazardCurve;
use crate::stats::{StatsError, ZoneThresholds};
use chrono::NaiveDate;
use std::collections::BTreeMap;

/// One spell of an internal grade (1 = best), in force from `from_date`.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct GradeSpell {
    pub from_date: NaiveDate,
    pub grade: u32,
}

/// What is known about an entity apart from its curves.
#[derive(Debug, Clone, PartialEq)]
pub struct EntityFacts {
    pub entity: String,
    /// Grade history in any order; the grade as of t is the spell with the latest from_date <= t.
    pub grades: Vec<GradeSpell>,
    pub default_date: Option<NaiveDate>,
    /// The last date the entity's data covers (quotes, or the end of the observation period).
    pub data_end: NaiveDate,
}

/// A quoted par spread in bp for a tenor in months, quoted on a curve date.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct QuotedSpread {
    pub tenor_months: u32,
    pub spread_bp: f64,
}

/// One calibrated curve of one entity on one date, with the spreads quoted that day.
#[derive(Debug, Clone, PartialEq)]
pub struct DatedCurve {
    pub date: NaiveDate,
    pub curve: HazardCurve,
    pub spreads: Vec<QuotedSpread>,
}

/// All calibrated curves of one calibration run, and the recovery they assume. A recovery
/// scenario is just another `CurveSet` (curves recalibrated with another recovery).
#[derive(Debug, Clone, PartialEq, Default)]
pub struct CurveSet {
    pub recovery: f64,
    /// Per entity, curves sorted by date (see [`CurveSet::from_keyed`]).
    pub curves: BTreeMap<String, Vec<DatedCurve>>,
}

impl CurveSet {
    /// Builds the set from curves keyed by (date, entity), the way the calibration stage emits
    /// them; spreads may be empty. A later duplicate (date, entity) replaces an earlier one.
    pub fn from_keyed(
        recovery: f64,
        items: impl IntoIterator<Item = ((NaiveDate, String), HazardCurve, Vec<QuotedSpread>)>,
    ) -> CurveSet {
        let mut by_entity: BTreeMap<String, BTreeMap<NaiveDate, DatedCurve>> = BTreeMap::new();
        for ((date, entity), curve, spreads) in items {
            by_entity.entry(entity).or_default().insert(date, DatedCurve { date, curve, spreads });
        }
        let curves = by_entity.into_iter().map(|(e, m)| (e, m.into_values().collect())).collect();
        CurveSet { recovery, curves }
    }

    /// The latest curve of `entity` dated in [t - lookback_days, t].
    pub fn latest_within(&self, entity: &str, t: NaiveDate, lookback_days: i64) -> Option<&DatedCurve> {
        let list = self.curves.get(entity)?;
        let i = list.partition_point(|c| c.date <= t);
        let c = list.get(i.checked_sub(1)?)?;
        ((t - c.date).num_days() <= lookback_days).then_some(c)
    }
}

/// What to do with members whose data ends before the horizon without a default.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum CensoringPolicy {
    /// Leave them out of n (and of the mean implied PD).
    Exclude,
    /// Count them as survivors.
    CountAsSurvivor,
}
crate::text_form!(CensoringPolicy { Exclude => "exclude", CountAsSurvivor => "survivor" });

/// How members are grouped into buckets.
#[derive(Debug, Clone, PartialEq)]
pub enum Bucketing {
    /// By internal grade as of the cohort date; members without one go to "ungraded".
    Grades,
    /// By implied PD at the shortest horizon, in bands [e_i, e_{i+1}) between the given
    /// increasing interior edges (the outer bands are open: [0, e_1) and [e_k, 1]).
    PdEdges(Vec<f64>),
    /// As `PdEdges`, with edges at the 1/k, ..., (k-1)/k quantiles of the implied PDs at the
    /// shortest horizon pooled over all cohorts (so bands mean the same in every cohort).
    PdQuantiles(usize),
}

/// Checked settings of one backtest run.
#[derive(Debug, Clone, PartialEq)]
pub struct BacktestSettings {
    pub cohort_dates: Vec<NaiveDate>,
    /// Horizons in whole years (1, 3, 5, ...).
    pub horizons_years: Vec<u32>,
    pub lookback_days: i64,
    pub censoring: CensoringPolicy,
    pub bucketing: Bucketing,
    /// Two-sided confidence level of every interval.
    pub level: f64,
    pub zones: ZoneThresholds,
}

impl BacktestSettings {
    /// Checks the settings; the error names the offending value.
    pub fn check(&self) -> Result<(), BacktestError> {
        if self.cohort_dates.is_empty() {
            return Err(BacktestError::NoCohortDates);
        }
        if self.horizons_years.is_empty() || self.horizons_years.contains(&0) {
            return Err(BacktestError::BadHorizons(self.horizons_years.clone()));
        }
        if self.lookback_days < 0 {
            return Err(BacktestError::BadLookback(self.lookback_days));
        }
        if !(self.level > 0.0 && self.level < 1.0) {
            return Err(BacktestError::Stats(StatsError::LevelOutOfRange(self.level)));
        }
        ZoneThresholds::new(self.zones.yellow, self.zones.red)?;
        match &self.bucketing {
            Bucketing::PdEdges(e)
                if e.is_empty() || e.windows(2).any(|w| w[0] >= w[1]) || e.iter().any(|x| !(0.0..=1.0).contains(x)) =>
            {
                Err(BacktestError::BadBandEdges(e.clone()))
            }
            Bucketing::PdQuantiles(k) if *k < 2 => Err(BacktestError::BadQuantileCount(*k)),
            _ => Ok(()),
        }
    }
}

/// Why a backtest cannot run.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum BacktestError {
    #[error("no cohort dates given")]
    NoCohortDates,
    #[error("horizons must be whole years >= 1, got {0:?}")]
    BadHorizons(Vec<u32>),
    #[error("look-back window must be >= 0 days, got {0}")]
    BadLookback(i64),
    #[error("PD band edges must be increasing probabilities in [0, 1], got {0:?}")]
    BadBandEdges(Vec<f64>),
    #[error("PD quantile buckets need at least 2 buckets, got {0}")]
    BadQuantileCount(usize),
    #[error("recovery {0} must lie in [0, 1)")]
    BadRecovery(f64),
    #[error("cohort date {date} plus {years} years is out of the calendar's range")]
    DateOverflow { date: NaiveDate, years: u32 },
    #[error(transparent)]
    Stats(#[from] StatsError),
}

/// Everything one curve set yields.
#[derive(Debug, Clone, PartialEq)]
pub struct BacktestOutput {
    pub recovery: f64,
    pub buckets: Vec<BucketRow>,
    pub hosmer_lemeshow: Vec<HosmerLemeshowRow>,
    pub risk_premia: Vec<RiskPremiumRow>,
}

/// Runs the backtest for one curve set: cohorts, bucket tests, Hosmer-Lemeshow, risk premia.
pub fn run_backtest(
    facts: &[EntityFacts],
    curves: &CurveSet,
    settings: &BacktestSettings,
) -> Result<BacktestOutput, BacktestError> {
    settings.check()?;
    if !(curves.recovery >= 0.0 && curves.recovery < 1.0) {
        return Err(BacktestError::BadRecovery(curves.recovery));
    }
    let obs = member_observations(facts, curves, settings)?;
    backtest_members(obs, settings, curves.recovery)
}

/// The tests and premia of one curve set from its members ([`member_observations`], possibly
/// concatenated over disjoint entity sets in the same order): buckets, bucket tests,
/// Hosmer-Lemeshow, risk premia.
pub fn backtest_members(
    mut obs: Vec<Observation>,
    settings: &BacktestSettings,
    recovery: f64,
) -> Result<BacktestOutput, BacktestError> {
    settings.check()?;
    if !(0.0..1.0).contains(&recovery) {
        return Err(BacktestError::BadRecovery(recovery));
    }
    bucket_observations(&mut obs, settings);
    let buckets = bucket_rows(&obs, settings)?;
    let hosmer_lemeshow = hosmer_lemeshow_rows(&obs, settings);
    let risk_premia = risk_premium_rows(&obs, settings, recovery)?;
    Ok(BacktestOutput { recovery, buckets, hosmer_lemeshow, risk_premia })
}

/// Runs [`run_backtest`] once per recovery scenario (each a curve set with its recovery), so
/// PDs, ratios and the spread decomposition can be compared across recoveries.
pub fn run_recovery_scenarios(
    facts: &[EntityFacts],
    scenarios: &[CurveSet],
    settings: &BacktestSettings,
) -> Result<Vec<BacktestOutput>, BacktestError> {
    scenarios.iter().map(|s| run_backtest(facts, s, settings)).collect()
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::curves::year_time;

    fn d(s: &str) -> NaiveDate {
        NaiveDate::parse_from_str(s, "%Y-%m-%d").unwrap()
    }

    const T: &str = "2021-01-04";

    fn facts(entity: &str, grade: Option<u32>, default: Option<&str>, end: &str) -> EntityFacts {
        EntityFacts {
            entity: entity.to_string(),
            grades: grade.map(|g| vec![GradeSpell { from_date: d("2019-06-30"), grade: g }]).unwrap_or_default(),
            default_date: default.map(d),
            data_end: d(end),
        }
    }

    /// Flat curves (PD = 1 - exp(-lambda h) exactly), dated as given, with a 12M spread quote.
    fn curves(recovery: f64, items: &[(&str, &str, f64)]) -> CurveSet {
        CurveSet::from_keyed(
            recovery,
            items.iter().map(|&(e, date, l)| {
                (
                    (d(date), e.to_string()),
                    HazardCurve::flat(d(date), l),
                    vec![QuotedSpread { tenor_months: 12, spread_bp: l * (1.0 - recovery) * 1e4 }],
                )
            }),
        )
    }

    fn settings(bucketing: Bucketing, censoring: CensoringPolicy) -> BacktestSettings {
        BacktestSettings {
            cohort_dates: vec![d(T)],
            horizons_years: vec![1],
            lookback_days: 10,
            censoring,
            bucketing,
            level: 0.95,
            zones: ZoneThresholds::default(),
        }
    }

    /// A small universe of invented names:
    /// a survives; b defaults exactly at t + 1Y; c defaults at t (not a member); dd's data
    /// ends mid-year (censored); e is ungraded with a curve exactly 10 days old (inside the
    /// look-back); f's curve is 11 days old (outside); g's only curve is dated after t.
    fn universe() -> (Vec<EntityFacts>, CurveSet) {
        let f = vec![
            facts("a", Some(1), None, "2030-01-01"),
            facts("b", Some(1), Some("2022-01-04"), "2030-01-01"),
            facts("c", Some(2), Some(T), "2030-01-01"),
            facts("dd", Some(2), None, "2021-07-01"),
            facts("e", None, None, "2030-01-01"),
            facts("f", None, None, "2030-01-01"),
            facts("g", None, None, "2030-01-01"),
        ];
        let c = curves(
            0.4,
            &[
                ("a", T, 0.02),
                ("b", T, 0.02),
                ("c", T, 0.02),
                ("dd", T, 0.02),
                ("e", "2020-12-25", 0.02),
                ("f", "2020-12-24", 0.02),
                ("g", "2021-01-05", 0.02),
            ],
        );
        (f, c)
    }

    fn row<'a>(rows: &'a [BucketRow], cohort: &str, bucket: &str) -> &'a BucketRow {
        rows.iter()
            .find(|r| r.cohort == cohort && r.bucket == bucket)
            .unwrap_or_else(|| panic!("no row {cohort} {bucket}"))
    }

    #[test]
    fn membership_default_at_horizon_end_and_at_cohort_date() {
        let (f, c) = universe();
        let obs = build_observations(&f, &c, &settings(Bucketing::Grades, CensoringPolicy::Exclude)).unwrap();
        let names: Vec<&str> = obs.iter().map(|o| o.entity.as_str()).collect();
        assert_eq!(names, ["a", "b", "dd", "e"], "c defaulted at t; f outside the look-back; g only after t");
        let b = obs.iter().find(|o| o.entity == "b").unwrap();
        assert_eq!(b.outcome, Outcome::Defaulted, "a default exactly at t + h is in (t, t + h]");
        assert_eq!(b.exposure_years, 1.0);
    }

    #[test]
    fn implied_pd_of_a_flat_curve() {
        let (f, c) = universe();
        let obs = build_observations(&f, &c, &settings(Bucketing::Grades, CensoringPolicy::Exclude)).unwrap();
        // 2021-01-04 to 2022-01-04 is 365 days, h = 1 on Act/365F.
        let want = 1.0 - (-0.02f64).exp();
        for o in &obs {
            assert!((o.implied_pd - want).abs() < 1e-16, "{}", o.entity);
        }
    }

    #[test]
    fn censoring_policies() {
        let (f, c) = universe();
        let ex = run_backtest(&f, &c, &settings(Bucketing::Grades, CensoringPolicy::Exclude)).unwrap();
        let g2 = row(&ex.buckets, "2021", "grade 2");
        assert_eq!((g2.n, g2.defaults, g2.n_censored), (0, 0, 1));
        assert_eq!(g2.p_binom_upper, None);
        let sv = run_backtest(&f, &c, &settings(Bucketing::Grades, CensoringPolicy::CountAsSurvivor)).unwrap();
        let g2 = row(&sv.buckets, "2021", "grade 2");
        assert_eq!((g2.n, g2.defaults, g2.n_censored), (1, 0, 1));
        assert!((g2.p_binom_upper.unwrap() - 1.0).abs() == 0.0);
        let g1 = row(&sv.buckets, "all", "grade 1");
        assert_eq!((g1.n, g1.defaults), (2, 1));
        assert_eq!(g1.realised_rate, Some(0.5));
        // P[D >= 1] = 1 - (1 - p)^2 with p = 1 - exp(-0.02).
        let p = 1.0 - (-0.02f64).exp();
        assert!((g1.p_binom_upper.unwrap() - (1.0 - (1.0 - p) * (1.0 - p))).abs() < 1e-14);
        assert_eq!(g1.zone, Some(crate::stats::Zone::Yellow), "P[D >= 1] = 0.039 < 0.05");
        assert_eq!(row(&sv.buckets, "all", "ungraded").n, 1);
    }

    #[test]
    fn censored_exposure_is_exact_and_lambda_q_is_the_flat_hazard() {
        let (f, c) = universe();
        let out = run_backtest(&f, &c, &settings(Bucketing::Grades, CensoringPolicy::Exclude)).unwrap();
        let g2 = out.risk_premia.iter().find(|r| r.cohort == "all" && r.bucket == "grade 2").unwrap();
        let e = year_time(d(T), d("2021-07-01"));
        assert!((g2.exposure_years - e).abs() < 1e-15);
        assert!((g2.lambda_q.unwrap() - 0.02).abs() < 1e-15);
        let g1 = out.risk_premia.iter().find(|r| r.cohort == "all" && r.bucket == "grade 1").unwrap();
        assert_eq!((g1.defaults, g1.exposure_years), (1, 2.0));
        assert_eq!(g1.lambda_p, Some(0.5));
        assert!((g1.ratio.unwrap() - 0.04).abs() < 1e-15);
        assert!((g1.el_spread_bp.unwrap() - 0.5 * 0.6 * 1e4).abs() < 1e-9);
        assert!((g1.spread_bp.unwrap() - 0.02 * 0.6 * 1e4).abs() < 1e-9);
        assert!((g1.premium_spread_bp.unwrap() - (120.0 - 3000.0)).abs() < 1e-9);
    }

    #[test]
    fn zero_defaults_ratio_interval() {
        let (f, c) = universe();
        let out = run_backtest(&f, &c, &settings(Bucketing::Grades, CensoringPolicy::Exclude)).unwrap();
        let u = out.risk_premia.iter().find(|r| r.cohort == "2021" && r.bucket == "ungraded").unwrap();
        assert_eq!(u.defaults, 0);
        assert_eq!(u.lambda_p, Some(0.0));
        assert_eq!(u.lambda_p_lo, Some(0.0));
        assert_eq!(u.ratio, None, "lambda_P = 0: the ratio is unbounded");
        assert_eq!(u.ratio_hi, None, "Garwood lower bound 0: no finite upper bound");
        let hi = -(0.025f64).ln() / u.exposure_years;
        assert!((u.ratio_lo.unwrap() - u.lambda_q.unwrap() / hi).abs() < 1e-12);
    }

    #[test]
    fn pd_band_and_quantile_buckets() {
        let f = vec![
            facts("x", None, None, "2030-01-01"),
            facts("y", None, None, "2030-01-01"),
            facts("z", None, None, "2030-01-01"),
        ];
        let c = curves(0.4, &[("x", T, 0.01), ("y", T, 0.02), ("z", T, 0.05)]);
        let obs =
            build_observations(&f, &c, &settings(Bucketing::PdEdges(vec![0.015, 0.03]), CensoringPolicy::Exclude))
                .unwrap();
        let idx: Vec<usize> =
            obs.iter().map(|o| if let Bucket::PdBand { index, .. } = o.bucket { index } else { 99 }).collect();
        assert_eq!(idx, [0, 1, 2]);
        assert_eq!(obs[1].bucket.label(), "pd [0.015, 0.03)");
        let obs = build_observations(&f, &c, &settings(Bucketing::PdQuantiles(3), CensoringPolicy::Exclude)).unwrap();
        let idx: Vec<usize> =
            obs.iter().map(|o| if let Bucket::PdBand { index, .. } = o.bucket { index } else { 99 }).collect();
        assert_eq!(idx, [0, 1, 2], "three distinct PDs, three quantile bands");
        // An edge exactly at a PD puts it in the upper band.
        let p = obs[1].implied_pd;
        let obs = build_observations(&f, &c, &settings(Bucketing::PdEdges(vec![p]), CensoringPolicy::Exclude)).unwrap();
        assert!(matches!(obs[1].bucket, Bucket::PdBand { index: 1, .. }));
    }

    #[test]
    fn hosmer_lemeshow_over_buckets() {
        let (f, c) = universe();
        let out = run_backtest(&f, &c, &settings(Bucketing::Grades, CensoringPolicy::Exclude)).unwrap();
        let hl = out.hosmer_lemeshow.iter().find(|r| r.cohort == "2021").unwrap();
        // Buckets with n > 0: grade 1 (n 2, d 1) and ungraded (n 1, d 0).
        assert_eq!(hl.buckets, 2);
        let p = 1.0 - (-0.02f64).exp();
        let want = (1.0 - 2.0 * p).powi(2) / (2.0 * p * (1.0 - p)) + p * p / (p * (1.0 - p));
        assert!((hl.statistic.unwrap() - want).abs() < 1e-12);
    }

    #[test]
    fn recovery_scenarios_tag_their_rows() {
        let (f, base) = universe();
        let low = curves(0.25, &[("a", T, 0.016), ("b", T, 0.016), ("dd", T, 0.016), ("e", "2020-12-25", 0.016)]);
        let out =
            run_recovery_scenarios(&f, &[low, base], &settings(Bucketing::Grades, CensoringPolicy::Exclude)).unwrap();
        assert_eq!(out.len(), 2);
        assert!(out[0].risk_premia.iter().all(|r| r.recovery == 0.25));
        let g1 = |o: &BacktestOutput| {
            o.risk_premia.iter().find(|r| r.cohort == "all" && r.bucket == "grade 1").unwrap().clone()
        };
        assert!((g1(&out[0]).lambda_q.unwrap() - 0.016).abs() < 1e-15);
        assert!((g1(&out[0]).el_spread_bp.unwrap() - 0.5 * 0.75 * 1e4).abs() < 1e-9);
        assert!(run_backtest(&f, &curves(1.0, &[]), &settings(Bucketing::Grades, CensoringPolicy::Exclude)).is_err());
    }

    #[test]
    fn settings_are_checked() {
        let mut s = settings(Bucketing::Grades, CensoringPolicy::Exclude);
        s.horizons_years = vec![0];
        assert!(matches!(s.check(), Err(BacktestError::BadHorizons(_))));
        let mut s = settings(Bucketing::PdEdges(vec![0.02, 0.01]), CensoringPolicy::Exclude);
        assert!(matches!(s.check(), Err(BacktestError::BadBandEdges(_))));
        s.bucketing = Bucketing::PdQuantiles(1);
        assert!(s.check().is_err());
        s.bucketing = Bucketing::Grades;
        s.lookback_days = -1;
        assert!(s.check().is_err());
        s.lookback_days = 0;
        s.cohort_dates.clear();
        assert_eq!(s.check(), Err(BacktestError::NoCohortDates));
    }

    #[test]
    fn cohort_history_against_implied_pd() {
        let (f, c) = universe();
        let out = run_backtest(&f, &c, &settings(Bucketing::Grades, CensoringPolicy::Exclude)).unwrap();
        let recs = [
            CohortHistoryRecord { year: 2021, grade: 1, obligors: 200, defaults: 3, withdrawn: Some(4) },
            CohortHistoryRecord { year: 2020, grade: 1, obligors: 100, defaults: 1, withdrawn: None },
        ];
        let rows = compare_cohort_history(&recs, &out.buckets, 0.95, &ZoneThresholds::default()).unwrap();
        let r21 = rows.iter().find(|r| r.cohort == "2021").unwrap();
        assert_eq!(r21.outcome_source, "cohort_history");
        assert!((r21.implied_pd.unwrap() - (1.0 - (-0.02f64).exp())).abs() < 1e-16);
        assert!(r21.p_binom_upper.is_some());
        let r20 = rows.iter().find(|r| r.cohort == "2020").unwrap();
        assert_eq!(r20.implied_pd, None, "no calibrated cohort in 2020");
        let all = rows.iter().find(|r| r.cohort == "all").unwrap();
        assert_eq!((all.obligors, all.defaults, all.withdrawn), (300, 4, None));
        let bad = [CohortHistoryRecord { year: 2021, grade: 1, obligors: 2, defaults: 3, withdrawn: None }];
        assert!(compare_cohort_history(&bad, &out.buckets, 0.95, &ZoneThresholds::default()).is_err());
    }

    #[test]
    fn latest_curve_within_lookback() {
        let c = curves(0.4, &[("a", "2021-01-01", 0.01), ("a", "2020-12-20", 0.02), ("a", "2021-01-05", 0.03)]);
        let got = c.latest_within("a", d(T), 10).unwrap();
        assert_eq!(got.date, d("2021-01-01"));
        assert!(c.latest_within("a", d("2020-12-19"), 10).is_none());
        assert!(c.latest_within("zz", d(T), 10).is_none());
    }
}
