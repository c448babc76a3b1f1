//! Per-bucket tests (rows of `backtest_buckets`) and Hosmer-Lemeshow across buckets.
//!
//! Groups: each cohort year (cohort dates in the same year pool into it) and "all", all cohort
//! dates pooled. Pooled groups with horizons over a year reuse the same names in overlapping
//! windows, so their binomial tests treat dependent outcomes as independent: read them as
//! descriptive.

use super::cohort::{Bucket, Observation, Outcome};
use super::{BacktestError, BacktestSettings, CensoringPolicy};
use crate::stats::{self, BucketForecast, Zone};
use std::collections::BTreeMap;

/// Where realised outcomes in a row come from.
pub const SOURCE_ENTITY_DEFAULTS: &str = "entity_defaults";

/// One row of `backtest_buckets` (docs/design.md, "Output tables"), plus `n_censored` and `outcome_source`.
/// The test fields are None when no member counts (n = 0).
#[derive(Debug, Clone, PartialEq)]
pub struct BucketRow {
    /// A year like "2021", or "all".
    pub cohort: String,
    pub horizon_years: u32,
    pub bucket: String,
    pub level: f64,
    /// Members counted (censored members only under CountAsSurvivor).
    pub n: u64,
    pub defaults: u64,
    /// Members whose data ended before the horizon without a default (counted or not).
    pub n_censored: u64,
    pub realised_rate: Option<f64>,
    /// Mean implied PD over the counted members.
    pub implied_pd: Option<f64>,
    pub cp_lo: Option<f64>,
    pub cp_hi: Option<f64>,
    pub jeffreys_lo: Option<f64>,
    pub jeffreys_hi: Option<f64>,
    pub wilson_lo: Option<f64>,
    pub wilson_hi: Option<f64>,
    /// P[D >= d], D ~ Binomial(n, implied_pd).
    pub p_binom_upper: Option<f64>,
    /// P[D <= d].
    pub p_binom_lower: Option<f64>,
    /// Beta(d + 1/2, n - d + 1/2) cdf at implied_pd.
    pub p_jeffreys: Option<f64>,
    /// From p_binom_upper and the zone thresholds.
    pub zone: Option<Zone>,
    pub outcome_source: &'static str,
}

/// Hosmer-Lemeshow across the buckets of one (cohort, horizon).
#[derive(Debug, Clone, PartialEq)]
pub struct HosmerLemeshowRow {
    pub cohort: String,
    pub horizon_years: u32,
    /// Buckets with n > 0, the degrees of freedom.
    pub buckets: usize,
    pub statistic: Option<f64>,
    pub p_value: Option<f64>,
    /// Why the statistic is missing (e.g. a bucket forecast of exactly 0), None when computed.
    pub note: Option<String>,
}

pub(crate) type GroupKey = (String, u32, (u8, u64), String);

fn bucket_order(b: &Bucket) -> (u8, u64) {
    match b {
        Bucket::Grade(g) => (0, u64::from(*g)),
        Bucket::Ungraded => (1, 0),
        Bucket::PdBand { index, .. } => (2, *index as u64),
    }
}

/// Observations grouped by (cohort year and "all", horizon, bucket), in a stable order.
fn groups(obs: &[Observation]) -> BTreeMap<GroupKey, Vec<&Observation>> {
    let mut g: BTreeMap<GroupKey, Vec<&Observation>> = BTreeMap::new();
    for o in obs {
        for cohort in [o.cohort_year(), "all".to_string()] {
            g.entry((cohort, o.horizon_years, bucket_order(&o.bucket), o.bucket.label())).or_default().push(o);
        }
    }
    g
}

/// The same grouping, for the risk-premium rows.
pub(crate) fn groups_for_premia(obs: &[Observation]) -> BTreeMap<GroupKey, Vec<&Observation>> {
    groups(obs)
}

