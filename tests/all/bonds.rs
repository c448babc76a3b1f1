//! Fixed-coupon bonds: prices against QuantLib, the closed forms of the three recovery
//! conventions, the bond-implied hazard fit and the CDS-bond basis.
//!
//! All market data is invented.

use super::support::{d, tenor, usd_like_curve};
use hazardline::calibrate::bond_fit::{
    cds_bond_basis, fit_bond_hazard, BondCurveForm, BondFitSettings, BondFitStatus, BondQuote,
};
use hazardline::curves::{year_time, DiscountCurve, HazardCurve};
use hazardline::instruments::bond::{default_integral, price_bond, BondTerms, RecoveryConvention};
use hazardline::time::{Calendar, DayCount, Tenor};
use serde_json::Value;

fn reference() -> Value {
    let path = concat!(env!("CARGO_MANIFEST_DIR"), "/tests/reference/cir_bond_quantlib.json");
    serde_json::from_str(&std::fs::read_to_string(path).expect("reference file")).expect("valid JSON")
}

fn num(v: &Value) -> f64 {
    v.as_f64().unwrap_or_else(|| panic!("not a number: {v}"))
}

fn s(v: &Value) -> &str {
    v.as_str().unwrap_or_else(|| panic!("not a string: {v}"))
}

fn terms_of(b: &Value) -> BondTerms {
    BondTerms {
        coupon: num(&b["coupon"]),
        frequency: b["frequency"].as_u64().unwrap() as u32,
        maturity: d(s(&b["maturity"])),
        day_count: s(&b["day_count"]).parse().unwrap(),
        issue_date: b["issue_date"].as_str().map(d),
    }
}

/// Source: QuantLib 1.44 `FixedRateBond` with `DiscountingBondEngine` on a risky curve
/// DF x S (zero recovery) and DF x S^(1-R) (recovery of market value), accrued interest and
/// coupon amounts from the same bond, the face-value recovery leg by `scipy.integrate.quad` on
/// QuantLib's curves, and `BondFunctions.bondYield` (tests/reference/cir_bond_quantlib.py).
/// Tolerances: 1e-12 on coupon amounts and accrued (per 100 face), 1e-10 on prices, 1e-10 on
/// the yield.
#[test]
fn bond_prices_match_quantlib() {
    let r = reference();
    let mut n = 0;
    let mut worst: f64 = 0.0;
    for case in r["bond_cases"].as_array().unwrap() {
        let trade = d(s(&case["trade_date"]));
        let pillars: Vec<(Tenor, f64)> = case["discount"]
            .as_array()
            .unwrap()
            .iter()
            .map(|p| (tenor(s(&p["tenor"])), num(&p["zero_rate"])))
            .collect();
        let disc = DiscountCurve::from_zero_rates(trade, &pillars).unwrap();
        let nodes: Vec<chrono::NaiveDate> =
            case["hazard"].as_array().unwrap().iter().map(|h| d(s(&h["node"]))).collect();
        let hs: Vec<f64> = case["hazard"].as_array().unwrap().iter().map(|h| num(&h["hazard"])).collect();
        let hz = HazardCurve::from_dates(trade, &nodes, hs).unwrap();
        let rec = num(&case["recovery"]);
        for b in case["bonds"].as_array().unwrap() {
            let id = format!("{} {}", s(&case["id"]), s(&b["id"]));
            let terms = terms_of(b);
            let cf = terms.cashflows(trade).unwrap();
            let coupons = b["coupons"].as_array().unwrap();
            assert_eq!(cf.periods.len(), coupons.len(), "{id} number of coupons");
            for (p, c) in cf.periods.iter().zip(coupons) {
                assert_eq!(p.accrual_start, d(s(&c["accrual_start"])), "{id}");
                assert_eq!(p.accrual_end, d(s(&c["accrual_end"])), "{id}");
                assert!((p.amount - num(&c["amount"])).abs() < 1e-12, "{id} amount {} vs {}", p.amount, c["amount"]);
            }
            assert!((cf.accrued - num(&b["accrued"])).abs() < 1e-12, "{id} accrued {} vs {}", cf.accrued, b["accrued"]);
            for (conv, key) in [
                (RecoveryConvention::Zero, "zero"),
                (RecoveryConvention::Market, "market"),
                (RecoveryConvention::Par, "par"),
            ] {
                let p = cf.price(&disc, &hz, rec, conv).unwrap();
                for (got, field) in [(p.clean, "clean"), (p.dirty, "dirty")] {
                    let e = (got - num(&b[key][field])).abs();
                    worst = worst.max(e);
                    assert!(e < 1e-10, "{id} {key} {field}: {got} vs {}", b[key][field]);
                }
                assert!((p.risk_free_dirty - num(&b["risk_free"]["dirty"])).abs() < 1e-10, "{id} risk-free");
                if conv == RecoveryConvention::Par {
                    assert!((p.recovery_value - num(&b["par"]["recovery_value"])).abs() < 1e-10, "{id} recovery value");
                }
            }
            let zero_dirty = num(&b["zero"]["clean"]) + cf.accrued;
            let y = cf.yield_from_dirty(zero_dirty).unwrap();
            assert!(
                (y - num(&b["yield_of_zero_clean"])).abs() < 1e-10,
                "{id} yield {y} vs {}",
                b["yield_of_zero_clean"]
            );
            n += 1;
        }
    }
    println!("bonds vs QuantLib: {n} bonds, largest price difference {worst:.2e}");
    assert!(n >= 12);
}

