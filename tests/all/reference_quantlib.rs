//! Checks against QuantLib 1.44 (Python package from PyPI), driven by
//! tests/reference/cds_quantlib.py with the engine options of the `standard` accrual variant
//! (IsdaCdsEngine, NumericalFix.Taylor, AccrualBias.NoBias, ForwardsInCouponPeriod.Flat), and by
//! tests/reference/cds_accrual_quantlib.py for every variant, the default `published` one
//! included (the engine's own defaults: Taylor, HalfDayBias, Piecewise), with
//! a bootstrap by root-finding on a HazardRateCurve. The generated values are committed in
//! tests/reference/cds_quantlib.json; the conventions are written out in that file and in
//! tests/reference/README.md.
//!
//! Known difference: for a contract with a single coupon QuantLib's leg builder drops the
//! maturity day that the standard contract counts in the last period. The reference script
//! puts that day back (expected values follow the contract) and records the unmodified
//! QuantLib values; `single_coupon_difference_is_bounded` bounds the gap.

use super::support::{d, tenor};
use hazardline::calibrate::residuals::reprice;
use hazardline::calibrate::{bootstrap, BootstrapQuote, BootstrapSettings, InfeasiblePolicy, NodeStatus};
use hazardline::curves::DiscountCurve;
use hazardline::instruments::cds::price_legs;
use hazardline::instruments::{AccrualIntegration, CdsContract, CdsQuote};
use hazardline::time::{Calendar, Tenor};
use serde_json::Value;

fn reference() -> Value {
    let path = concat!(env!("CARGO_MANIFEST_DIR"), "/tests/reference/cds_quantlib.json");
    serde_json::from_str(&std::fs::read_to_string(path).expect("reference file")).expect("valid JSON")
}

fn num(v: &Value) -> f64 {
    v.as_f64().unwrap_or_else(|| panic!("not a number: {v}"))
}

fn s(v: &Value) -> &str {
    v.as_str().unwrap_or_else(|| panic!("not a string: {v}"))
}

struct Case {
    id: String,
    trade: chrono::NaiveDate,
    discount: DiscountCurve,
    quotes: Vec<BootstrapQuote>,
    json: Value,
}

fn cases() -> Vec<Case> {
    let r = reference();
    r["cases"]
        .as_array()
        .unwrap()
        .iter()
        .map(|c| {
            let trade = d(s(&c["trade_date"]));
            let pillars: Vec<(Tenor, f64)> = c["discount"]
                .as_array()
                .unwrap()
                .iter()
                .map(|p| (tenor(s(&p["tenor"])), num(&p["zero_rate"])))
                .collect();
            let recovery = num(&c["recovery"]);
            let quotes = c["quotes"]
                .as_array()
                .unwrap()
                .iter()
                .map(|q| BootstrapQuote {
                    tenor: tenor(s(&q["tenor"])),
                    quote: CdsQuote::ParSpread(num(&q["par_spread_bp"]) / 1e4),
                    recovery,
                    maturity: None,
                })
                .collect();
            Case {
                id: s(&c["id"]).to_string(),
                trade,
                discount: DiscountCurve::from_zero_rates(trade, &pillars).unwrap(),
                quotes,
                json: c.clone(),
            }
        })
        .collect()
}

#[test]
fn there_are_enough_cases() {
    let cs = cases();
    assert!(cs.len() >= 30, "{} cases", cs.len());
}

#[test]
fn schedules_and_maturities_agree_date_for_date() {
    let cal = Calendar::weekends_only();
    let mut checked = 0;
    for c in cases() {
        for t in c.json["expected"]["tenors"].as_array().unwrap() {
            let contract = CdsContract::standard(c.trade, tenor(s(&t["tenor"])), &cal).unwrap();
            assert_eq!(contract.maturity, d(s(&t["maturity"])), "{} {}", c.id, t["tenor"]);
            let exp = t["schedule"].as_array().unwrap();
            assert_eq!(contract.periods.len(), exp.len(), "{} {} number of coupons", c.id, t["tenor"]);
            for (p, e) in contract.periods.iter().zip(exp) {
                assert_eq!(p.accrual_start, d(s(&e["accrual_start"])), "{} {}", c.id, t["tenor"]);
                assert_eq!(p.accrual_end, d(s(&e["accrual_end"])), "{} {}", c.id, t["tenor"]);
                assert_eq!(p.payment, d(s(&e["payment"])), "{} {}", c.id, t["tenor"]);
                checked += 1;
            }
        }
        assert_eq!(cal.add_business_days(c.trade, 3), d(s(&c.json["cash_settlement"])), "{}", c.id);
    }
    assert!(checked > 1000, "{checked} coupon periods checked");
}

