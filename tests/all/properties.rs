//! Round trips and properties of the bootstrap (repricing, monotone survival, locality).

use super::support::{d, fit, usd_like_curve};
use hazardline::calibrate::residuals::reprice;
use hazardline::calibrate::{bootstrap, BootstrapQuote, BootstrapSettings, NodeStatus};
use hazardline::instruments::cds::price_legs;
use hazardline::instruments::{AccrualIntegration, CdsQuote};
use hazardline::time::Calendar;
use proptest::prelude::*;

const TENORS: [&str; 8] = ["6M", "1Y", "2Y", "3Y", "4Y", "5Y", "7Y", "10Y"];

proptest! {
    #![proptest_config(ProptestConfig::with_cases(200))]

    /// Any moderately upward-sloping or flat spread curve (steep distressed curves can be
    /// genuinely out of reach, see `unreachable_quote_is_reported`) bootstraps with non-negative hazards,
    /// reprices to 1e-6 bp, and has falling survival.
    #[test]
    fn upward_curves_reprice(base in 3.0f64..400.0, steps in proptest::collection::vec(0.0f64..0.08, 8), rec in 0.0f64..0.6, day in 0i64..700) {
        let trade = hazardline::time::add_days(d("2023-01-02"), day);
        let cal = Calendar::weekends_only();
        prop_assume!(cal.is_business_day(trade));
        let disc = usd_like_curve(trade);
        let mut level = base;
        let quotes: Vec<(&str, f64)> = TENORS.iter().zip(&steps).map(|(&t, &g)| { level *= 1.0 + g; (t, level) }).collect();
        let (f, qs) = fit(trade, &disc, &quotes, rec, &BootstrapSettings::default());
        let mut prev = 1.0;
        for n in &f.nodes {
            prop_assert_eq!(n.status, NodeStatus::Ok, "{:?}", n.detail);
            prop_assert!(n.hazard.unwrap() >= 0.0);
            prop_assert!(n.survival.unwrap() <= prev);
            prev = n.survival.unwrap();
        }
        for r in reprice(&f, &qs, &disc, AccrualIntegration::default()) {
            prop_assert!(r.residual_bp.abs() < 1e-6, "{} {}", r.tenor, r.residual_bp);
        }
    }

    /// Upfront quotes and par-spread quotes of the same contracts give the same curve.
    #[test]
    fn upfront_and_spread_quotes_agree(base in 20.0f64..900.0, coupon_bp in prop::sample::select(vec![100.0, 500.0, 1000.0])) {
        let trade = d("2024-03-21");
        let cal = Calendar::weekends_only();
        let disc = usd_like_curve(trade);
        let quotes: Vec<(&str, f64)> = TENORS.iter().enumerate().map(|(i, &t)| (t, base * (1.0 + 0.05 * i as f64))).collect();
        let (f, _) = fit(trade, &disc, &quotes, 0.4, &BootstrapSettings::default());
        let curve = f.curve.clone().unwrap();
        let up: Vec<BootstrapQuote> = f.nodes.iter().zip(f.contracts.iter()).map(|(n, c)| {
            let legs = price_legs(c, 0.4, &disc, &curve, AccrualIntegration::default()).unwrap();
            BootstrapQuote { tenor: n.tenor, quote: CdsQuote::Upfront { upfront: legs.upfront(coupon_bp / 1e4), coupon: coupon_bp / 1e4 }, recovery: 0.4, maturity: None }
        }).collect();
        let g = bootstrap(trade, &up, &disc, &cal, &BootstrapSettings::default()).unwrap();
        for (a, b) in f.nodes.iter().zip(&g.nodes) {
            prop_assert!((a.hazard.unwrap() - b.hazard.unwrap()).abs() < 1e-11, "{}: {:?} vs {:?}", a.tenor, a.hazard, b.hazard);
        }
        // And spread <-> upfront conversion round-trips on the legs.
        for c in f.contracts.iter() {
            let legs = price_legs(c, 0.4, &disc, &curve, AccrualIntegration::default()).unwrap();
            let u = legs.upfront(coupon_bp / 1e4);
            prop_assert!((legs.coupon_from_upfront(u) - coupon_bp / 1e4).abs() < 1e-15);
            prop_assert!(legs.upfront(legs.par_spread()).abs() < 1e-15);
        }
    }
}