/// Closed form: a zero-recovery defaultable zero-coupon bond is the risk-free price times
/// survival (reduced-form pricing with zero recovery, Lando 1998); for a coupon bond every flow
/// is, so under flat r and lambda it is the risk-free price at r + lambda. Tolerance 1e-12
/// relative.
#[test]
fn zero_recovery_is_risk_free_times_survival() {
    let trade = d("2024-05-10");
    let disc = usd_like_curve(trade);
    let hz = HazardCurve::new(trade, vec![1.0, 3.0, 5.0, 10.0], vec![0.01, 0.02, 0.035, 0.05]).unwrap();
    let zcb = BondTerms {
        coupon: 0.0,
        frequency: 1,
        maturity: d("2031-08-15"),
        day_count: DayCount::ActActIcma,
        issue_date: None,
    };
    let cf = zcb.cashflows(trade).unwrap();
    let p = cf.price(&disc, &hz, 0.4, RecoveryConvention::Zero).unwrap();
    let s = hz.survival(zcb.maturity);
    assert!((p.dirty / (p.risk_free_dirty * s) - 1.0).abs() < 1e-12, "{} vs {}", p.dirty, p.risk_free_dirty * s);
    assert!((p.risk_free_dirty - 100.0 * disc.df(zcb.maturity)).abs() < 1e-12);

    let (r, lambda) = (0.035, 0.025);
    let flat_r = DiscountCurve::flat(trade, r);
    let flat_rl = DiscountCurve::flat(trade, r + lambda);
    let flat_h = HazardCurve::flat(trade, lambda);
    for (cpn, f, m, dc) in [
        (0.05, 2, "2029-08-31", DayCount::Thirty360),
        (0.0725, 4, "2044-02-15", DayCount::Act360),
        (0.03, 1, "2026-01-15", DayCount::ActActIcma),
    ] {
        let b = BondTerms { coupon: cpn, frequency: f, maturity: d(m), day_count: dc, issue_date: None };
        let risky = price_bond(&b, &flat_r, &flat_h, 0.4, RecoveryConvention::Zero).unwrap();
        let at_r_plus_l =
            price_bond(&b, &flat_rl, &HazardCurve::flat(trade, 0.0), 0.4, RecoveryConvention::Zero).unwrap();
        assert!((risky.dirty / at_r_plus_l.risk_free_dirty - 1.0).abs() < 1e-12, "{m}");
        assert!((risky.clean / at_r_plus_l.clean - 1.0).abs() < 1e-12, "{m}");
    }
}