/// Survival at every CDS maturity to 1e-10 or better (target of the foundation issue), and
/// the hazards, node dates and repriced spreads.
#[test]
fn bootstrap_matches_quantlib() {
    let cal = Calendar::weekends_only();
    // tests/reference/cds_quantlib.json holds the `standard` variant's values.
    let settings = BootstrapSettings {
        infeasible: InfeasiblePolicy::Fail,
        accrual: AccrualIntegration::Standard,
        ..BootstrapSettings::default()
    };
    let mut worst_survival: f64 = 0.0;
    let mut worst_hazard: f64 = 0.0;
    let mut nodes = 0;
    for c in cases() {
        let fit = bootstrap(c.trade, &c.quotes, &c.discount, &cal, &settings).unwrap();
        let infeasible = c.json.get("infeasible_tenor").and_then(|v| v.as_str()).map(tenor);
        let expected = c.json["expected"]["tenors"].as_array().unwrap();
        for e in expected {
            let t = tenor(s(&e["tenor"]));
            let node = fit.nodes.iter().find(|n| n.tenor == t).unwrap();
            assert_eq!(node.maturity, d(s(&e["maturity"])), "{} {t}", c.id);
            assert_eq!(node.node_date, d(s(&e["node"])), "{} {t}", c.id);
            let h = node.hazard.unwrap_or_else(|| panic!("{} {t}: {:?} {:?}", c.id, node.status, node.detail));
            let sv = node.survival.unwrap();
            let dh = (h - num(&e["hazard"])).abs();
            let ds = (sv - num(&e["survival"])).abs();
            worst_hazard = worst_hazard.max(dh);
            worst_survival = worst_survival.max(ds);
            assert!(ds < 1e-12, "{} {t}: survival {sv} vs QuantLib {} (diff {ds:e})", c.id, e["survival"]);
            assert!(dh < 1e-11, "{} {t}: hazard {h} vs QuantLib {} (diff {dh:e})", c.id, e["hazard"]);
            nodes += 1;
        }
        match infeasible {
            None => assert!(fit.nodes.iter().all(|n| n.status == NodeStatus::Ok), "{}", c.id),
            Some(t) => {
                let n = fit.nodes.iter().find(|n| n.tenor == t).unwrap();
                assert_eq!(n.status, NodeStatus::Infeasible, "{}", c.id);
                assert!(fit.failed);
                assert!(n.detail.as_deref().unwrap().contains("negative hazard"), "{:?}", n.detail);
            }
        }
    }
    assert!(nodes > 200);
    eprintln!("QuantLib agreement over {nodes} nodes: survival {worst_survival:e}, hazard {worst_hazard:e}");
}

