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
pub mod discrimination;
pub mod history;
pub mod migration;
pub mod premia;
pub mod term_structure;
pub mod verdicts;

pub use buckets::{bucket_rows, hosmer_lemeshow_rows, BucketRow, HosmerLemeshowRow, RateMethod};
pub use calendar::{cohort_dates, CohortFrequency, GradeBook};
pub use cohort::{bucket_observations, build_observations, member_observations, Bucket, Observation, Outcome};
pub use discrimination::{compare_with_reference, discrimination_rows, DiscriminationRow, Score};
pub use history::{compare_cohort_history, CohortHistoryRecord, HistoryRow};
pub use migration::{migration_rows, MigrationRow};
pub use premia::{risk_premium_rows, RiskPremiumRow};
pub use term_structure::{survival_points, term_structure_rows, TermStructureRow};
pub use verdicts::{verdict_rows, Status, VerdictRow};

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
    /// The date the entity left the institution's coverage (its defaults are not observed
    /// after it), None when it stayed covered. The default record observes every covered
    /// entity whether or not it is quoted, so the end of quotes censors nothing.
    pub coverage_end: Option<NaiveDate>,
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
    pub currency: String,
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
    /// Builds the set from (entity, curve) pairs, the way the calibration stage emits them;
    /// spreads may be empty. A later duplicate (date, entity) replaces an earlier one.
    pub fn from_keyed(recovery: f64, items: impl IntoIterator<Item = (String, DatedCurve)>) -> CurveSet {
        let mut by_entity: BTreeMap<String, BTreeMap<NaiveDate, DatedCurve>> = BTreeMap::new();
        for (entity, c) in items {
            by_entity.entry(entity).or_default().insert(c.date, c);
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
    /// The last date the defaults record covers: a horizon ending after it is incomplete.
    /// None only while members are built in parts (the run's outcome end is applied when the
    /// parts are pooled, [`Observation::cut_at`]).
    pub outcome_end: Option<NaiveDate>,
    /// Asset correlation of the one-factor tests.
    pub correlation: AssetCorrelation,
    /// The default term structure runs over years 1..=this (0: only the tested horizons).
    /// Members are built for these horizons too; only `horizons_years` enter the bucket,
    /// Hosmer-Lemeshow, discrimination and premium rows.
    pub term_structure_years: u32,
}

/// The asset correlation rho of the one-factor (Vasicek) bucket tests.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum AssetCorrelation {
    /// The supervisory corporate formula of the bucket's one-year PD
    /// ([`crate::stats::supervisory_corporate_correlation`]).
    Supervisory,
    /// One rho for every bucket.
    Fixed(f64),
}

impl AssetCorrelation {
    /// rho for a bucket whose mean implied PD over `horizon_years` is `pd`: the one-year PD is
    /// 1 - (1 - pd)^(1 / h) (a flat hazard over the horizon).
    pub fn rho(&self, pd: f64, horizon_years: u32) -> f64 {
        match *self {
            AssetCorrelation::Fixed(r) => r,
            AssetCorrelation::Supervisory => {
                let one_year = -((1.0 - pd).max(0.0).ln() / f64::from(horizon_years.max(1))).exp_m1();
                crate::stats::supervisory_corporate_correlation(one_year)
            }
        }
    }
}

/// The longest term structure accepted, in years.
pub const MAX_TERM_STRUCTURE_YEARS: u32 = 30;

impl BacktestSettings {
    /// Every horizon members are built for: the tested horizons in their order, then the
    /// term-structure years not among them, ascending.
    pub fn member_horizons(&self) -> Vec<u32> {
        let mut out = self.horizons_years.clone();
        out.extend((1..=self.term_structure_years).filter(|h| !self.horizons_years.contains(h)));
        out
    }