/// Closed form: recovery of market value is discounting at r + lambda (1 - R) (Duffie and
/// Singleton 1999, Review of Financial Studies). Flat curves, and piecewise curves against the
/// zero-recovery price on hazards scaled by (1 - R). Tolerance 1e-12 relative.
#[test]
fn market_value_recovery_discounts_at_r_plus_lambda_times_loss() {
    let trade = d("2024-05-10");
    let (r, lambda, rec) = (0.03, 0.04, 0.35);
    let b = BondTerms {
        coupon: 0.06,
        frequency: 2,
        maturity: d("2034-06-30"),
        day_count: DayCount::Thirty360,
        issue_date: None,
    };
    let mv = price_bond(
        &b,
        &DiscountCurve::flat(trade, r),
        &HazardCurve::flat(trade, lambda),
        rec,
        RecoveryConvention::Market,
    )
    .unwrap();
    let direct = price_bond(
        &b,
        &DiscountCurve::flat(trade, r + lambda * (1.0 - rec)),
        &HazardCurve::flat(trade, 0.0),
        rec,
        RecoveryConvention::Zero,
    )
    .unwrap();
    assert!((mv.dirty / direct.dirty - 1.0).abs() < 1e-12, "{} vs {}", mv.dirty, direct.dirty);

    let disc = usd_like_curve(trade);
    let hz = HazardCurve::new(trade, vec![2.0, 5.0, 10.0], vec![0.02, 0.03, 0.045]).unwrap();
    let scaled = HazardCurve::new(
        trade,
        vec![2.0, 5.0, 10.0],
        vec![0.02 * (1.0 - rec), 0.03 * (1.0 - rec), 0.045 * (1.0 - rec)],
    )
    .unwrap();
    let a = price_bond(&b, &disc, &hz, rec, RecoveryConvention::Market).unwrap();
    let z = price_bond(&b, &disc, &scaled, rec, RecoveryConvention::Zero).unwrap();
    assert!((a.dirty / z.dirty - 1.0).abs() < 1e-12);
    // Ordering of the conventions for the same curves: zero < market value, zero < face value.
    let zero = price_bond(&b, &disc, &hz, rec, RecoveryConvention::Zero).unwrap();
    let par = price_bond(&b, &disc, &hz, rec, RecoveryConvention::Par).unwrap();
    assert!(zero.dirty < a.dirty && zero.dirty < par.dirty);
}

/// Closed form of the face-value recovery leg under flat r and lambda: the integral of
/// lambda exp(-(r + lambda) t) to T is lambda / (r + lambda) (1 - exp(-(r + lambda) T)); also in
/// the series branch (tiny hazard) and with recovery 0 the price is the zero-recovery price.
#[test]
fn face_value_recovery_leg_closed_form() {
    let trade = d("2024-01-02");
    for (r, lambda) in [(0.03, 0.02), (0.05, 1e-7), (0.0, 0.4)] {
        let disc = DiscountCurve::flat(trade, r);
        let hz = HazardCurve::flat(trade, lambda);
        for t in [0.5, 3.0, 12.0] {
            let x = r + lambda;
            let exact = if x > 0.0 { lambda / x * (1.0 - (-x * t).exp()) } else { 0.0 };
            let got = default_integral(&disc, &hz, t);
            assert!((got - exact).abs() < 1e-13 * (1.0 + exact), "r {r} lambda {lambda} t {t}: {got} vs {exact}");
        }
    }
    let disc = usd_like_curve(trade);
    let hz = HazardCurve::new(trade, vec![1.0, 4.0], vec![0.02, 0.05]).unwrap();
    let b = BondTerms {
        coupon: 0.045,
        frequency: 2,
        maturity: d("2030-03-15"),
        day_count: DayCount::ActActIcma,
        issue_date: None,
    };
    let p0 = price_bond(&b, &disc, &hz, 0.0, RecoveryConvention::Par).unwrap();
    let z = price_bond(&b, &disc, &hz, 0.4, RecoveryConvention::Zero).unwrap();
    assert!((p0.dirty - z.dirty).abs() < 1e-13);
}

fn five_bonds() -> Vec<BondTerms> {
    [
        (0.04, 2, "2026-06-15"),
        (0.045, 2, "2028-03-01"),
        (0.05, 1, "2030-09-30"),
        (0.0525, 2, "2033-12-15"),
        (0.055, 4, "2036-05-20"),
    ]
    .iter()
    .map(|&(c, f, m)| BondTerms {
        coupon: c,
        frequency: f,
        maturity: d(m),
        day_count: DayCount::Thirty360,
        issue_date: None,
    })
    .collect()
}

