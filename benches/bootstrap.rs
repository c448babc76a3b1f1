//! Median time of one 8-tenor standard-contract bootstrap out to 10Y on one core
//! (schedules, grid, and eight Newton roots included), and of the quote conversions' flat
//! solve of one upfront quote.
//!
//! Run: `cargo bench --bench bootstrap`.

use chrono::NaiveDate;
use criterion::{black_box, criterion_group, criterion_main, Criterion};
use hazardline::calibrate::bootstrap::BootstrapPlan;
use hazardline::calibrate::{bootstrap, BootstrapQuote, BootstrapSettings};
use hazardline::curves::DiscountCurve;
use hazardline::instruments::CdsQuote;
use hazardline::time::{Calendar, Tenor};

pub fn setup() -> (NaiveDate, DiscountCurve, Vec<BootstrapQuote>) {
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
    let settings = BootstrapSettings::default();
    c.bench_function("bootstrap 8 tenors to 10Y", |b| {
        b.iter(|| bootstrap(black_box(trade), black_box(&quotes), &disc, &cal, &settings).unwrap())
    });
    // Names quoted on one day for the same tenors share a plan (contracts, nodes, grid); the
    // calibrate stage builds it once per (date, currency, tenor set).
    let tenors: Vec<Tenor> = quotes.iter().map(|q| q.tenor).collect();
    let plan = BootstrapPlan::new(trade, &tenors, &disc, &cal, settings.accrual).unwrap();
    c.bench_function("bootstrap 8 tenors to 10Y, shared plan", |b| {
        b.iter(|| plan.solve(black_box(&quotes), &settings).unwrap())
    });
    c.bench_function("plan for 8 tenors to 10Y", |b| {
        b.iter(|| BootstrapPlan::new(black_box(trade), &tenors, &disc, &cal, settings.accrual).unwrap())
    });
    // The quote conversions: an upfront quote's flat par spread (a one-segment bootstrap on the
    // contract's whole grid, then its legs), on the plan of its one term.
    for (tenor, upfront) in [("5Y", 0.0215), ("10Y", 0.0548)] {
        let tenor: Tenor = tenor.parse().unwrap();
        let plan = BootstrapPlan::for_terms(trade, &[(tenor, None)], &disc, &cal, settings.accrual).unwrap();
        let quote =
            BootstrapQuote { tenor, quote: CdsQuote::Upfront { upfront, coupon: 0.01 }, recovery: 0.4, maturity: None };
        c.bench_function(&format!("flat par spread of a {tenor} upfront quote, shared plan"), |b| {
            b.iter(|| plan.flat_par_spread(black_box(&quote), &settings).unwrap())
        });
    }
}

criterion_group!(benches, bench);
criterion_main!(benches);