/// Counts of one group under the censoring policy: (n, d, n_censored, mean implied PD).
fn counts(members: &[&Observation], policy: CensoringPolicy) -> (u64, u64, u64, Option<f64>) {
    let counted: Vec<&&Observation> = members.iter().filter(|o| o.counts(policy)).collect();
    let n = counted.len() as u64;
    let d = counted.iter().filter(|o| o.outcome == Outcome::Defaulted).count() as u64;
    let censored = members.iter().filter(|o| o.outcome == Outcome::Censored).count() as u64;
    let mean = (n > 0).then(|| counted.iter().map(|o| o.implied_pd).sum::<f64>() / n as f64);
    (n, d, censored, mean)
}

/// One `backtest_buckets` row per (cohort, horizon, bucket).
pub fn bucket_rows(obs: &[Observation], settings: &BacktestSettings) -> Result<Vec<BucketRow>, BacktestError> {
    groups(obs)
        .into_iter()
        .map(|((cohort, h, _, bucket), members)| bucket_row(cohort, h, bucket, &members, settings))
        .collect()
}

fn bucket_row(
    cohort: String,
    horizon_years: u32,
    bucket: String,
    members: &[&Observation],
    s: &BacktestSettings,
) -> Result<BucketRow, BacktestError> {
    let (n, d, n_censored, implied_pd) = counts(members, s.censoring);
    let mut row = BucketRow {
        cohort,
        horizon_years,
        bucket,
        level: s.level,
        n,
        defaults: d,
        n_censored,
        realised_rate: None,
        implied_pd,
        cp_lo: None,
        cp_hi: None,
        jeffreys_lo: None,
        jeffreys_hi: None,
        wilson_lo: None,
        wilson_hi: None,
        p_binom_upper: None,
        p_binom_lower: None,
        p_jeffreys: None,
        zone: None,
        outcome_source: SOURCE_ENTITY_DEFAULTS,
    };
    let Some(p) = implied_pd else { return Ok(row) };
    // Rounding can leave a mean of PDs a hair outside [0, 1] only if a curve had negative
    // hazards; clamp so the tests see a probability.
    let p = p.clamp(0.0, 1.0);
    let cp = stats::clopper_pearson(d, n, s.level)?;
    let j = stats::jeffreys_interval(d, n, s.level)?;
    let w = stats::wilson_interval(d, n, s.level)?;
    let upper = stats::binomial_upper_tail(d, n, p)?;
    row.realised_rate = Some(d as f64 / n as f64);
    (row.cp_lo, row.cp_hi) = (Some(cp.lo), Some(cp.hi));
    (row.jeffreys_lo, row.jeffreys_hi) = (Some(j.lo), Some(j.hi));
    (row.wilson_lo, row.wilson_hi) = (Some(w.lo), Some(w.hi));
    row.p_binom_upper = Some(upper);
    row.p_binom_lower = Some(stats::binomial_lower_tail(d, n, p)?);
    row.p_jeffreys = Some(stats::jeffreys_p_value(d, n, p)?);
    row.zone = Some(stats::traffic_light(upper, &s.zones)?);
    Ok(row)
}

/// One Hosmer-Lemeshow row per (cohort, horizon), over the buckets with n > 0.
pub fn hosmer_lemeshow_rows(obs: &[Observation], settings: &BacktestSettings) -> Vec<HosmerLemeshowRow> {
    let mut per: BTreeMap<(String, u32), Vec<BucketForecast>> = BTreeMap::new();
    for ((cohort, h, _, _), members) in groups(obs) {
        let (n, d, _, p) = counts(&members, settings.censoring);
        let list = per.entry((cohort, h)).or_default();
        if let Some(p) = p {
            list.push(BucketForecast { n, d, p });
        }
    }
    per.into_iter()
        .map(|((cohort, horizon_years), buckets)| {
            let k = buckets.len();
            match stats::hosmer_lemeshow(&buckets) {
                Ok(hl) => HosmerLemeshowRow {
                    cohort,
                    horizon_years,
                    buckets: k,
                    statistic: Some(hl.statistic),
                    p_value: Some(hl.p_value),
                    note: None,
                },
                Err(e) => HosmerLemeshowRow {
                    cohort,
                    horizon_years,
                    buckets: k,
                    statistic: None,
                    p_value: None,
                    note: Some(e.to_string()),
                },
            }
        })
        .collect()
}