/// Round trip: prices generated on a piecewise-flat curve with nodes at the bond maturities fit
/// back to that curve (hazards to 1e-9, price residuals below 1e-9, yield residuals below 1e-6
/// bp) under each recovery convention.
#[test]
fn bond_fit_recovers_a_piecewise_curve() {
    let trade = d("2024-05-10");
    let disc = usd_like_curve(trade);
    let bonds = five_bonds();
    let times: Vec<f64> = bonds.iter().map(|b| year_time(trade, b.maturity)).collect();
    let hazards = vec![0.012, 0.018, 0.026, 0.03, 0.034];
    let truth = HazardCurve::new(trade, times.clone(), hazards.clone()).unwrap();
    for conv in [RecoveryConvention::Par, RecoveryConvention::Zero, RecoveryConvention::Market] {
        let quotes: Vec<BondQuote> = bonds
            .iter()
            .map(|b| BondQuote {
                terms: b.clone(),
                clean_price: price_bond(b, &disc, &truth, 0.4, conv).unwrap().clean,
                bid_ask: None,
            })
            .collect();
        let settings = BondFitSettings { convention: conv, ..BondFitSettings::default() };
        let f = fit_bond_hazard(trade, &quotes, &disc, &settings).unwrap();
        assert_eq!(f.form, BondCurveForm::PiecewiseFlat);
        assert_eq!(f.status, BondFitStatus::Ok);
        assert_eq!(f.nodes.len(), 5);
        for (n, h) in f.nodes.iter().zip(&hazards) {
            assert!((n.hazard - h).abs() < 1e-9, "{:?}: {} vs {h}", conv, n.hazard);
            assert!((n.survival - truth.survival_at(n.time)).abs() < 1e-9);
            assert_eq!(n.status, BondFitStatus::Ok);
        }
        assert!(f.bonds.iter().all(|r| r.residual_price.abs() < 1e-9 && r.residual_bp.abs() < 1e-6), "{:?}", f.bonds);
    }
}

/// With noise on the prices and bid-ask widths, the weights switch to bid-ask and the residuals
/// are reported in price and in bp of yield, consistently (price residual ~ -dirty x duration x
/// yield residual).
#[test]
fn bond_fit_with_noise_reports_consistent_residuals() {
    let trade = d("2024-05-10");
    let disc = usd_like_curve(trade);
    let mut bonds = five_bonds();
    bonds.push(BondTerms {
        coupon: 0.0475,
        frequency: 2,
        maturity: d("2030-06-30"),
        day_count: DayCount::ActActIcma,
        issue_date: None,
    });
    let truth = HazardCurve::flat(trade, 0.025);
    let noise = [0.05, -0.08, 0.03, 0.1, -0.04, -0.06];
    let quotes: Vec<BondQuote> = bonds
        .iter()
        .zip(noise)
        .map(|(b, e)| BondQuote {
            terms: b.clone(),
            clean_price: price_bond(b, &disc, &truth, 0.4, RecoveryConvention::Par).unwrap().clean + e,
            bid_ask: Some(0.25),
        })
        .collect();
    let f = fit_bond_hazard(trade, &quotes, &disc, &BondFitSettings::default()).unwrap();
    assert!(f.bid_ask_weights);
    assert_eq!(f.status, BondFitStatus::Ok);
    // Two maturities within half a year of each other share a node.
    assert_eq!(f.nodes.len(), 5);
    for r in &f.bonds {
        let approx_bp = -r.residual_price / ((r.market_clean + r.accrued) * r.modified_duration) * 1e4;
        assert!((approx_bp - r.residual_bp).abs() < 0.05 * r.residual_bp.abs() + 0.01, "{r:?}");
        assert!(r.residual_price.abs() < 0.2);
    }
    assert!(f.rmse_price > 0.0 && f.rmse_yield_bp > 0.0);
}

