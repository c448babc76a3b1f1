//! Per-bucket tests (rows of `backtest_buckets`) and Hosmer-Lemeshow across buckets.
//!
//! Groups: each cohort year (cohort dates in the same year pool into it) and "all", all cohort
//! dates pooled whose horizon the outcome end covers (incomplete members never enter it). Pooled groups with horizons over a year reuse the same names in overlapping
//! windows, so their binomial tests treat dependent outcomes as independent: read them as
//! descriptive.

use super::cohort::{Bucket, Observation, Outcome};
use super::{BacktestError, BacktestSettings, CensoringPolicy};
use crate::stats::{self, BucketForecast, Zone};
use std::collections::BTreeMap;

/// Where realised outcomes in a row come from.
pub const SOURCE_ENTITY_DEFAULTS: &str = "entity_defaults";

/// How a row's `realised_rate` was estimated.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum RateMethod {
    /// Defaults over the members counted: no member was censored.
    Proportion,
    /// The product-limit estimate 1 - S(h) over every member with a known window, because
    /// some left coverage before the horizon ([`crate::stats::kaplan_meier`]).
    KaplanMeier,
}
crate::text_form!(RateMethod { Proportion => "d/n", KaplanMeier => "kaplan-meier" });

/// One row of `backtest_buckets` (docs/design.md, "Output tables").
/// The test fields are None when no member counts (n = 0), e.g. when every member of the
/// (cohort, horizon) is incomplete.
#[derive(Debug, Clone, PartialEq)]
pub struct BucketRow {
    /// A year like "2021", or "all" (complete cohorts only).
    pub cohort: String,
    pub horizon_years: u32,
    pub bucket: String,
    pub level: f64,
    /// Members counted (censored members only under CountAsSurvivor; never incomplete ones).
    pub n: u64,
    pub defaults: u64,
    /// Members that left coverage before the horizon (counted or not).
    pub n_censored: u64,
    /// Members whose horizon ends after the outcome end (listed, never counted).
    pub n_incomplete: u64,
    /// d / n, or the Kaplan-Meier rate where members were censored (`rate_method`).
    pub realised_rate: Option<f64>,
    pub rate_method: Option<RateMethod>,
    /// Greenwood interval of the Kaplan-Meier rate (None for d / n: see the binomial intervals).
    pub km_lo: Option<f64>,
    pub km_hi: Option<f64>,
    /// Mean implied PD over the counted members.
    pub implied_pd: Option<f64>,
    pub cp_lo: Option<f64>,
    pub cp_hi: Option<f64>,
    pub jeffreys_lo: Option<f64>,
    pub jeffreys_hi: Option<f64>,
    pub wilson_lo: Option<f64>,
    pub wilson_hi: Option<f64>,
    /// P[D >= d], D ~ Binomial(n, implied_pd): small when the PD is too low.
    pub p_binom_upper: Option<f64>,
    /// P[D <= d]: small when the PD is too high (over-prediction, the risk premium).
    pub p_binom_lower: Option<f64>,
    /// Beta(d + 1/2, n - d + 1/2) cdf at implied_pd.
    pub p_jeffreys: Option<f64>,
    /// Zone of p_binom_upper (under-prediction).
    pub zone: Option<Zone>,
    /// Zone of p_binom_lower (over-prediction).
    pub zone_lower: Option<Zone>,
    /// Asset correlation of the one-factor tests.
    pub rho: Option<f64>,
    /// P[D >= d] and P[D <= d] under the one-factor Gaussian model with correlation rho.
    pub p_vasicek_upper: Option<f64>,
    pub p_vasicek_lower: Option<f64>,
    /// Default rates the one-factor model makes plausible at `level` (count interval / n).
    pub vasicek_lo: Option<f64>,
    pub vasicek_hi: Option<f64>,
    /// Zone of p_vasicek_upper.
    pub zone_vasicek: Option<Zone>,
    pub outcome_source: &'static str,
}

/// Hosmer-Lemeshow across the buckets of one (cohort, horizon), with the obligor-level
/// calibration scores and the concentration of the members over buckets.
#[derive(Debug, Clone, PartialEq)]
pub struct HosmerLemeshowRow {
    pub cohort: String,
    pub horizon_years: u32,
    /// Buckets with n > 0, the degrees of freedom.
    pub buckets: usize,
    pub statistic: Option<f64>,
    pub p_value: Option<f64>,
    /// Why the statistic is missing (e.g. a bucket forecast of exactly 0, or an incomplete
    /// cohort), None when computed.
    pub note: Option<String>,
    /// Members counted.
    pub n: u64,
    pub brier: Option<f64>,
    pub spiegelhalter_z: Option<f64>,
    pub spiegelhalter_p: Option<f64>,
    /// Herfindahl-Hirschman index of the counted members over buckets.
    pub hhi: Option<f64>,
}

