//! Calibration residuals: every quote repriced on the calibrated curve by the general leg
//! pricer (a separate path from the bootstrap's split evaluation), model minus market.

use super::bootstrap::{BootstrapQuote, CurveFit};
use crate::curves::DiscountCurve;
use crate::instruments::cds::{price_legs_set, AccrualIntegration, CdsLegs, CdsQuote};
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
    // Every solved node's contract priced on one joint grid (one plan per curve, not per node):
    // the shared plan's when every node was solved, handed over contract by contract.
    if let Some(p) = plan.filter(|_| fit.nodes.iter().all(|n| n.hazard.is_some())) {
        let nodes = &fit.nodes;
        let recovery = |k: usize| quotes[nodes[k].quote_index].recovery;
        if p.each_legs_on(curve, nodes.len(), recovery, |k, legs| out.push(residual(&nodes[k], quotes, &legs))) {
            return out;
        }
    }
    let solved: Vec<(&super::bootstrap::NodeFit, &crate::instruments::CdsContract)> =
        fit.nodes.iter().zip(fit.contracts.iter()).filter(|(n, _)| n.hazard.is_some()).collect();
    let contracts: Vec<&crate::instruments::CdsContract> = solved.iter().map(|s| s.1).collect();
    let recoveries: Vec<f64> = solved.iter().map(|s| quotes[s.0.quote_index].recovery).collect();
    let all_legs = match price_legs_set(&contracts, &recoveries, discount, curve, accrual) {
        Ok(legs) => legs,
        Err(_) => return Vec::new(),
    };
    for ((node, _), legs) in solved.into_iter().zip(all_legs) {
        out.push(residual(node, quotes, &legs));
    }
    out
}

/// The repricing of `node`'s quote from its contract's legs on the calibrated curve.
fn residual(node: &super::bootstrap::NodeFit, quotes: &[BootstrapQuote], legs: &CdsLegs) -> QuoteResidual {
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
    QuoteResidual {
        quote_index: node.quote_index,
        tenor: node.tenor,
        instrument,
        market,
        model,
        residual_bp,
        model_par_spread_bp: par_bp,
        risky_annuity: ann,
        cash_settle_df: legs.cash_settle_df,
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::calibrate::bootstrap::{BootstrapPlan, BootstrapSettings};
    use crate::time::{Calendar, Tenor};
    use chrono::NaiveDate;

    /// Repricing on the shared plan's grid (legs handed over one by one, the grid's vectors
    /// kept by the thread) gives the general leg pricer's repricing bit for bit, curve after
    /// curve: plans of different lengths in turn (so a longer grid's values are left in the
    /// kept vectors before a shorter one), par-spread and upfront quotes, two discount curves.
    #[test]
    fn repricing_on_the_plan_is_the_general_repricing() {
        let t = NaiveDate::from_ymd_opt(2024, 3, 20).unwrap();
        let cal = Calendar::weekends_only();
        let months = |m: &[u32]| -> Vec<(Tenor, Option<NaiveDate>)> {
            m.iter().map(|&m| (Tenor::from_months(m).unwrap(), None)).collect()
        };
        let sets = [months(&[6, 12, 24, 36, 60, 84, 120]), months(&[12, 36]), months(&[6, 12, 24, 36, 60])];
        let settings = BootstrapSettings::default();
        let mut compared = 0;
        for d in &crate::curves::discount::test_curves(t) {
            for (i, terms) in sets.iter().cycle().take(9).enumerate() {
                let plan = BootstrapPlan::for_terms(t, terms, d, &cal, AccrualIntegration::Standard).unwrap();
                let quotes: Vec<BootstrapQuote> = terms
                    .iter()
                    .enumerate()
                    .map(|(k, &(tenor, maturity))| {
                        let spread = 0.004 + 0.001 * (k + i) as f64;
                        let quote = if (k + i) % 3 == 0 {
                            CdsQuote::Upfront { upfront: (spread - 0.01) * tenor.years(), coupon: 0.01 }
                        } else {
                            CdsQuote::ParSpread(spread)
                        };
                        BootstrapQuote { tenor, quote, recovery: 0.25 + 0.05 * (k % 3) as f64, maturity }
                    })
                    .collect();
                let fit = plan.solve(&quotes, &settings).unwrap();
                assert!(fit.complete());
                let on_plan = reprice_with_plan(&fit, &quotes, d, AccrualIntegration::Standard, Some(&plan));
                let general = reprice(&fit, &quotes, d, AccrualIntegration::Standard);
                assert_eq!(on_plan.len(), terms.len());
                for (a, b) in on_plan.iter().zip(&general) {
                    assert_eq!((a.quote_index, a.tenor, a.instrument), (b.quote_index, b.tenor, b.instrument));
                    for (x, y) in [
                        (a.market, b.market),
                        (a.model, b.model),
                        (a.residual_bp, b.residual_bp),
                        (a.model_par_spread_bp, b.model_par_spread_bp),
                        (a.risky_annuity, b.risky_annuity),
                        (a.cash_settle_df, b.cash_settle_df),
                    ] {
                        assert_eq!(x.to_bits(), y.to_bits());
                    }
                    compared += 1;
                }
            }
        }
        assert!(compared > 80, "{compared}");
    }
}