/// Legs, upfronts and par spreads of every contract on the calibrated curve.
#[test]
fn legs_and_upfronts_match_quantlib() {
    let cal = Calendar::weekends_only();
    let settings = BootstrapSettings { accrual: AccrualIntegration::Standard, ..BootstrapSettings::default() };
    for c in cases() {
        let fit = bootstrap(c.trade, &c.quotes, &c.discount, &cal, &settings).unwrap();
        let curve = fit.curve.clone().unwrap();
        let r = num(&c.json["recovery"]);
        for e in c.json["expected"]["tenors"].as_array().unwrap() {
            let t = tenor(s(&e["tenor"]));
            let k = fit.nodes.iter().position(|n| n.tenor == t).unwrap();
            if fit.nodes[k].status != NodeStatus::Ok {
                continue;
            }
            let legs = price_legs(&fit.contracts[k], r, &c.discount, &curve, AccrualIntegration::Standard).unwrap();
            let close = |a: f64, b: f64, tol: f64, what: &str| {
                assert!((a - b).abs() <= tol, "{} {t} {what}: {a} vs QuantLib {b} (diff {:e})", c.id, (a - b).abs());
            };
            close(legs.protection, num(&e["protection_leg"]), 1e-12, "protection leg");
            close(
                legs.premium01 + legs.accrual_on_default01,
                num(&e["premium_leg_per_unit_coupon"]),
                1e-11,
                "premium + accrual on default per unit coupon",
            );
            close(
                legs.rebate01 * legs.cash_settle_df,
                num(&e["accrual_rebate_per_unit_coupon"]),
                1e-15,
                "accrual rebate",
            );
            close(legs.upfront(0.01), num(&e["upfront_100bp"]), 1e-12, "upfront at 100 bp");
            close(legs.upfront(0.05), num(&e["upfront_500bp"]), 1e-12, "upfront at 500 bp");
            close(legs.par_spread() * 1e4, num(&e["par_spread_bp_repriced"]), 1e-7, "par spread (bp)");
        }
    }
}

/// Every calibrated quote reprices to within 1e-6 bp (through the general pricer, not the
/// bootstrap's own evaluation).
#[test]
fn every_calibrated_quote_reprices() {
    let cal = Calendar::weekends_only();
    for accrual in [AccrualIntegration::Published, AccrualIntegration::Standard, AccrualIntegration::Exact] {
        let settings = BootstrapSettings { accrual, ..BootstrapSettings::default() };
        for c in cases() {
            let fit = bootstrap(c.trade, &c.quotes, &c.discount, &cal, &settings).unwrap();
            for r in reprice(&fit, &c.quotes, &c.discount, accrual) {
                let status = fit.nodes.iter().find(|n| n.quote_index == r.quote_index).unwrap().status;
                if status == NodeStatus::Ok {
                    assert!(
                        r.residual_bp.abs() < 1e-6,
                        "{} {} {accrual:?}: residual {} bp",
                        c.id,
                        r.tenor,
                        r.residual_bp
                    );
                }
            }
        }
    }
}

/// The single-coupon case: QuantLib's unmodified leg drops the maturity day; the difference
/// in hazard is what one day of premium on a 3-month coupon is worth, about 1/93 of the
/// hazard, and later nodes inherit only a small part of it.
#[test]
fn single_coupon_difference_is_bounded() {
    let mut seen = 0;
    for c in cases() {
        let Some(note) = c.json.get("single_coupon_note") else { continue };
        for u in note["unmodified_ql"].as_array().unwrap() {
            let diff = num(&u["hazard_minus_unmodified"]).abs();
            let h = num(&u["hazard_unmodified_ql"]);
            if u["single_coupon"].as_bool().unwrap() {
                // One extra day in ~92: relative hazard change close to 1/92.
                assert!(diff / h < 1.0 / 80.0 && diff / h > 1.0 / 120.0, "{}: {diff} on {h}", c.id);
                seen += 1;
            } else {
                assert!(diff < 1e-4, "{}: {diff}", c.id);
            }
        }
    }
    assert!(seen >= 3);
}

/// Infeasible quotes under the floor policy: the segment is floored at zero and the residual
/// shows the misfit, with the par spread at zero hazard matching the reference.
#[test]
fn floored_segments_show_their_residual() {
    let cal = Calendar::weekends_only();
    for c in cases() {
        let Some(bad) = c.json.get("infeasible_tenor").and_then(|v| v.as_str()) else { continue };
        let settings = BootstrapSettings { accrual: AccrualIntegration::Standard, ..BootstrapSettings::default() };
        let fit = bootstrap(c.trade, &c.quotes, &c.discount, &cal, &settings).unwrap();
        let k = fit.nodes.iter().position(|n| n.tenor == tenor(bad)).unwrap();
        assert_eq!(fit.nodes[k].status, NodeStatus::Floored);
        assert_eq!(fit.nodes[k].hazard, Some(0.0));
        let res = reprice(&fit, &c.quotes, &c.discount, AccrualIntegration::Standard);
        let r = res.iter().find(|r| r.tenor == tenor(bad)).unwrap();
        let at_zero = num(&c.json["infeasible_detail"]["par_spread_bp_at_zero_hazard"]);
        assert!((r.model - at_zero).abs() < 1e-6, "{}: {} vs {at_zero}", c.id, r.model);
        assert!(r.residual_bp > 1.0, "{}", c.id);
    }
}

