//! Median time on one core of: a CIR fit of one 8-tenor curve to 10Y (pricing grid, starts and
//! the Levenberg-Marquardt fit included; argmin's Nelder-Mead on the same objective for
//! comparison); a fixed-kappa-sigma daily fit; and a bond-implied hazard fit of one
//! (date, entity) with six bonds.
//!
//! Run: `cargo bench --bench intensity`.

use chrono::NaiveDate;
use criterion::{black_box, criterion_group, criterion_main, Criterion};
use hazardline::calibrate::bond_fit::{fit_bond_hazard, BondFitSettings, BondQuote};
use hazardline::calibrate::cir::{fit_cir, fit_cir_fixed, start_from_curve, CirFitSettings, CirSolver};
use hazardline::calibrate::{bootstrap, BootstrapQuote, BootstrapSettings};
use hazardline::curves::{DiscountCurve, HazardCurve};
use hazardline::instruments::bond::{price_bond, BondTerms, RecoveryConvention};
use hazardline::instruments::CdsQuote;
use hazardline::time::{Calendar, DayCount, Tenor};

fn setup() -> (NaiveDate, DiscountCurve, Vec<BootstrapQuote>) {
    let trade = NaiveDate::from_ymd_opt(2024, 3, 20).unwrap();
    let zeros = [
        ("1M", 0.031),
        ("3M", 0.0316),
        ("6M", 0.0322),
        ("1Y", 0.0331),
        ("2Y", 0.0342),
        ("3Y", 0.0351),
        ("5Y", 0.0364),
        ("7Y", 0.0373),
        ("10Y", 0.0383),
        ("30Y", 0.041),
    ];
    let pillars: Vec<(Tenor, f64)> = zeros.iter().map(|&(t, z)| (t.parse().unwrap(), z)).collect();
    let disc = DiscountCurve::from_zero_rates(trade, &pillars).unwrap();
    let quotes = [
        ("6M", 45.0),
        ("1Y", 55.0),
        ("2Y", 75.0),
        ("3Y", 95.0),
        ("4Y", 110.0),
        ("5Y", 125.0),
        ("7Y", 140.0),
        ("10Y", 150.0),
    ]
    .iter()
    .map(|&(t, bp)| BootstrapQuote {
        tenor: t.parse().unwrap(),
        quote: CdsQuote::ParSpread(bp / 1e4),
        recovery: 0.4,
        maturity: None,
    })
    .collect();
    (trade, disc, quotes)
}

fn bench(c: &mut Criterion) {
    let (trade, disc, quotes) = setup();
    let cal = Calendar::weekends_only();
    let boot = bootstrap(trade, &quotes, &disc, &cal, &BootstrapSettings::default()).unwrap();
    let start = start_from_curve(boot.curve.as_ref().unwrap());
    let lm = CirFitSettings::default();
    let nm = CirFitSettings { solver: CirSolver::NelderMead, ..CirFitSettings::default() };
    let fit = fit_cir(trade, &quotes, &disc, &cal, &[start], &lm).unwrap();
    eprintln!(
        "CIR fit of the bench curve: kappa {:.4} theta {:.5} sigma {:.4} lambda0 {:.5} rmse {:.3} bp, {} iterations, {} evaluations, {}",
        fit.kappa, fit.theta, fit.sigma, fit.lambda0, fit.rmse_bp, fit.iterations, fit.evaluations, fit.status.as_str()
    );
    c.bench_function("cir fit 8 tenors to 10Y (LM)", |b| {
        b.iter(|| fit_cir(black_box(trade), black_box(&quotes), &disc, &cal, &[start], &lm).unwrap())
    });
    c.bench_function("cir fit 8 tenors to 10Y (argmin Nelder-Mead)", |b| {
        b.iter(|| fit_cir(black_box(trade), black_box(&quotes), &disc, &cal, &[start], &nm).unwrap())
    });
    c.bench_function("cir fit theta, lambda0 with kappa, sigma fixed", |b| {
        b.iter(|| {
            fit_cir_fixed(black_box(trade), black_box(&quotes), &disc, &cal, fit.kappa, fit.sigma, &[fit.params()], &lm)
                .unwrap()
        })
    });

    let truth = HazardCurve::new(trade, vec![2.0, 5.0, 10.0], vec![0.012, 0.022, 0.03]).unwrap();
    let bonds: Vec<BondQuote> = [
        (0.04, 2, "2026-06-15"),
        (0.045, 2, "2028-03-01"),
        (0.05, 1, "2030-09-30"),
        (0.0475, 2, "2031-06-30"),
        (0.0525, 2, "2033-12-15"),
        (0.055, 4, "2036-05-20"),
    ]
    .iter()
    .map(|&(cpn, f, m)| {
        let terms = BondTerms {
            coupon: cpn,
            frequency: f,
            maturity: m.parse().unwrap(),
            day_count: DayCount::Thirty360,
            issue_date: None,
        };
        let clean = price_bond(&terms, &disc, &truth, 0.4, RecoveryConvention::Par).unwrap().clean + 0.05;
        BondQuote { terms, clean_price: clean, bid_ask: None }
    })
    .collect();
    let bs = BondFitSettings::default();
    c.bench_function("bond-implied hazard fit, 6 bonds", |b| {
        b.iter(|| fit_bond_hazard(black_box(trade), black_box(&bonds), &disc, &bs).unwrap())
    });
}

criterion_group!(benches, bench);
criterion_main!(benches);