pub(crate) type GroupKey = (String, u32, (u8, u64), String);

pub(crate) fn bucket_order(b: &Bucket) -> (u8, u64) {
    match b {
        Bucket::Grade(g) => (0, u64::from(*g)),
        Bucket::Ungraded => (1, 0),
        Bucket::PdBand { index, .. } => (2, *index as u64),
    }
}

/// Observations grouped by (cohort year and "all", horizon, bucket), in a stable order. The
/// pooled group "all" holds no incomplete member.
fn groups(obs: &[Observation]) -> BTreeMap<GroupKey, Vec<&Observation>> {
    let mut g: BTreeMap<GroupKey, Vec<&Observation>> = BTreeMap::new();
    for o in obs {
        g.entry((o.cohort_year(), o.horizon_years, bucket_order(&o.bucket), o.bucket.label())).or_default().push(o);
        if o.outcome != Outcome::Incomplete {
            g.entry(("all".to_string(), o.horizon_years, bucket_order(&o.bucket), o.bucket.label()))
                .or_default()
                .push(o);
        }
    }
    g
}

/// The same grouping, for the risk-premium rows.
pub(crate) fn groups_for_premia(obs: &[Observation]) -> BTreeMap<GroupKey, Vec<&Observation>> {
    groups(obs)
}

/// Counts of one group under the censoring policy.
struct Counts {
    n: u64,
    d: u64,
    censored: u64,
    incomplete: u64,
    mean_pd: Option<f64>,
}

fn counts(members: &[&Observation], policy: CensoringPolicy) -> Counts {
    let counted: Vec<&&Observation> = members.iter().filter(|o| o.counts(policy)).collect();
    let n = counted.len() as u64;
    Counts {
        n,
        d: counted.iter().filter(|o| o.defaulted()).count() as u64,
        censored: members.iter().filter(|o| o.outcome == Outcome::Censored).count() as u64,
        incomplete: members.iter().filter(|o| o.outcome == Outcome::Incomplete).count() as u64,
        mean_pd: (n > 0).then(|| counted.iter().map(|o| o.implied_pd).sum::<f64>() / n as f64),
    }
}

/// One `backtest_buckets` row per (cohort, horizon, bucket).
pub fn bucket_rows(obs: &[Observation], settings: &BacktestSettings) -> Result<Vec<BucketRow>, BacktestError> {
    use rayon::prelude::*;
    // The groups are independent (each row is a function of its own members): they run in
    // parallel, the rows kept in the groups' order and the first group's error reported.
    let groups: Vec<_> = groups(obs).into_iter().collect();
    let rows: Vec<Result<BucketRow, BacktestError>> = groups
        .into_par_iter()
        .map(|((cohort, h, _, bucket), members)| bucket_row(cohort, h, bucket, &members, settings))
        .collect();
    rows.into_iter().collect()
}