fn accrual_reference() -> Value {
    let path = concat!(env!("CARGO_MANIFEST_DIR"), "/tests/reference/cds_accrual_quantlib.json");
    serde_json::from_str(&std::fs::read_to_string(path).expect("reference file")).expect("valid JSON")
}

/// Every accrual variant against QuantLib's standard-model engine with the matching options
/// (tests/reference/cds_accrual_quantlib.py: `published` = Taylor, HalfDayBias, Piecewise, the
/// engine's defaults; `exact` = Taylor, NoBias, Piecewise; `standard` = Taylor, NoBias, Flat),
/// each curve bootstrapped with that variant: survival to 1e-10, legs and upfronts to 1e-12.
#[test]
fn accrual_variants_match_quantlib() {
    let cal = Calendar::weekends_only();
    let r = accrual_reference();
    let by_id: std::collections::HashMap<String, Case> = cases().into_iter().map(|c| (c.id.clone(), c)).collect();
    let mut worst = std::collections::BTreeMap::new();
    for (mode, accrual) in [
        ("published", AccrualIntegration::Published),
        ("exact", AccrualIntegration::Exact),
        ("standard", AccrualIntegration::Standard),
    ] {
        let settings =
            BootstrapSettings { accrual, infeasible: InfeasiblePolicy::Fail, ..BootstrapSettings::default() };
        let mut n = 0;
        for e in r["cases"][mode].as_array().unwrap() {
            let c = &by_id[s(&e["id"])];
            let fit = bootstrap(c.trade, &c.quotes, &c.discount, &cal, &settings);
            let fit = match fit {
                Ok(f) => f,
                Err(err) => panic!("{mode} {}: {err}", c.id),
            };
            let Some(curve) = fit.curve.clone() else { continue };
            let rec = num(&c.json["recovery"]);
            for t in e["tenors"].as_array().unwrap() {
                let tn = tenor(s(&t["tenor"]));
                let k = fit.nodes.iter().position(|x| x.tenor == tn).unwrap();
                if fit.nodes[k].status != NodeStatus::Ok {
                    continue;
                }
                let legs = price_legs(&fit.contracts[k], rec, &c.discount, &curve, accrual).unwrap();
                let checks = [
                    ("survival", fit.nodes[k].survival.unwrap(), num(&t["survival"]), 1e-10),
                    ("protection", legs.protection, num(&t["protection_leg"]), 1e-12),
                    (
                        "premium per unit coupon",
                        legs.premium01 + legs.accrual_on_default01,
                        num(&t["premium_leg_per_unit_coupon"]),
                        1e-12,
                    ),
                    ("upfront 100 bp", legs.upfront(0.01), num(&t["upfront_100bp"]), 1e-12),
                    ("upfront 500 bp", legs.upfront(0.05), num(&t["upfront_500bp"]), 1e-12),
                ];
                for (what, got, want, tol) in checks {
                    let diff = (got - want).abs();
                    let w = worst.entry((mode, what)).or_insert((0.0f64, tol, String::new()));
                    if diff > w.0 {
                        *w = (diff, tol, format!("{} {tn}", c.id));
                    }
                }
                n += 1;
            }
        }
        assert!(n > 200, "{mode}: {n} tenors");
    }
    for ((mode, what), (diff, tol, at)) in &worst {
        eprintln!("{mode:<10} {what:<24} largest difference {diff:.2e} at {at} (tolerance {tol:e})");
    }
    let over: Vec<_> = worst.iter().filter(|(_, (diff, tol, _))| diff > tol).collect();
    assert!(over.is_empty(), "beyond tolerance: {over:?}");
}

