//! Calibration residuals: every quote repriced on the calibrated curve by the general leg
//! pricer (a separate path from the bootstrap's split evaluation), model minus market.

use super::bootstrap::{BootstrapQuote, CurveFit};
use crate::curves::DiscountCurve;
use crate::instruments::cds::{price_legs_set, AccrualIntegration, CdsQuote};
use crate::time::Tenor;

/// The repricing of one quote.
#[derive(Debug, Clone, PartialEq)]
pub struct QuoteResidual {
    pub quote_index: usize,
    pub tenor: Tenor,
    /// `cds_par_spread` or `cds_upfront`.
    pub instrument: &'static str,
    /// Market quote: par spread in bp, or upfront as a fraction of notional.
    pub market: f64,
    /// The same quantity repriced on the calibrated curve.
    pub model: f64,
    /// Model minus market in bp of running spread (an upfront difference is converted with
    /// the contract's risky annuity).
    pub residual_bp: f64,
    /// Repriced par spread in bp (for either quote form).
    pub model_par_spread_bp: f64,
    /// Clean risky annuity at T on the calibrated curve.
    pub risky_annuity: f64,
    /// Discount factor to cash settlement (the upfront at coupon c is
    /// (par - c) x RA / this).
    pub cash_settle_df: f64,
}

impl QuoteResidual {
    /// The clean upfront at running coupon `coupon` (decimal) on the calibrated curve.
    pub fn upfront_at(&self, coupon: f64) -> f64 {
        (self.model_par_spread_bp / 1e4 - coupon) * self.risky_annuity / self.cash_settle_df
    }
}

/// Reprices every node of `fit` that has a solved hazard (nodes past a stop have no residual).
pub fn reprice(
    fit: &CurveFit,
    quotes: &[BootstrapQuote],
    discount: &DiscountCurve,
    accrual: AccrualIntegration,
) -> Vec<QuoteResidual> {
    reprice_with_plan(fit, quotes, discount, accrual, None)
}

/// As [`reprice`], reusing `plan` (the shared plan the curve was bootstrapped on) when every
/// node was solved: the plan's grid is the one repricing would build.
pub fn reprice_with_plan(
    fit: &CurveFit,
    quotes: &[BootstrapQuote],
    discount: &DiscountCurve,
    accrual: AccrualIntegration,
    plan: Option<&super::bootstrap::BootstrapPlan>,
) -> Vec<QuoteResidual> {
    let Some(curve) = fit.curve.as_ref() else { return Vec::new() };
    let mut out = Vec::with_capacity(fit.nodes.len());
    // Every solved node's contract priced on one joint grid (one plan per curve, not per node).
    let solved: Vec<(&super::bootstrap::NodeFit, &crate::instruments::CdsContract)> =
        fit.nodes.iter().zip(fit.contracts.iter()).filter(|(n, _)| n.hazard.is_some()).collect();
    let contracts: Vec<&crate::instruments::CdsContract> = solved.iter().map(|s| s.1).collect();
    let recoveries: Vec<f64> = solved.iter().map(|s| quotes[s.0.quote_index].recovery).collect();
    let shared = plan.filter(|_| solved.len() == fit.nodes.len()).and_then(|p| p.legs_on(curve, &recoveries));
    let all_legs = match shared {
        Some(legs) => legs,
        None => match price_legs_set(&contracts, &recoveries, discount, curve, accrual) {
            Ok(legs) => legs,
            Err(_) => return Vec::new(),
        },
    };
    for ((node, _), legs) in solved.into_iter().zip(all_legs) {
        let q = &quotes[node.quote_index];
        let ann = legs.risky_annuity();
        let par_bp = legs.par_spread() * 1e4;
        let (instrument, market, model, residual_bp) = match q.quote {
            CdsQuote::ParSpread(s) => ("cds_par_spread", s * 1e4, par_bp, par_bp - s * 1e4),
            CdsQuote::Upfront { upfront, coupon } => {
                let m = legs.upfront(coupon);
                ("cds_upfront", upfront, m, (m - upfront) * legs.cash_settle_df / ann * 1e4)
            }
        };
        out.push(QuoteResidual {
            quote_index: node.quote_index,
            tenor: node.tenor,
            instrument,
            market,
            model,
            residual_bp,
            model_par_spread_bp: par_bp,
            risky_annuity: ann,
            cash_settle_df: legs.cash_settle_df,
        });
    }
    out
}