/// Few bonds: one bond gives a flat hazard that reprices it exactly; two give the
/// two-parameter form, which reprices both; a matured bond is skipped and listed.
#[test]
fn few_bonds_use_flat_or_two_parameter_forms() {
    let trade = d("2024-05-10");
    let disc = usd_like_curve(trade);
    let truth = HazardCurve::new(trade, vec![3.0, 8.0], vec![0.015, 0.03]).unwrap();
    let b1 = BondTerms {
        coupon: 0.05,
        frequency: 2,
        maturity: d("2029-05-10"),
        day_count: DayCount::Thirty360,
        issue_date: None,
    };
    let b2 = BondTerms {
        coupon: 0.055,
        frequency: 2,
        maturity: d("2034-05-10"),
        day_count: DayCount::Thirty360,
        issue_date: None,
    };
    let matured = BondTerms {
        coupon: 0.05,
        frequency: 2,
        maturity: d("2024-01-10"),
        day_count: DayCount::Thirty360,
        issue_date: None,
    };
    let q = |b: &BondTerms| BondQuote {
        terms: b.clone(),
        clean_price: price_bond(b, &disc, &truth, 0.4, RecoveryConvention::Par).map(|p| p.clean).unwrap_or(100.0),
        bid_ask: None,
    };

    let f1 = fit_bond_hazard(trade, &[q(&b1), q(&matured)], &disc, &BondFitSettings::default()).unwrap();
    assert_eq!(f1.form, BondCurveForm::Flat);
    assert_eq!(f1.skipped.len(), 1);
    assert_eq!(f1.skipped[0].0, 1);
    assert!(f1.bonds[0].residual_price.abs() < 1e-9);

    let f2 = fit_bond_hazard(trade, &[q(&b1), q(&b2)], &disc, &BondFitSettings::default()).unwrap();
    assert_eq!(f2.form, BondCurveForm::TwoParameter);
    assert_eq!(f2.status, BondFitStatus::Ok);
    assert!(f2.bonds.iter().all(|r| r.residual_price.abs() < 1e-8), "{:?}", f2.bonds);
    assert!(f2.curve.hazards().iter().all(|&h| h >= 0.0));
    assert!(fit_bond_hazard(trade, &[q(&matured)], &disc, &BondFitSettings::default()).is_err());
}

/// Prices above what any non-negative hazard allows floor the hazard at zero and say so.
#[test]
fn prices_above_risk_free_are_floored_and_flagged() {
    let trade = d("2024-05-10");
    let disc = usd_like_curve(trade);
    let b = five_bonds();
    let quotes: Vec<BondQuote> = b
        .iter()
        .map(|t| BondQuote {
            terms: t.clone(),
            clean_price: t.cashflows(trade).unwrap().risk_free_dirty(&disc) - t.cashflows(trade).unwrap().accrued + 0.5,
            bid_ask: None,
        })
        .collect();
    let f = fit_bond_hazard(trade, &quotes, &disc, &BondFitSettings::default()).unwrap();
    assert!(f.nodes.iter().any(|n| n.status == BondFitStatus::Floored), "{:?}", f.nodes);
    assert!(f.nodes.iter().all(|n| n.hazard >= 0.0));
}

/// The basis is zero when both curves agree, and negative (CDS below bonds) when the
/// bond-implied hazard is higher; with a flat hazard the par spread is within 1 bp of the credit
/// triangle lambda (1 - R) with the Act/360 premium accrual (the standard contract's discrete
/// premium and accrual on default make the rest).
#[test]
fn cds_bond_basis_signs_and_credit_triangle() {
    let trade = d("2024-05-10");
    let disc = usd_like_curve(trade);
    let cal = Calendar::weekends_only();
    let cds = HazardCurve::flat(trade, 0.02);
    let mats = [d("2027-06-20"), d("2029-05-10"), d("2034-05-10")];
    let same = cds_bond_basis(trade, &cds, &cds, &disc, &mats, 0.4, &cal).unwrap();
    assert!(same.iter().all(|b| b.basis_bp.abs() < 1e-12 && b.hazard_basis_bp.abs() < 1e-12));
    // Premium accrues Actual/360 while hazards run on Actual/365F: to first order the par
    // spread is lambda (1 - R) 360/365.
    assert!(same.iter().all(|b| (b.cds_par_spread_bp - 0.02 * 0.6 * 1e4 * 360.0 / 365.0).abs() < 1.0), "{same:?}");
    let bond_curve = HazardCurve::flat(trade, 0.03);
    let neg = cds_bond_basis(trade, &bond_curve, &cds, &disc, &mats, 0.4, &cal).unwrap();
    assert!(neg.iter().all(|b| b.basis_bp < -50.0 && (b.hazard_basis_bp + 100.0).abs() < 1e-9), "{neg:?}");
}