/// The published upfront table of QuantLib's test suite (lballabio/QuantLib,
/// test-suite/creditdefaultswap.cpp, test case testIsdaEngine, its expected upfronts; that test's
/// tolerance is 1e-6 percent, 1e-8 relative), reproduced at its own tolerance: on the discount
/// curve QuantLib builds from that test's deposit and swap rates (pillars and factors written by
/// tests/reference/cds_accrual_quantlib.py), a flat hazard bootstrapped from each quoted spread
/// (one par-spread quote to the term date) and the upfront of a 100 bp contract to the same
/// date, with the default (published) accrual variant, times the notional 1e7.
#[test]
fn published_upfront_table_is_reproduced() {
    let published = published_table_misses(AccrualIntegration::Published);
    let r = accrual_reference();
    let tol = num(&r["published_table"]["tolerance_relative"]);
    assert!(published.0 <= tol, "published variant: largest relative miss {:e} at {}", published.0, published.1);
    // The other variants miss the table beyond its tolerance: the half-day term matters.
    let standard = published_table_misses(AccrualIntegration::Standard);
    let exact = published_table_misses(AccrualIntegration::Exact);
    assert!(standard.0 > 100.0 * tol && exact.0 > 100.0 * tol, "{standard:?} {exact:?}");
    eprintln!(
        "published upfront table, largest relative miss: published {:.2e} ({}), standard {:.2e} ({}, {:.2} bp of notional), exact {:.2e} ({})",
        published.0, published.1, standard.0, standard.1, standard.2, exact.0, exact.1
    );
}

/// (largest relative miss of the 20 published upfronts, where, that miss in bp of notional)
/// with one accrual variant used for both the flat hazard and the upfront.
fn published_table_misses(accrual: AccrualIntegration) -> (f64, String, f64) {
    let r = accrual_reference();
    let t = &r["published_table"];
    let trade = d(s(&t["trade_date"]));
    let pillars: Vec<(chrono::NaiveDate, f64)> =
        t["discount_pillars"].as_array().unwrap().iter().map(|p| (d(s(&p[0])), num(&p[1]))).collect();
    published_table_misses_on(accrual, &DiscountCurve::from_discount_factors(trade, &pillars).unwrap())
}

/// The same table with hazardline's own standard curve from the test's deposit and swap rates
/// (USD conventions): the published variant reproduces it within its tolerance on that curve too.
#[test]
fn published_upfront_table_on_the_tools_own_rate_curve() {
    use hazardline::curves::rates::{build_rate_curve, RateConvention, RateInstrument, RateQuote};
    let r = accrual_reference();
    let t = &r["published_table"];
    let trade = d(s(&t["trade_date"]));
    let mut quotes = Vec::new();
    for (key, instrument, unit, scale) in
        [("deposits", RateInstrument::Deposit, "tenors_months", 1), ("swaps", RateInstrument::Swap, "tenors_years", 12)]
    {
        for (n, rate) in t[key][unit].as_array().unwrap().iter().zip(t[key]["rates"].as_array().unwrap()) {
            let months = n.as_u64().unwrap() as u32 * scale;
            quotes.push(RateQuote { instrument, tenor: Tenor::from_months(months).unwrap(), rate: num(rate) });
        }
    }
    let conv = RateConvention::default_for("USD").unwrap();
    let (curve, _) = build_rate_curve(trade, &quotes, &conv, &Calendar::weekends_only()).unwrap();
    let (miss, at, _) = published_table_misses_on(AccrualIntegration::Published, &curve);
    let tol = num(&t["tolerance_relative"]);
    eprintln!("published upfront table on hazardline's own rate curve: largest relative miss {miss:.2e} ({at})");
    assert!(miss <= tol, "{miss:e} at {at}");
}