    /// Whether `h` is a tested horizon (the others serve the term structure only).
    pub fn is_tested(&self, h: u32) -> bool {
        self.horizons_years.contains(&h)
    }

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
        if self.term_structure_years > MAX_TERM_STRUCTURE_YEARS {
            return Err(BacktestError::BadTermStructure(self.term_structure_years));
        }
        if let AssetCorrelation::Fixed(r) = self.correlation {
            if !(0.0..1.0).contains(&r) {
                return Err(BacktestError::BadCorrelation(r));
            }
        }
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
    #[error("term_structure_years must be at most {MAX_TERM_STRUCTURE_YEARS}, got {0}")]
    BadTermStructure(u32),
    #[error("asset correlation {0} must lie in [0, 1)")]
    BadCorrelation(f64),
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
    /// Every member, bucketed, cut at the outcome end: what every row below is computed from.
    pub members: Vec<Observation>,
    pub buckets: Vec<BucketRow>,
    pub hosmer_lemeshow: Vec<HosmerLemeshowRow>,
    pub risk_premia: Vec<RiskPremiumRow>,
    pub discrimination: Vec<DiscriminationRow>,
    pub term_structure: Vec<TermStructureRow>,
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
    if let Some(e) = settings.outcome_end {
        for o in obs.iter_mut() {
            o.cut_at(e);
        }
    }
    bucket_observations(&mut obs, settings);
    let term_structure = term_structure_rows(&obs, settings)?;
    // The tested horizons only; the term-structure years stay in the member list.
    let (tested, extra): (Vec<Observation>, Vec<Observation>) =
        obs.into_iter().partition(|o| settings.is_tested(o.horizon_years));
    let buckets = bucket_rows(&tested, settings)?;
    let hosmer_lemeshow = hosmer_lemeshow_rows(&tested, settings);
    let risk_premia = risk_premium_rows(&tested, settings, recovery)?;
    let discrimination = discrimination_rows(&tested, settings);
    let order = settings.member_horizons();
    let rank = |h: u32| order.iter().position(|x| *x == h).unwrap_or(usize::MAX);
    let mut members = tested;
    members.extend(extra);
    members.sort_by(|a, b| {
        (a.cohort, &a.entity, rank(a.horizon_years)).cmp(&(b.cohort, &b.entity, rank(b.horizon_years)))
    });
    Ok(BacktestOutput { recovery, members, buckets, hosmer_lemeshow, risk_premia, discrimination, term_structure })
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

    /// An entity; `end` is the end of its coverage, "open" when it stays covered.
    fn facts(entity: &str, grade: Option<u32>, default: Option<&str>, end: &str) -> EntityFacts {
        EntityFacts {
            entity: entity.to_string(),
            grades: grade.map(|g| vec![GradeSpell { from_date: d("2019-06-30"), grade: g }]).unwrap_or_default(),
            default_date: default.map(d),
            coverage_end: (end != "open").then(|| d(end)),
        }
    }

