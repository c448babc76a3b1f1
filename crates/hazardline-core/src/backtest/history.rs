//! Realised default rates from an institution's own cohort counts (`cohort_history`), set
//! against the mean 1-year implied PD of the same grade from the calibrated cohorts.

use super::buckets::BucketRow;
use crate::stats::{self, ZoneThresholds};
use std::collections::BTreeMap;

/// Where the realised outcomes of a [`HistoryRow`] come from.
pub const SOURCE_COHORT_HISTORY: &str = "cohort_history";

/// One input row of `cohort_history`.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct CohortHistoryRecord {
    pub year: i32,
    pub grade: u32,
    pub obligors: u64,
    pub defaults: u64,
    /// Obligors withdrawn during the year; reported, not subtracted (n = obligors, as the
    /// institution counted its cohort).
    pub withdrawn: Option<u64>,
}

/// Realised rate per grade and year (and pooled "all") against the implied PD of that grade.
#[derive(Debug, Clone, PartialEq)]
pub struct HistoryRow {
    pub cohort: String,
    pub grade: u32,
    pub level: f64,
    pub obligors: u64,
    pub defaults: u64,
    pub withdrawn: Option<u64>,
    pub realised_rate: f64,
    pub cp_lo: f64,
    pub cp_hi: f64,
    pub jeffreys_lo: f64,
    pub jeffreys_hi: f64,
    /// Mean 1Y implied PD of "grade g" from the entity cohorts of the same label (year or all),
    /// None when no calibrated cohort covers it; the tests below are None then too.
    pub implied_pd: Option<f64>,
    pub p_binom_upper: Option<f64>,
    pub p_jeffreys: Option<f64>,
    pub zone: Option<stats::Zone>,
    /// The long-history premium: the historical intensity of the grade, -ln(1 - d / n) per
    /// year, with the Clopper-Pearson bounds carried through the same monotone map.
    pub lambda_p: f64,
    pub lambda_p_lo: f64,
    pub lambda_p_hi: f64,
    /// The quoted period's pricing intensity of the same grade (1Y windows, `risk_premia`),
    /// None when no calibrated cohort covers it.
    pub lambda_q: Option<f64>,
    /// lambda_q / lambda_p with bounds lambda_q / lambda_p_hi and lambda_q / lambda_p_lo
    /// (None when that is 0). The two intensities come from different periods.
    pub ratio: Option<f64>,
    pub ratio_lo: Option<f64>,
    pub ratio_hi: Option<f64>,
    /// Always [`SOURCE_COHORT_HISTORY`]: the outcomes are the institution's counts.
    pub outcome_source: &'static str,
}

/// Compares `records` with the 1-year grade rows of an entity backtest (`bucket_rows` output).
/// A record with obligors = 0 or defaults > obligors is an error naming its index in `records`.
pub fn compare_cohort_history(
    records: &[CohortHistoryRecord],
    entity_rows: &[BucketRow],
    premia: &[super::RiskPremiumRow],
    level: f64,
    zones: &ZoneThresholds,
) -> Result<Vec<HistoryRow>, stats::StatsError> {
    let lambda_q: BTreeMap<(String, String), f64> = premia
        .iter()
        .filter(|r| r.horizon_years == 1)
        .filter_map(|r| r.lambda_q.map(|q| ((r.cohort.clone(), r.bucket.clone()), q)))
        .collect();
    let implied: BTreeMap<(String, String), f64> = entity_rows
        .iter()
        .filter(|r| r.horizon_years == 1)
        .filter_map(|r| r.implied_pd.map(|p| ((r.cohort.clone(), r.bucket.clone()), p)))
        .collect();
    for (index, r) in records.iter().enumerate() {
        stats::clopper_pearson(r.defaults, r.obligors, level)
            .map_err(|e| stats::StatsError::Bucket { index, source: Box::new(e) })?;
    }
    let mut pooled: BTreeMap<(String, u32), (u64, u64, Option<u64>)> = BTreeMap::new();
    for r in records {
        for cohort in [r.year.to_string(), "all".to_string()] {
            let e = pooled.entry((cohort, r.grade)).or_insert((0, 0, Some(0)));
            e.0 += r.obligors;
            e.1 += r.defaults;
            e.2 = e.2.zip(r.withdrawn).map(|(a, b)| a + b);
        }
    }
    let mut rows = Vec::new();
    for ((cohort, grade), (n, d, withdrawn)) in pooled {
        let cp = stats::clopper_pearson(d, n, level)?;
        let j = stats::jeffreys_interval(d, n, level)?;
        let p = implied.get(&(cohort.clone(), format!("grade {grade}"))).copied();
        let upper = p.map(|p| stats::binomial_upper_tail(d, n, p)).transpose()?;
        let intensity = |rate: f64| -(-rate).ln_1p();
        let (lp, lp_lo, lp_hi) = (intensity(d as f64 / n as f64), intensity(cp.lo), intensity(cp.hi));
        let q = lambda_q.get(&(cohort.clone(), format!("grade {grade}"))).copied();
        rows.push(HistoryRow {
            cohort,
            grade,
            level,
            obligors: n,
            defaults: d,
            withdrawn,
            realised_rate: d as f64 / n as f64,
            cp_lo: cp.lo,
            cp_hi: cp.hi,
            jeffreys_lo: j.lo,
            jeffreys_hi: j.hi,
            implied_pd: p,
            p_binom_upper: upper,
            p_jeffreys: p.map(|p| stats::jeffreys_p_value(d, n, p)).transpose()?,
            zone: upper.map(|u| stats::traffic_light(u, zones)).transpose()?,
            lambda_p: lp,
            lambda_p_lo: lp_lo,
            lambda_p_hi: lp_hi,
            lambda_q: q,
            ratio: q.filter(|_| lp > 0.0).map(|q| q / lp),
            ratio_lo: q.filter(|_| lp_hi.is_finite()).map(|q| q / lp_hi),
            ratio_hi: q.filter(|_| lp_lo > 0.0).map(|q| q / lp_lo),
            outcome_source: SOURCE_COHORT_HISTORY,
        });
    }
    Ok(rows)
}