fn bucket_row(
    cohort: String,
    horizon_years: u32,
    bucket: String,
    members: &[&Observation],
    s: &BacktestSettings,
) -> Result<BucketRow, BacktestError> {
    let c = counts(members, s.censoring);
    let (n, d) = (c.n, c.d);
    let mut row = BucketRow {
        cohort,
        horizon_years,
        bucket,
        level: s.level,
        n,
        defaults: d,
        n_censored: c.censored,
        n_incomplete: c.incomplete,
        realised_rate: None,
        rate_method: None,
        km_lo: None,
        km_hi: None,
        implied_pd: c.mean_pd,
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
        zone_lower: None,
        rho: None,
        p_vasicek_upper: None,
        p_vasicek_lower: None,
        vasicek_lo: None,
        vasicek_hi: None,
        zone_vasicek: None,
        outcome_source: SOURCE_ENTITY_DEFAULTS,
    };
    let Some(p) = c.mean_pd else { return Ok(row) };
    // Rounding can leave a mean of PDs a hair outside [0, 1] only if a curve had negative
    // hazards; clamp so the tests see a probability.
    let p = p.clamp(0.0, 1.0);
    let cp = stats::clopper_pearson(d, n, s.level)?;
    let j = stats::jeffreys_interval(d, n, s.level)?;
    let w = stats::wilson_interval(d, n, s.level)?;
    let upper = stats::binomial_upper_tail(d, n, p)?;
    let lower = stats::binomial_lower_tail(d, n, p)?;
    if c.censored > 0 && s.censoring == CensoringPolicy::Exclude {
        let known: Vec<&&Observation> = members.iter().filter(|o| o.outcome != Outcome::Incomplete).collect();
        let times: Vec<f64> = known.iter().map(|o| o.exposure_years).collect();
        let events: Vec<bool> = known.iter().map(|o| o.event_date.is_some()).collect();
        let km = stats::kaplan_meier(&times, &events)?;
        let (surv, _) = km.at(f64::MAX);
        let ci = km.interval(f64::MAX, s.level)?;
        row.realised_rate = Some(1.0 - surv);
        row.rate_method = Some(RateMethod::KaplanMeier);
        // Without an event Greenwood's variance is 0: no interval rather than a certain one.
        if events.iter().any(|e| *e) {
            (row.km_lo, row.km_hi) = (Some(1.0 - ci.hi), Some(1.0 - ci.lo));
        }
    } else {
        row.realised_rate = Some(d as f64 / n as f64);
        row.rate_method = Some(RateMethod::Proportion);
    }
    (row.cp_lo, row.cp_hi) = (Some(cp.lo), Some(cp.hi));
    (row.jeffreys_lo, row.jeffreys_hi) = (Some(j.lo), Some(j.hi));
    (row.wilson_lo, row.wilson_hi) = (Some(w.lo), Some(w.hi));
    row.p_binom_upper = Some(upper);
    row.p_binom_lower = Some(lower);
    row.p_jeffreys = Some(stats::jeffreys_p_value(d, n, p)?);
    row.zone = Some(stats::traffic_light(upper, &s.zones)?);
    row.zone_lower = Some(stats::traffic_light(lower, &s.zones)?);
    let rho = s.correlation.rho(p, horizon_years);
    let vu = stats::vasicek_upper_tail(d, n, p, rho)?;
    let (klo, khi) = stats::vasicek_count_interval(n, p, rho, s.level)?;
    row.rho = Some(rho);
    row.p_vasicek_upper = Some(vu);
    row.p_vasicek_lower = Some(stats::vasicek_lower_tail(d, n, p, rho)?);
    (row.vasicek_lo, row.vasicek_hi) = (Some(klo as f64 / n as f64), Some(khi as f64 / n as f64));
    row.zone_vasicek = Some(stats::traffic_light(vu, &s.zones)?);
    Ok(row)
}

/// One Hosmer-Lemeshow row per (cohort, horizon), over the buckets with n > 0, with the
/// Brier score and Spiegelhalter test over the counted members and their concentration.
pub fn hosmer_lemeshow_rows(obs: &[Observation], settings: &BacktestSettings) -> Vec<HosmerLemeshowRow> {
    let mut per: BTreeMap<(String, u32), (Vec<BucketForecast>, Vec<f64>, Vec<bool>)> = BTreeMap::new();
    for ((cohort, h, _, _), members) in groups(obs) {
        let c = counts(&members, settings.censoring);
        let e = per.entry((cohort, h)).or_default();
        if let Some(p) = c.mean_pd {
            e.0.push(BucketForecast { n: c.n, d: c.d, p });
        }
        for o in members.iter().filter(|o| o.counts(settings.censoring)) {
            e.1.push(o.implied_pd.clamp(0.0, 1.0));
            e.2.push(o.defaulted());
        }
    }
    per.into_iter()
        .map(|((cohort, horizon_years), (buckets, p, y))| {
            let k = buckets.len();
            let sizes: Vec<u64> = buckets.iter().map(|b| b.n).collect();
            let (statistic, p_value, note) = if buckets.is_empty() {
                (None, None, Some("no member counts: the cohort is incomplete at this horizon".to_string()))
            } else {
                match stats::hosmer_lemeshow(&buckets) {
                    Ok(hl) => (Some(hl.statistic), Some(hl.p_value), None),
                    Err(e) => (None, None, Some(e.to_string())),
                }
            };
            let score = stats::spiegelhalter(&p, &y).ok();
            HosmerLemeshowRow {
                cohort,
                horizon_years,
                buckets: k,
                statistic,
                p_value,
                note,
                n: p.len() as u64,
                brier: score.map(|s| s.brier),
                spiegelhalter_z: score.and_then(|s| s.z),
                spiegelhalter_p: score.and_then(|s| s.p_value),
                hhi: stats::herfindahl(&sizes),
            }
        })
        .collect()
}