    /// Flat curves (PD = 1 - exp(-lambda h) exactly), dated as given, with a 12M spread quote.
    fn curves(recovery: f64, items: &[(&str, &str, f64)]) -> CurveSet {
        CurveSet::from_keyed(
            recovery,
            items.iter().map(|&(e, date, l)| {
                (
                    e.to_string(),
                    DatedCurve {
                        date: d(date),
                        currency: "EUR".into(),
                        curve: HazardCurve::flat(d(date), l),
                        spreads: vec![QuotedSpread { tenor_months: 12, spread_bp: l * (1.0 - recovery) * 1e4 }],
                    },
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
            outcome_end: None,
            correlation: AssetCorrelation::Supervisory,
            term_structure_years: 0,
        }
    }

    /// A small universe of invented names:
    /// a survives; b defaults exactly at t + 1Y; c defaults at t (not a member); dd leaves
    /// coverage mid-year (censored); e is ungraded with a curve exactly 10 days old (inside the
    /// look-back); f's curve is 11 days old (outside); g's only curve is dated after t.
    fn universe() -> (Vec<EntityFacts>, CurveSet) {
        let f = vec![
            facts("a", Some(1), None, "open"),
            facts("b", Some(1), Some("2022-01-04"), "open"),
            facts("c", Some(2), Some(T), "open"),
            facts("dd", Some(2), None, "2021-07-01"),
            facts("e", None, None, "open"),
            facts("f", None, None, "open"),
            facts("g", None, None, "open"),
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
        let f = vec![facts("x", None, None, "open"), facts("y", None, None, "open"), facts("z", None, None, "open")];
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
        let rows =
            compare_cohort_history(&recs, &out.buckets, &out.risk_premia, 0.95, &ZoneThresholds::default()).unwrap();
        let r21 = rows.iter().find(|r| r.cohort == "2021").unwrap();
        assert_eq!(r21.outcome_source, "cohort_history");
        assert!((r21.implied_pd.unwrap() - (1.0 - (-0.02f64).exp())).abs() < 1e-16);
        assert!(r21.p_binom_upper.is_some());
        let r20 = rows.iter().find(|r| r.cohort == "2020").unwrap();
        assert_eq!(r20.implied_pd, None, "no calibrated cohort in 2020");
        let all = rows.iter().find(|r| r.cohort == "all").unwrap();
        assert_eq!((all.obligors, all.defaults, all.withdrawn), (300, 4, None));
        let bad = [CohortHistoryRecord { year: 2021, grade: 1, obligors: 2, defaults: 3, withdrawn: None }];
        assert!(compare_cohort_history(&bad, &out.buckets, &out.risk_premia, 0.95, &ZoneThresholds::default()).is_err());
        // The long-history premium: lambda_P = -ln(1 - 3/200) per year against the quoted
        // period's lambda_Q of grade 1 (0.02, flat curves), the bounds through the same map.
        let lp = -(1.0f64 - 3.0 / 200.0).ln();
        assert!((r21.lambda_p - lp).abs() < 1e-15);
        assert!((r21.ratio.unwrap() - 0.02 / lp).abs() < 1e-13);
        let cp = crate::stats::clopper_pearson(3, 200, 0.95).unwrap();
        assert!((r21.ratio_lo.unwrap() - 0.02 / -(1.0 - cp.hi).ln()).abs() < 1e-13);
        assert_eq!(r20.lambda_q, None);
    }

    /// The regression of the censoring bias: members whose data simply stop (the end of the
    /// quotes) are not censored; a horizon two days past the outcome end makes the cohort
    /// incomplete there: listed, untested, and outside the pooled rows.
    #[test]
    fn outcome_end_two_days_before_the_horizon_leaves_the_cohort_untested() {
        let mut f: Vec<EntityFacts> = (0..40).map(|i| facts(&format!("s{i:02}"), Some(3), None, "open")).collect();
        f.push(facts("x", Some(3), Some("2021-06-01"), "open"));
        let items: Vec<(String, String, f64)> = f.iter().map(|e| (e.entity.clone(), T.to_string(), 0.02)).collect();
        let refs: Vec<(&str, &str, f64)> = items.iter().map(|(e, t, l)| (e.as_str(), t.as_str(), *l)).collect();
        let c = curves(0.4, &refs);
        let mut s = settings(Bucketing::Grades, CensoringPolicy::Exclude);
        s.cohort_dates = vec![d("2020-01-06"), d(T)];
        // The curves are dated T: the 2020 cohort finds none (look-back 10 days), so re-date a
        // copy for it.
        let mut c = c;
        for list in c.curves.values_mut() {
            let mut early = list[0].clone();
            early.date = d("2020-01-06");
            list.insert(0, early);
        }
        s.outcome_end = Some(d("2022-01-02")); // t + 1Y = 2022-01-04 for the 2021 cohort
        let out = run_backtest(&f, &c, &s).unwrap();
        let r21 = row(&out.buckets, "2021", "grade 3");
        assert_eq!((r21.n, r21.defaults, r21.n_incomplete), (0, 0, 41));
        assert_eq!((r21.p_binom_upper, r21.zone, r21.realised_rate), (None, None, None));
        let r20 = row(&out.buckets, "2020", "grade 3");
        assert_eq!((r20.n, r20.defaults, r20.n_incomplete, r20.n_censored), (41, 0, 0, 0));
        let all = row(&out.buckets, "all", "grade 3");
        assert_eq!((all.n, all.defaults), (41, 0), "the incomplete 2021 cohort stays out of the pool");
        assert!(out.buckets.iter().all(|b| b.n == 0 || b.defaults < b.n), "no bucket with n = d");
        let x = out.members.iter().find(|m| m.entity == "x" && m.cohort == d(T)).unwrap();
        assert_eq!((x.outcome, x.event_date), (Outcome::Incomplete, Some(d("2021-06-01"))));
        let hl = out.hosmer_lemeshow.iter().find(|h| h.cohort == "2021").unwrap();
        assert!(hl.statistic.is_none() && hl.note.as_deref().unwrap_or("").contains("incomplete"));
        let rp = out.risk_premia.iter().find(|r| r.cohort == "2021").unwrap();
        assert_eq!((rp.members, rp.exposure_years, rp.lambda_q), (0, 0.0, None));
    }

    /// Leaving coverage censors defaulters and survivors alike; the realised rate is then the
    /// Kaplan-Meier estimate, not d over the uncensored.
    #[test]
    fn leaving_coverage_censors_alike_and_the_rate_is_kaplan_meier() {
        let f = vec![
            facts("a", Some(1), None, "open"),
            facts("b", Some(1), Some("2021-03-01"), "open"),
            facts("c", Some(1), None, "2021-06-30"),
            facts("e", Some(1), Some("2021-05-01"), "2021-06-30"),
            facts("g", Some(1), None, "open"),
        ];
        let c = curves(0.4, &[("a", T, 0.02), ("b", T, 0.02), ("c", T, 0.02), ("e", T, 0.02), ("g", T, 0.02)]);
        let out = run_backtest(&f, &c, &settings(Bucketing::Grades, CensoringPolicy::Exclude)).unwrap();
        let e = out.members.iter().find(|m| m.entity == "e").unwrap();
        assert_eq!((e.outcome, e.event_date), (Outcome::Censored, Some(d("2021-05-01"))));
        let r = row(&out.buckets, "2021", "grade 1");
        // Counted: a, b, g (c and e censored alike): d / n would be 1/3.
        assert_eq!((r.n, r.defaults, r.n_censored), (3, 1, 2));
        // Kaplan-Meier over all five: b at 2021-03-01 (5 at risk), e at 2021-05-01 (4 at risk),
        // c censored at 2021-06-30: S = (4/5)(3/4) = 0.6.
        assert_eq!(r.rate_method, Some(RateMethod::KaplanMeier));
        assert!((r.realised_rate.unwrap() - 0.4).abs() < 1e-15);
        assert!(r.km_lo.unwrap() < 0.4 && r.km_hi.unwrap() > 0.4);
        let sv = run_backtest(&f, &c, &settings(Bucketing::Grades, CensoringPolicy::CountAsSurvivor)).unwrap();
        let r = row(&sv.buckets, "2021", "grade 1");
        assert_eq!((r.n, r.defaults, r.rate_method), (5, 2, Some(RateMethod::Proportion)));
        // Premia: e's default inside coverage counts, over the exact exposures.
        let p = out.risk_premia.iter().find(|r| r.cohort == "2021").unwrap();
        assert_eq!(p.defaults, 2);
    }

    #[test]
    fn discrimination_and_verdicts() {
        let mut f = Vec::new();
        let mut items = Vec::new();
        for i in 0..30u32 {
            let name = format!("n{i:02}");
            let grade = 1 + i % 6;
            let default = (i % 6 == 5 && i < 20).then_some("2021-08-01");
            f.push(facts(&name, Some(grade), default, "open"));
            items.push((name, 0.002 * f64::from(1 + i % 6)));
        }
        let refs: Vec<(&str, &str, f64)> = items.iter().map(|(e, l)| (e.as_str(), T, *l)).collect();
        let out =
            run_backtest(&f, &curves(0.4, &refs), &settings(Bucketing::Grades, CensoringPolicy::Exclude)).unwrap();
        let all = out.discrimination.iter().find(|r| r.cohort == "all" && r.score == Score::ImpliedPd).unwrap();
        // The 3 defaulters (grade 6) hold the highest PD, shared with 2 grade-6 survivors: each
        // defaulter beats the 25 lower survivors and ties 2, of 27 survivors.
        assert_eq!((all.n, all.defaults), (30, 3));
        let want = (25.0 + 0.5 * 2.0) / 27.0;
        assert!((all.auc.unwrap() - want).abs() < 1e-15, "{:?}", all.auc);
        let v = verdict_rows(&out, &settings(Bucketing::Grades, CensoringPolicy::Exclude));
        let upper = v.iter().find(|r| r.family == "bucket binomial, upper tail").unwrap();
        assert!(upper.against > 0, "3 defaults of 5 at a 1.2% PD must reject");
        assert_ne!(upper.status, Status::Pass);
    }

    /// The term structure uses every cohort: an incomplete cohort contributes the months it
    /// was observed. Hand-computed product-limit estimate over 23 subjects.
    #[test]
    fn term_structure_pools_complete_and_incomplete_cohorts() {
        let mut f: Vec<EntityFacts> = (0..10).map(|i| facts(&format!("s{i:02}"), Some(2), None, "open")).collect();
        f.push(facts("x", Some(2), Some("2020-06-01"), "open"));
        f.push(facts("y", Some(2), Some("2021-03-01"), "open"));
        let mut items = Vec::new();
        for e in &f {
            items.push((e.entity.clone(), "2020-01-06", 0.02));
            items.push((e.entity.clone(), T, 0.02));
        }
        let refs: Vec<(&str, &str, f64)> = items.iter().map(|(e, t, l)| (e.as_str(), *t, *l)).collect();
        let c = curves(0.4, &refs);
        let mut s = settings(Bucketing::Grades, CensoringPolicy::Exclude);
        s.cohort_dates = vec![d("2020-01-06"), d(T)];
        s.outcome_end = Some(d("2021-07-05"));
        let out = run_backtest(&f, &c, &s).unwrap();
        let r = out.term_structure.iter().find(|r| r.bucket == "grade 2" && r.horizon_years == 1).unwrap();
        assert_eq!((r.members, r.defaults, r.at_risk_at_horizon), (23, 2, 11));
        // Events: y (2021 cohort) at 56 days with 23 at risk, x (2020 cohort) at 147 days
        // with 22 at risk (y gone; the ten 2021 survivors, censored at 182 days, still in).
        let surv = (22.0f64 / 23.0) * (21.0 / 22.0);
        assert!((r.realised_rate.unwrap() - (1.0 - surv)).abs() < 1e-15);
        let pd2020 = 1.0 - (-0.02f64 * 366.0 / 365.0).exp();
        let pd2021 = 1.0 - (-0.02f64).exp();
        let pd = (12.0 * pd2020 + 11.0 * pd2021) / 23.0;
        assert!((r.implied_pd.unwrap() - pd).abs() < 1e-15);
        // Expected defaults: 0.02 per year over each observed window (flat curves).
        let days = |a: &str, b: &str| (d(b) - d(a)).num_days() as f64 / 365.0;
        let windows = 10.0 * days("2020-01-06", "2021-01-06")
            + days("2020-01-06", "2020-06-01")
            + days("2020-01-06", "2021-01-06")
            + 10.0 * days(T, "2021-07-05")
            + days(T, "2021-03-01");
        let e = 0.02 * windows;
        assert!((r.expected_defaults.unwrap() - e).abs() < 1e-14, "{:?} vs {e}", r.expected_defaults);
        // P[O >= 2] = 1 - exp(-e)(1 + e).
        let want = 1.0 - (-e).exp() * (1.0 + e);
        assert!((r.p_upper.unwrap() - want).abs() < 1e-14);
        assert!(r.p_upper.unwrap() < 0.05, "2 defaults where 0.2 are expected");
        // The bucket tests see only the complete 2020 cohort: 1 default of 12.
        let b = row(&out.buckets, "all", "grade 2");
        assert_eq!((b.n, b.defaults), (12, 1));
        let all = out.term_structure.iter().find(|r| r.bucket == "all").unwrap();
        assert_eq!(all.members, 23);
    }

    /// Term-structure years add member horizons and term rows, never tested rows.
    #[test]
    fn term_structure_years_are_members_not_tests() {
        let (f, c) = universe();
        let mut s = settings(Bucketing::Grades, CensoringPolicy::Exclude);
        s.term_structure_years = 3;
        s.outcome_end = Some(d("2030-01-01"));
        assert_eq!(s.member_horizons(), [1, 2, 3]);
        let out = run_backtest(&f, &c, &s).unwrap();
        assert!(out.buckets.iter().all(|b| b.horizon_years == 1));
        assert!(out.discrimination.iter().all(|b| b.horizon_years == 1));
        assert!(out.risk_premia.iter().all(|b| b.horizon_years == 1));
        let years: std::collections::BTreeSet<u32> = out.term_structure.iter().map(|r| r.horizon_years).collect();
        assert_eq!(years.into_iter().collect::<Vec<_>>(), [1, 2, 3]);
        let a: Vec<u32> = out.members.iter().filter(|m| m.entity == "a").map(|m| m.horizon_years).collect();
        assert_eq!(a, [1, 2, 3]);
        s.term_structure_years = 31;
        assert!(matches!(s.check(), Err(BacktestError::BadTermStructure(31))));
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