fn published_table_misses_on(accrual: AccrualIntegration, discount: &DiscountCurve) -> (f64, String, f64) {
    let cal = Calendar::weekends_only();
    let r = accrual_reference();
    let t = &r["published_table"];
    let trade = d(s(&t["trade_date"]));
    let mut worst = (0.0f64, String::new(), 0.0f64);
    let mut n = 0;
    for c in t["cases"].as_array().unwrap() {
        let maturity = d(s(&c["term_date"]));
        let recovery = num(&c["recovery"]);
        let contract = CdsContract::with_maturity(trade, maturity, &cal);
        // The flat hazard that reprices the quoted spread as a par spread (bisection to the
        // last bit).
        let spread = num(&c["quoted_spread"]);
        let par = |h: f64| {
            let curve = hazardline::curves::HazardCurve::flat(trade, h);
            price_legs(&contract, recovery, discount, &curve, accrual).unwrap().par_spread()
        };
        let (mut lo, mut hi) = (0.0f64, 5.0f64);
        for _ in 0..200 {
            let mid = 0.5 * (lo + hi);
            if par(mid) < spread {
                lo = mid;
            } else {
                hi = mid;
            }
        }
        let curve = hazardline::curves::HazardCurve::flat(trade, 0.5 * (lo + hi));
        let legs = price_legs(&contract, recovery, discount, &curve, accrual).unwrap();
        let got = 1e7 * legs.upfront(0.01);
        let want = num(&c["published_upfront"]);
        let rel = (got - want).abs() / want.abs();
        if rel > worst.0 {
            worst = (
                rel,
                format!("{} spread {spread} recovery {recovery}", s(&c["term_date"])),
                (got - want).abs() / 1e7 * 1e4,
            );
        }
        n += 1;
    }
    assert_eq!(n, 20);
    worst
}

/// A name quoted as a par spread and the same name quoted as the published upfront at a 100 bp
/// coupon (the 20 pairs of the published table above: each term date is a standard tenor from
/// 2009-05-21) bootstrap the same hazard with the default variant, within the table's own
/// tolerance of 1e-8 relative (measured 2.1e-9); under the `standard` variant they differ by
/// 2.1e-4.
#[test]
fn spread_and_published_upfront_quotes_bootstrap_the_same_hazard() {
    let cal = Calendar::weekends_only();
    let (r, trade, discount, tol) = published_table_curve();
    let t = &r["published_table"];
    let hazard = |quote: CdsQuote, tn: Tenor, recovery: f64, accrual: AccrualIntegration| -> f64 {
        let settings = BootstrapSettings { accrual, ..BootstrapSettings::default() };
        let fit = bootstrap(
            trade,
            &[BootstrapQuote { tenor: tn, quote, recovery, maturity: None }],
            &discount,
            &cal,
            &settings,
        )
        .unwrap();
        fit.nodes[0].hazard.unwrap()
    };
    let mut worst = [0.0f64; 2];
    for c in t["cases"].as_array().unwrap() {
        let maturity = d(s(&c["term_date"]));
        let tn = [12, 24, 36, 84, 120]
            .into_iter()
            .filter_map(Tenor::from_months)
            .find(|&tn| CdsContract::standard(trade, tn, &cal).unwrap().maturity == maturity)
            .unwrap_or_else(|| panic!("{maturity} is no standard tenor from {trade}"));
        let recovery = num(&c["recovery"]);
        let spread = CdsQuote::ParSpread(num(&c["quoted_spread"]));
        let upfront = CdsQuote::Upfront { upfront: num(&c["published_upfront"]) / 1e7, coupon: 0.01 };
        for (k, accrual) in [AccrualIntegration::Published, AccrualIntegration::Standard].into_iter().enumerate() {
            let (a, b) = (hazard(spread, tn, recovery, accrual), hazard(upfront, tn, recovery, accrual));
            worst[k] = worst[k].max((a - b).abs() / a);
        }
    }
    eprintln!(
        "spread against published upfront, largest relative hazard difference: published {:.2e}, standard {:.2e}",
        worst[0], worst[1]
    );
    assert!(worst[0] <= tol, "published: {:e}", worst[0]);
    assert!(worst[1] > 100.0 * tol, "standard: {:e}", worst[1]);
}

