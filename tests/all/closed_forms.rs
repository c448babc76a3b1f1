//! Closed-form checks, each named with its source.

use super::support::{d, fit, tenor};
use hazardline::calibrate::BootstrapSettings;
use hazardline::curves::{year_time, DiscountCurve, HazardCurve};
use hazardline::instruments::cds::price_legs;
use hazardline::instruments::{AccrualIntegration, CdsContract};
use hazardline::time::schedule::CouponPeriod;
use hazardline::time::{add_days, Calendar};

/// Survival under a constant intensity is exp(-lambda T) (the exponential law of the first
/// jump of a Poisson process). Par spreads priced on a flat curve bootstrap back to the same
/// flat hazard at every node, and the survival at each maturity is exp(-lambda T).
#[test]
fn flat_hazard_bootstraps_back_and_survival_is_exponential() {
    let trade = d("2024-05-15");
    let cal = Calendar::weekends_only();
    let disc = DiscountCurve::flat(trade, 0.03);
    for lambda in [0.0005, 0.02, 0.3, 1.5] {
        let flat = HazardCurve::flat(trade, lambda);
        let tenors = ["6M", "1Y", "2Y", "3Y", "5Y", "7Y", "10Y"];
        let quotes: Vec<(&str, f64)> = tenors
            .iter()
            .map(|&t| {
                let c = CdsContract::standard(trade, tenor(t), &cal).unwrap();
                let legs = price_legs(&c, 0.4, &disc, &flat, AccrualIntegration::default()).unwrap();
                (t, legs.par_spread() * 1e4)
            })
            .collect();
        let (f, _) = fit(trade, &disc, &quotes, 0.4, &BootstrapSettings::default());
        for n in &f.nodes {
            // Relative 1e-10: at lambda = 1.5 survival to the previous node is ~1e-4, so the
            // last segment moves the 7Y spread very little and its hazard is less well pinned.
            assert!((n.hazard.unwrap() - lambda).abs() < 1e-10 * lambda, "lambda {lambda} {}: {:?}", n.tenor, n.hazard);
            let t = year_time(trade, n.maturity);
            assert!((n.survival.unwrap() - (-lambda * t).exp()).abs() < 1e-13);
        }
    }
}

/// A zero-recovery defaultable zero-coupon bond is worth the risk-free price times the
/// survival probability, i.e. its cash flow is discounted at r + lambda (the reduced-form
/// pricing result for zero recovery, Lando 1998 / Duffie and Singleton 1999). Here with
/// piecewise curves: the product of our discount factor and survival equals
/// exp(-integral of (r + lambda)) computed by hand from the pillar data.
#[test]
fn zero_recovery_zero_coupon_bond_discounts_at_r_plus_lambda() {
    let trade = d("2024-01-02");
    let disc = DiscountCurve::flat(trade, 0.035);
    let hz = HazardCurve::new(trade, vec![1.0, 3.0, 5.0], vec![0.01, 0.02, 0.04]).unwrap();
    for (t, integral_lambda) in [(0.5, 0.005), (1.0, 0.01), (2.0, 0.03), (4.0, 0.09), (5.0, 0.13), (7.0, 0.21)] {
        let price = disc.df_at(t) * hz.survival_at(t);
        let by_hand = (-(0.035 * t + integral_lambda)).exp();
        assert!((price - by_hand).abs() < 1e-15, "t = {t}");
    }
}

/// Protection leg under flat r and lambda, protection from T to maturity:
/// (1 - R) lambda / (r + lambda) (1 - exp(-(r + lambda) T_m)), the integral of
/// (1 - R) lambda exp(-(r + lambda) t) (textbook closed form for the default leg with
/// continuous default payment, e.g. O'Kane 2008, Modelling Single-name and Multi-name Credit
/// Derivatives, ch. 6; recalled from memory).
#[test]
fn protection_leg_closed_form_for_flat_curves() {
    let trade = d("2024-06-03");
    let cal = Calendar::weekends_only();
    for (r, lambda) in [(0.03, 0.02), (0.0, 0.5), (0.05, 1e-6), (-0.004, 0.01)] {
        let disc = DiscountCurve::flat(trade, r);
        let hz = HazardCurve::flat(trade, lambda);
        let c = CdsContract::standard(trade, tenor("5Y"), &cal).unwrap();
        let legs = price_legs(&c, 0.4, &disc, &hz, AccrualIntegration::Standard).unwrap();
        let tm = year_time(trade, c.maturity);
        let closed = 0.6 * lambda / (r + lambda) * (1.0 - (-(r + lambda) * tm).exp());
        assert!(
            (legs.protection - closed).abs() < 1e-14 * closed.max(1e-3),
            "r {r} lambda {lambda}: {} vs {closed}",
            legs.protection
        );
    }
}

/// The credit triangle: for a flat hazard and premium paid continuously, the par spread is
/// lambda (1 - R) (common practice; e.g. Hull, Options, Futures and Other Derivatives, chapter
/// on credit derivatives; recalled from memory). Two conventions of the standard contract
/// shift the limit and are put into the closed form: premium accrues Act/360 against the
/// Act/365F hazard clock, and protection runs from T while premium accrues from T + 1. With
/// flat r: s* = (1 - R) lambda A(0, Tm) / ((365/360) A(1/365, Tm)), A(a, b) = integral of
/// exp(-(r + lambda) t) from a to b. The gap must shrink as the premium frequency grows from
/// quarterly to daily.
#[test]
fn credit_triangle_is_approached_as_premium_frequency_grows() {
    let trade = d("2024-06-03");
    let cal = Calendar::weekends_only();
    let (lambda, rec, r) = (0.025, 0.4, 0.03);
    let disc = DiscountCurve::flat(trade, r);
    let hz = HazardCurve::flat(trade, lambda);
    let start = add_days(trade, 1);
    let maturity = add_days(start, 5 * 364);
    let tm = year_time(trade, maturity);
    let k = r + lambda;
    let a = |lo: f64, hi: f64| ((-k * lo).exp() - (-k * hi).exp()) / k;
    let limit = (1.0 - rec) * lambda * a(0.0, tm) / (365.0 / 360.0 * a(1.0 / 365.0, tm));
    // The plain triangle is within a few parts in 10^4 of it.
    assert!((limit / (lambda * (1.0 - rec)) - 360.0 / 365.0).abs() < 1e-3);
    let mut gaps = Vec::new();
    for step_days in [91, 28, 7, 1] {
        // A contract with plain periods of `step_days` from T + 1, paid at each period end,
        // no maturity-day extra and no rebate (accrual starts at T + 1).
        let mut periods = Vec::new();
        let mut s = start;
        while s < maturity {
            let e = add_days(s, step_days).min(maturity);
            periods.push(CouponPeriod {
                accrual_start: s,
                accrual_end: e,
                payment: e,
                accrual_days: (e - s).num_days(),
            });
            s = e;
        }
        let mut c = CdsContract::with_maturity(trade, maturity, &cal);
        c.periods = periods;
        let legs = price_legs(&c, rec, &disc, &hz, AccrualIntegration::Standard).unwrap();
        gaps.push((legs.par_spread() - limit).abs() / limit);
    }
    for w in gaps.windows(2) {
        assert!(w[1] < w[0], "gap did not shrink: {gaps:?}");
    }
    // What is left at daily premium is the standard model's one-day offsets (survival at
    // pay - 1 day, accrual counted from start - 1 day): of the order of lambda x 1 day.
    assert!(gaps[3] < 2.0 * lambda / 365.0, "daily premium still {:.2e} away: {gaps:?}", gaps[3]);
}