/// Bumping one quote moves that node and later ones, never earlier ones (sequential
/// bootstrap locality).
#[test]
fn bumping_one_quote_moves_only_later_nodes() {
    let trade = d("2024-03-21");
    let disc = usd_like_curve(trade);
    let base: Vec<(&str, f64)> = TENORS.iter().enumerate().map(|(i, &t)| (t, 60.0 + 12.0 * i as f64)).collect();
    let (f0, _) = fit(trade, &disc, &base, 0.4, &BootstrapSettings::default());
    for k in 0..TENORS.len() {
        let mut bumped = base.clone();
        bumped[k].1 += 1.0;
        let (f1, _) = fit(trade, &disc, &bumped, 0.4, &BootstrapSettings::default());
        #[allow(clippy::needless_range_loop)] // j indexes three arrays at once
        for j in 0..TENORS.len() {
            let (a, b) = (f0.nodes[j].hazard.unwrap(), f1.nodes[j].hazard.unwrap());
            if j < k {
                assert_eq!(a, b, "bump at {} moved earlier node {}", TENORS[k], TENORS[j]);
            } else if j == k {
                assert!(b > a, "bump up at {} must raise its hazard", TENORS[k]);
            }
        }
    }
}

/// The exact accrual-on-default variant differs from the standard one by little (the
/// conventions note quotes up to about 6e-5 in survival) and reprices its own quotes.
#[test]
fn exact_accrual_variant_is_close_to_standard() {
    let trade = d("2024-03-21");
    let disc = usd_like_curve(trade);
    let quotes: Vec<(&str, f64)> = TENORS.iter().enumerate().map(|(i, &t)| (t, 300.0 + 80.0 * i as f64)).collect();
    let (a, _) = fit(trade, &disc, &quotes, 0.4, &BootstrapSettings::default());
    let (b, qs) = fit(
        trade,
        &disc,
        &quotes,
        0.4,
        &BootstrapSettings { accrual: AccrualIntegration::Exact, ..Default::default() },
    );
    let mut max_diff: f64 = 0.0;
    for (x, y) in a.nodes.iter().zip(&b.nodes) {
        max_diff = max_diff.max((x.survival.unwrap() - y.survival.unwrap()).abs());
    }
    assert!(max_diff > 0.0 && max_diff < 1e-4, "{max_diff}");
    for r in reprice(&b, &qs, &disc, AccrualIntegration::Exact) {
        assert!(r.residual_bp.abs() < 1e-6);
    }
}

/// Distressed levels need hazards above 1 per year: no artificial cap.
#[test]
fn distressed_curves_need_no_cap() {
    let trade = d("2024-03-21");
    let disc = usd_like_curve(trade);
    let quotes = [("6M", 9000.0), ("1Y", 8000.0), ("2Y", 6500.0)];
    let (f, qs) = fit(trade, &disc, &quotes, 0.25, &BootstrapSettings::default());
    assert!(f.nodes[0].hazard.unwrap() > 1.0, "{:?}", f.nodes[0].hazard);
    assert!(f.complete());
    for r in reprice(&f, &qs, &disc, AccrualIntegration::default()) {
        assert!(r.residual_bp.abs() < 1e-6);
    }
}

/// A long-dated quote above what any hazard on its segment can reach (survival to the
/// previous node is already small) is reported, with the shortfall, not capped.
#[test]
fn unreachable_quote_is_reported() {
    let trade = d("2024-03-21");
    let disc = usd_like_curve(trade);
    let quotes = [("1Y", 1500.0), ("5Y", 2500.0), ("7Y", 2600.0), ("10Y", 4000.0)];
    let (f, _) = fit(trade, &disc, &quotes, 0.4, &BootstrapSettings::default());
    let last = f.nodes.last().unwrap();
    assert_eq!(last.status, NodeStatus::Infeasible);
    assert!(last.detail.as_deref().unwrap().contains("out of reach"), "{:?}", last.detail);
    assert!(f.nodes[..3].iter().all(|n| n.status == NodeStatus::Ok));
}
