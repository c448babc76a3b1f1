//! Discriminatory power of the implied PD (and of the grade, where grades exist): does the
//! score rank the members that default above those that survive? Rows of
//! `backtest_discrimination`, per cohort year and pooled, per horizon, over the members the
//! bucket tests count.

use super::cohort::Observation;
use super::BacktestSettings;
use crate::stats;
use std::collections::BTreeMap;

/// Which score a row ranks by.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord)]
pub enum Score {
    /// The member's implied PD over the horizon.
    ImpliedPd,
    /// The internal grade in force at the cohort date (higher = riskier).
    Grade,
}
crate::text_form!(Score { ImpliedPd => "implied_pd", Grade => "grade" });

/// One row of `backtest_discrimination`.
#[derive(Debug, Clone, PartialEq)]
pub struct DiscriminationRow {
    /// A year like "2021", or "all".
    pub cohort: String,
    pub horizon_years: u32,
    pub score: Score,
    pub level: f64,
    /// Members ranked (those with a grade for the grade score).
    pub n: u64,
    pub defaults: u64,
    pub auc: Option<f64>,
    /// DeLong standard error.
    pub auc_se: Option<f64>,
    pub auc_lo: Option<f64>,
    pub auc_hi: Option<f64>,
    /// 2 AUC - 1.
    pub gini: Option<f64>,
    /// One-sided p-value of AUC <= 1/2 (Mann-Whitney variance under that hypothesis, tie
    /// corrected): small when the score discriminates.
    pub p_no_power: Option<f64>,
    /// Implied-PD row only: two-sided p-value of the paired DeLong test of the implied PD's AUC
    /// against the grade's, on the members with a grade.
    pub p_vs_grade: Option<f64>,
    /// The pooled AUC of the same score and horizon in a reference review (an earlier run),
    /// and the two-sided p-value of the difference, the two samples taken as independent.
    pub auc_reference: Option<f64>,
    pub p_vs_reference: Option<f64>,
    /// Why a statistic is missing.
    pub note: Option<String>,
}

/// Sets `auc_reference` and `p_vs_reference` on the pooled rows from a reference review's
/// pooled rows of the same horizon and score.
pub fn compare_with_reference(rows: &mut [DiscriminationRow], reference: &[DiscriminationRow]) {
    for r in rows.iter_mut().filter(|r| r.cohort == "all") {
        let Some(x) =
            reference.iter().find(|x| x.cohort == "all" && x.horizon_years == r.horizon_years && x.score == r.score)
        else {
            continue;
        };
        r.auc_reference = x.auc;
        if let (Some(a), Some(sa), Some(b), Some(sb)) = (r.auc, r.auc_se, x.auc, x.auc_se) {
            r.p_vs_reference = stats::auc_difference_independent(a, sa, b, sb).map(|(_, p)| p);
        }
    }
}

/// One row per (cohort year and "all", horizon, score).
pub fn discrimination_rows(obs: &[Observation], settings: &BacktestSettings) -> Vec<DiscriminationRow> {
    let mut groups: BTreeMap<(String, u32), Vec<&Observation>> = BTreeMap::new();
    for o in obs.iter().filter(|o| o.counts(settings.censoring)) {
        groups.entry((o.cohort_year(), o.horizon_years)).or_default().push(o);
        groups.entry(("all".to_string(), o.horizon_years)).or_default().push(o);
    }
    let any_grade = obs.iter().any(|o| o.grade.is_some());
    let mut rows = Vec::new();
    for ((cohort, h), members) in groups {
        let pd: Vec<f64> = members.iter().map(|o| o.implied_pd).collect();
        let y: Vec<bool> = members.iter().map(|o| o.defaulted()).collect();
        let graded: Vec<&&Observation> = members.iter().filter(|o| o.grade.is_some()).collect();
        let g_pd: Vec<f64> = graded.iter().map(|o| o.implied_pd).collect();
        let g_score: Vec<f64> = graded.iter().map(|o| f64::from(o.grade.unwrap_or(0))).collect();
        let g_y: Vec<bool> = graded.iter().map(|o| o.defaulted()).collect();
        let paired = stats::auc_paired(&g_pd, &g_score, &g_y).ok().and_then(|p| p.p_value);
        let mut pd_row = row(&cohort, h, Score::ImpliedPd, settings.level, &pd, &y);
        pd_row.p_vs_grade = if any_grade { paired } else { None };
        rows.push(pd_row);
        if any_grade {
            rows.push(row(&cohort, h, Score::Grade, settings.level, &g_score, &g_y));
        }
    }
    rows
}

fn row(cohort: &str, horizon_years: u32, score: Score, level: f64, s: &[f64], y: &[bool]) -> DiscriminationRow {
    let mut r = DiscriminationRow {
        cohort: cohort.to_string(),
        horizon_years,
        score,
        level,
        n: s.len() as u64,
        defaults: y.iter().filter(|d| **d).count() as u64,
        auc: None,
        auc_se: None,
        auc_lo: None,
        auc_hi: None,
        gini: None,
        p_no_power: None,
        p_vs_grade: None,
        auc_reference: None,
        p_vs_reference: None,
        note: None,
    };
    match stats::auc_delong(s, y) {
        Ok(a) => {
            r.auc = Some(a.auc);
            r.auc_se = Some(a.se());
            if let Ok(i) = a.interval(level) {
                (r.auc_lo, r.auc_hi) = (Some(i.lo), Some(i.hi));
            }
            r.gini = Some(a.gini());
            // Under "no power" the Mann-Whitney variance, not DeLong's (estimated under the
            // alternative, far too small when the defaulters are few).
            r.p_no_power = stats::auc_no_power_p(s, y).ok().flatten();
            if a.defaults < 2 || a.survivors < 2 {
                r.note = Some("fewer than two defaulters or survivors: the DeLong variance is not defined".into());
                (r.auc_se, r.auc_lo, r.auc_hi) = (None, None, None);
            }
        }
        Err(e) => r.note = Some(e.to_string()),
    }
    r
}