/// The standard curve from deposit and swap quotes against QuantLib's piecewise log-linear
/// discount curve from the same rate helpers (tests/reference/rate_curve_quantlib.py: the rates
/// of QuantLib's own testIsdaEngine and invented EUR, GBP, JPY and USD cases, one with a
/// calendar of invented holidays): the same pillar dates, and discount factors at the pillars
/// and at probe dates within 1e-12.
#[test]
fn rate_curve_matches_quantlib() {
    use hazardline::curves::rates::{build_rate_curve, RateConvention, RateInstrument, RateQuote};
    use hazardline::time::DayCount;
    let path = concat!(env!("CARGO_MANIFEST_DIR"), "/tests/reference/rate_curve_quantlib.json");
    let r: Value = serde_json::from_str(&std::fs::read_to_string(path).unwrap()).unwrap();
    let dc = |v: &Value| -> DayCount { s(v).parse().unwrap() };
    let mut worst: f64 = 0.0;
    let mut cases = 0;
    for c in r["cases"].as_array().unwrap() {
        let id = s(&c["id"]);
        let trade = d(s(&c["date"]));
        let cal = Calendar::with_holidays(c["holidays"].as_array().unwrap().iter().map(|h| d(s(h))).collect());
        let k = &c["convention"];
        let conv = RateConvention {
            spot_lag: k["spot_lag"].as_u64().unwrap() as u32,
            deposit_day_count: dc(&k["deposit_day_count"]),
            fixed_months: k["fixed_months"].as_u64().unwrap() as u32,
            fixed_day_count: dc(&k["fixed_day_count"]),
            float_months: k["float_months"].as_u64().unwrap() as u32,
        };
        assert_eq!(RateConvention::default_for(s(&c["currency"])), Some(conv), "{id}: the currency's default");
        let mut quotes = Vec::new();
        for (key, instrument, months) in [("deposits", RateInstrument::Deposit, 1), ("swaps", RateInstrument::Swap, 12)]
        {
            for q in c[key].as_array().unwrap() {
                let n = q[0].as_u64().unwrap() as u32 * months;
                quotes.push(RateQuote { instrument, tenor: Tenor::from_months(n).unwrap(), rate: num(&q[1]) });
            }
        }
        let (curve, pillars) = build_rate_curve(trade, &quotes, &conv, &cal).unwrap_or_else(|e| panic!("{id}: {e}"));
        let want = c["pillars"].as_array().unwrap();
        assert_eq!(pillars.len(), want.len(), "{id}: number of pillars");
        for (p, w) in pillars.iter().zip(want) {
            assert_eq!(p.pillar, d(s(&w[0])), "{id}: pillar of {:?} {}", p.instrument, p.tenor);
            let diff = (p.discount_factor - num(&w[1])).abs();
            worst = worst.max(diff);
            assert!(diff < 1e-12, "{id} {}: DF {} vs QuantLib {} ({diff:e})", p.pillar, p.discount_factor, w[1]);
            assert!(p.residual.abs() < 1e-13, "{id} {}: residual {:e}", p.pillar, p.residual);
        }
        for w in c["probes"].as_array().unwrap() {
            let diff = (curve.df(d(s(&w[0]))) - num(&w[1])).abs();
            worst = worst.max(diff);
            assert!(diff < 1e-12, "{id} probe {}: {diff:e}", s(&w[0]));
        }
        cases += 1;
    }
    assert_eq!(cases, 7);
    eprintln!("standard curves against QuantLib: 7 cases, largest discount-factor difference {worst:e}");
}

