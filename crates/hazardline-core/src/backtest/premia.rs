//! Risk premia: realised (historical-measure) intensity lambda_P = defaults / exposure years
//! with its Garwood (1936) interval, pricing-measure intensity lambda_Q = integrated calibrated
//! hazard over the same windows / the same exposure, their ratio, and the spread split into
//! expected loss lambda_P (1 - R) and the remainder (docs/design.md, "Backtest and risk premium").
//!
//! Every member with a known window counts here, censored ones included: exposure time makes
//! censoring exact. Incomplete members (a horizon past the outcome end) do not.

use super::buckets::groups_for_premia;
use super::cohort::{Observation, Outcome};
use super::{BacktestError, BacktestSettings};
use crate::stats;

/// One row of `risk_premia` (docs/design.md, "Output tables"), tagged with cohort and recovery.
/// Fields are None when undefined: everything intensity-based when the exposure is 0; `ratio`
/// when d = 0 (lambda_P = 0, the ratio is unbounded); `ratio_hi` when d = 0 (the Garwood lower
/// bound is 0, so the ratio's upper bound is unbounded); spreads when nobody quoted the tenor.
#[derive(Debug, Clone, PartialEq)]
pub struct RiskPremiumRow {
    /// A year like "2021", or "all".
    pub cohort: String,
    pub bucket: String,
    pub horizon_years: u32,
    pub level: f64,
    /// The recovery of the curve set (what the spread decomposition uses).
    pub recovery: f64,
    pub members: u64,
    pub exposure_years: f64,
    pub defaults: u64,
    pub lambda_p: Option<f64>,
    pub lambda_p_lo: Option<f64>,
    pub lambda_p_hi: Option<f64>,
    pub lambda_q: Option<f64>,
    pub ratio: Option<f64>,
    pub ratio_lo: Option<f64>,
    pub ratio_hi: Option<f64>,
    /// Mean quoted par spread at the tenor of 12 h months, over the members that quoted it.
    pub spread_bp: Option<f64>,
    pub spread_quotes: u64,
    /// lambda_P (1 - R) x 1e4.
    pub el_spread_bp: Option<f64>,
    /// The expected-loss spread at the ends of lambda_P's Garwood interval.
    pub el_spread_lo_bp: Option<f64>,
    pub el_spread_hi_bp: Option<f64>,
    /// spread_bp - el_spread_bp: risk and liquidity premium.
    pub premium_spread_bp: Option<f64>,
    /// spread_bp minus the upper and the lower end of the expected-loss spread.
    pub premium_spread_lo_bp: Option<f64>,
    pub premium_spread_hi_bp: Option<f64>,
}

/// One `risk_premia` row per (cohort year and "all", horizon, bucket).
pub fn risk_premium_rows(
    obs: &[Observation],
    settings: &BacktestSettings,
    recovery: f64,
) -> Result<Vec<RiskPremiumRow>, BacktestError> {
    groups_for_premia(obs)
        .into_iter()
        .map(|((cohort, h, _, bucket), members)| premium_row(cohort, bucket, h, &members, settings.level, recovery))
        .collect()
}

fn premium_row(
    cohort: String,
    bucket: String,
    horizon_years: u32,
    members: &[&Observation],
    level: f64,
    recovery: f64,
) -> Result<RiskPremiumRow, BacktestError> {
    let members: Vec<&Observation> = members.iter().copied().filter(|o| o.outcome != Outcome::Incomplete).collect();
    let exposure: f64 = members.iter().map(|o| o.exposure_years).sum();
    let defaults = members.iter().filter(|o| o.defaulted()).count() as u64;
    let spreads: Vec<f64> = members.iter().filter_map(|o| o.spread_bp).collect();
    let spread_bp = (!spreads.is_empty()).then(|| spreads.iter().sum::<f64>() / spreads.len() as f64);
    let mut row = RiskPremiumRow {
        cohort,
        bucket,
        horizon_years,
        level,
        recovery,
        members: members.len() as u64,
        exposure_years: exposure,
        defaults,
        lambda_p: None,
        lambda_p_lo: None,
        lambda_p_hi: None,
        lambda_q: None,
        ratio: None,
        ratio_lo: None,
        ratio_hi: None,
        spread_bp,
        spread_quotes: spreads.len() as u64,
        el_spread_bp: None,
        el_spread_lo_bp: None,
        el_spread_hi_bp: None,
        premium_spread_bp: None,
        premium_spread_lo_bp: None,
        premium_spread_hi_bp: None,
    };
    if exposure <= 0.0 {
        return Ok(row);
    }
    let lambda_p = defaults as f64 / exposure;
    let g = stats::garwood_interval(defaults, exposure, level)?;
    let lambda_q = members.iter().filter_map(|o| o.integrated_hazard).sum::<f64>() / exposure;
    let el = lambda_p * (1.0 - recovery) * 1e4;
    row.lambda_p = Some(lambda_p);
    (row.lambda_p_lo, row.lambda_p_hi) = (Some(g.lo), Some(g.hi));
    row.lambda_q = Some(lambda_q);
    row.ratio = (defaults > 0).then(|| lambda_q / lambda_p);
    row.ratio_lo = Some(lambda_q / g.hi);
    row.ratio_hi = (g.lo > 0.0).then(|| lambda_q / g.lo);
    let (el_lo, el_hi) = (g.lo * (1.0 - recovery) * 1e4, g.hi * (1.0 - recovery) * 1e4);
    row.el_spread_bp = Some(el);
    (row.el_spread_lo_bp, row.el_spread_hi_bp) = (Some(el_lo), Some(el_hi));
    row.premium_spread_bp = spread_bp.map(|s| s - el);
    (row.premium_spread_lo_bp, row.premium_spread_hi_bp) = (spread_bp.map(|s| s - el_hi), spread_bp.map(|s| s - el_lo));
    Ok(row)
}
