//! Throughput of the bootstrap across all cores: at least one million 8-tenor curves over
//! distinct trade dates and spread levels, curves per second and peak resident memory.
//!
//! Run: `cargo bench --bench throughput` (set HAZARDLINE_BENCH_CURVES to change the count).

use chrono::NaiveDate;
use hazardline::calibrate::bootstrap::BootstrapPlan;
use hazardline::calibrate::{bootstrap, BootstrapQuote, BootstrapSettings};
use hazardline::curves::DiscountCurve;
use hazardline::instruments::CdsQuote;
use hazardline::time::{add_days, Calendar, Tenor};
use rayon::prelude::*;
use std::time::Instant;

mod support;
use support::{cpu_seconds, peak_rss_mib};

fn main() {
    // `cargo bench` passes --bench; ignore arguments.
    let n: usize = std::env::var("HAZARDLINE_BENCH_CURVES").ok().and_then(|v| v.parse().ok()).unwrap_or(1_000_000);
    let cal = Calendar::weekends_only();
    let settings = BootstrapSettings::default();
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
    // 2,500 business days (about ten years), one discount curve each.
    let start = NaiveDate::from_ymd_opt(2015, 1, 2).unwrap();
    let mut dates = Vec::new();
    let mut d = start;
    while dates.len() < 2500 {
        if cal.is_business_day(d) {
            dates.push(d);
        }
        d = add_days(d, 1);
    }
    let curves: Vec<DiscountCurve> =
        dates.iter().map(|&t| DiscountCurve::from_zero_rates(t, &pillars).unwrap()).collect();
    let tenors: Vec<Tenor> =
        ["6M", "1Y", "2Y", "3Y", "4Y", "5Y", "7Y", "10Y"].iter().map(|t| t.parse().unwrap()).collect();
    let base = [45.0, 55.0, 75.0, 95.0, 110.0, 125.0, 140.0, 150.0];

    let quotes_of = |i: usize| -> Vec<BootstrapQuote> {
        // Spread levels from 0.2x to 4.1x the base curve (9 bp to 615 bp at 10Y).
        let scale = 0.2 + ((i / dates.len()) % 40) as f64 * 0.1;
        tenors
            .iter()
            .zip(base)
            .map(|(&t, bp)| BootstrapQuote {
                tenor: t,
                quote: CdsQuote::ParSpread(bp * scale / 1e4),
                recovery: 0.4,
                maturity: None,
            })
            .collect()
    };

    // 1. Every curve builds its own plan (contracts, nodes, grid).
    let started = Instant::now();
    let cpu0 = cpu_seconds();
    let ok: usize = (0..n)
        .into_par_iter()
        .map(|i| {
            let k = i % dates.len();
            let f = bootstrap(dates[k], &quotes_of(i), &curves[k], &cal, &settings).unwrap();
            usize::from(f.complete())
        })
        .sum();
    let wall = started.elapsed().as_secs_f64();
    let cpu = cpu_seconds() - cpu0;
    println!("curves: {n} ({ok} complete), threads: {}", rayon::current_num_threads());
    println!("own plan per curve:    wall {wall:.3} s, cpu {cpu:.3} s, curves per second {:.0}", n as f64 / wall);

    // 2. Curves on the same date share the plan, as in the calibrate stage.
    let started = Instant::now();
    let cpu0 = cpu_seconds();
    let plans: Vec<BootstrapPlan> = dates
        .par_iter()
        .zip(&curves)
        .map(|(&d, c)| BootstrapPlan::new(d, &tenors, c, &cal, settings.accrual).unwrap())
        .collect();
    let ok: usize = (0..n)
        .into_par_iter()
        .map(|i| usize::from(plans[i % dates.len()].solve(&quotes_of(i), &settings).unwrap().complete()))
        .sum();
    let wall = started.elapsed().as_secs_f64();
    let cpu = cpu_seconds() - cpu0;
    println!(
        "shared plan per date:  wall {wall:.3} s, cpu {cpu:.3} s, curves per second {:.0} ({ok} complete, {} plans)",
        n as f64 / wall,
        plans.len()
    );
    println!("peak resident memory: {:.1} MiB", peak_rss_mib());
}