/// The quoted-spread convention against the published table: each quoted spread (0.001 or 0.1)
/// converts to the published upfront at 100 bp within the table's tolerance (1e-8 relative),
/// and each published upfront converts back to its quoted spread within 1e-8 relative.
#[test]
fn quoted_spreads_convert_to_the_published_upfronts_and_back() {
    use hazardline::instruments::cds::quoted_spread;
    let cal = Calendar::weekends_only();
    let (r, trade, discount, tol) = published_table_curve();
    let t = &r["published_table"];
    let (mut worst_up, mut worst_back) = (0.0f64, 0.0f64);
    for c in t["cases"].as_array().unwrap() {
        let contract = CdsContract::with_maturity(trade, d(s(&c["term_date"])), &cal);
        let (spread, recovery, published) =
            (num(&c["quoted_spread"]), num(&c["recovery"]), num(&c["published_upfront"]) / 1e7);
        let accrual = AccrualIntegration::default();
        let up = quoted_spread::to_upfront(&contract, spread, 0.01, recovery, &discount, accrual).unwrap();
        worst_up = worst_up.max((up - published).abs() / published.abs());
        let back = quoted_spread::from_upfront(&contract, published, 0.01, recovery, &discount, accrual).unwrap();
        worst_back = worst_back.max((back - spread).abs() / spread);
    }
    eprintln!("quoted spread to published upfront {worst_up:.2e}, upfront back to quoted spread {worst_back:.2e}");
    assert!(worst_up <= tol && worst_back <= tol, "{worst_up:e} {worst_back:e}");
}

/// The published table's reference (tests/reference/cds_accrual_quantlib.json), its trade date,
/// QuantLib's discount curve rebuilt from the recorded pillars, and the table's tolerance.
fn published_table_curve() -> (Value, chrono::NaiveDate, DiscountCurve, f64) {
    let r = accrual_reference();
    let t = &r["published_table"];
    let trade = d(s(&t["trade_date"]));
    let pillars: Vec<(chrono::NaiveDate, f64)> =
        t["discount_pillars"].as_array().unwrap().iter().map(|p| (d(s(&p[0])), num(&p[1]))).collect();
    let discount = DiscountCurve::from_discount_factors(trade, &pillars).unwrap();
    let tol = num(&t["tolerance_relative"]);
    (r, trade, discount, tol)
}

/// Contracts off the standard roll (the `maturity` column): QuantLib's standard-model engine
/// with its default options prices MakeCreditDefaultSwap(maturity, 100 bp) on IMM maturities
/// in March, September and December for a trade on 2009-05-21 (whose standard maturities fall
/// on 20 June), on the published table's discount curve and flat hazards of 1%, 5% and 20%
/// (tests/reference/cds_maturity_quantlib.py, QuantLib 1.44 from PyPI). The tool's contract to
/// the same maturity pays on the same dates, and its upfront and par spread agree within 1e-12.
#[test]
fn contracts_off_the_standard_roll_match_quantlib() {
    let path = super::support::repo().join("tests/reference/cds_maturity_quantlib.json");
    let r: Value = serde_json::from_str(&std::fs::read_to_string(path).unwrap()).unwrap();
    let (_, trade, discount, _) = published_table_curve();
    let cal = Calendar::weekends_only();
    let cases = r["cases"].as_array().unwrap();
    assert_eq!(cases.len(), 15);
    let (mut worst_up, mut worst_spread) = (0.0f64, 0.0f64);
    for c in cases {
        let maturity = d(s(&c["maturity"]));
        let contract = CdsContract::with_maturity(trade, maturity, &cal);
        let paid: Vec<String> = contract.periods.iter().map(|p| p.payment.to_string()).collect();
        let ql_paid: Vec<String> = c["payment_dates"].as_array().unwrap().iter().map(|x| s(x).to_string()).collect();
        assert_eq!(paid, ql_paid, "{maturity}: payment dates");
        let h = hazardline::curves::HazardCurve::flat(trade, num(&c["hazard"]));
        let legs = price_legs(&contract, num(&c["recovery"]), &discount, &h, AccrualIntegration::Published).unwrap();
        let (up, spread) = (legs.upfront(0.01), legs.par_spread());
        worst_up = worst_up.max((up - num(&c["upfront_100bp"])).abs());
        worst_spread = worst_spread.max((spread - num(&c["par_spread"])).abs());
    }
    println!("off-roll contracts: upfront within {worst_up:.1e}, par spread within {worst_spread:.1e}");
    assert!(worst_up < 1e-12 && worst_spread < 1e-12, "upfront {worst_up:e}, par spread {worst_spread:e}");
}
