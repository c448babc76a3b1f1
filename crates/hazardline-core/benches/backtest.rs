//! The backtest's numerical stage at full size: 2,000 invented names (HAZARDLINE_BENCH_ENTITIES)
//! over 10 annual cohorts (HAZARDLINE_BENCH_YEARS), an 8-node hazard curve per name and cohort
//! date, exponential default times, 4% of names leaving coverage, an outcome end at the last
//! cohort's first half-year, horizons 1 and 3 years plus the 5-year term structure, grade
//! buckets, and three recoveries (the base and two scenarios, each its own curve set, as the
//! run gives them). Times member building, then the pooled tests (buckets with binomial and
//! one-factor tails, Hosmer-Lemeshow, discrimination, term structure, premia, migration) and
//! prints wall time and peak resident memory (VmHWM). The calibration of the scenario curves
//! belongs to the bootstrap benchmarks, not here.
//!
//! Run: `cargo bench -p hazardline-core --bench backtest`.

use chrono::{Datelike, NaiveDate};
use hazardline_core::backtest::{
    backtest_members, member_observations, migration_rows, AssetCorrelation, BacktestSettings, Bucketing,
    CensoringPolicy, CurveSet, DatedCurve, EntityFacts, GradeSpell,
};
use hazardline_core::curves::HazardCurve;
use hazardline_core::sim::Rng;
use hazardline_core::stats::ZoneThresholds;
use std::time::Instant;

fn env_usize(name: &str, default: usize) -> usize {
    std::env::var(name).ok().and_then(|v| v.parse().ok()).unwrap_or(default)
}

fn peak_rss_mib() -> f64 {
    std::fs::read_to_string("/proc/self/status")
        .ok()
        .and_then(|s| {
            s.lines().find(|l| l.starts_with("VmHWM:")).and_then(|l| l.split_whitespace().nth(1)?.parse::<f64>().ok())
        })
        .map_or(f64::NAN, |kb| kb / 1024.0)
}

fn main() {
    if std::env::args().any(|a| a == "--list") {
        return;
    }
    let entities = env_usize("HAZARDLINE_BENCH_ENTITIES", 2000);
    let years = env_usize("HAZARDLINE_BENCH_YEARS", 10) as i32;
    let dates: Vec<NaiveDate> = (0..years).map(|y| NaiveDate::from_ymd_opt(2010 + y, 1, 4).unwrap()).collect();
    let outcome_end = NaiveDate::from_ymd_opt(2010 + years - 1, 6, 30).unwrap();
    let mut rng = Rng::stream(2026, "backtest-bench", 0);
    let nodes: Vec<f64> = vec![0.5, 1.0, 2.0, 3.0, 4.0, 5.0, 7.0, 10.0];
    let mut facts = Vec::with_capacity(entities);
    let mut base = Vec::new();
    for i in 0..entities {
        let grade = 1 + rng.below(7) as u32;
        let lambda = 0.002 * f64::from(grade * grade);
        let tau = (rng.exponential() / (lambda / 2.0) * 365.0) as i64 + 1;
        let entity = format!("Synthco {i:05}");
        facts.push(EntityFacts {
            entity: entity.clone(),
            grades: vec![GradeSpell { from_date: NaiveDate::from_ymd_opt(2009, 1, 1).unwrap(), grade }],
            default_date: Some(dates[0] + chrono::Duration::days(tau)),
            coverage_end: rng.chance(0.04).then(|| dates[0] + chrono::Duration::days(1 + rng.below(3650) as i64)),
        });
        for &t in &dates {
            let hazards: Vec<f64> =
                nodes.iter().map(|n| lambda * (1.0 + 0.05 * n) * (0.9 + 0.2 * rng.uniform())).collect();
            let curve = HazardCurve::new(t, nodes.clone(), hazards).unwrap();
            base.push((entity.clone(), DatedCurve { date: t, currency: "EUR".into(), curve, spreads: Vec::new() }));
        }
    }
    let sets: Vec<CurveSet> = [0.4, 0.25, 0.55]
        .iter()
        .map(|&r| {
            let scale = 0.6 / (1.0 - r);
            CurveSet::from_keyed(
                r,
                base.iter().map(|(e, c)| {
                    let h =
                        HazardCurve::new(c.date, nodes.clone(), c.curve.hazards().iter().map(|x| x * scale).collect())
                            .unwrap();
                    (e.clone(), DatedCurve { curve: h, ..c.clone() })
                }),
            )
        })
        .collect();
    drop(base);
    let settings = BacktestSettings {
        cohort_dates: dates.clone(),
        horizons_years: vec![1, 3],
        lookback_days: 10,
        censoring: CensoringPolicy::Exclude,
        bucketing: Bucketing::Grades,
        level: 0.95,
        zones: ZoneThresholds::default(),
        outcome_end: Some(outcome_end),
        correlation: AssetCorrelation::Supervisory,
        term_structure_years: 5,
    };
    let rss0 = peak_rss_mib();
    let t0 = Instant::now();
    let members: Vec<_> = sets.iter().map(|s| member_observations(&facts, s, &settings).unwrap()).collect();
    let t_members = t0.elapsed().as_secs_f64();
    let n_members: usize = members.iter().map(Vec::len).sum();
    let t1 = Instant::now();
    let mut rows = 0;
    for (m, s) in members.into_iter().zip(&sets) {
        let out = backtest_members(m, &settings, s.recovery).unwrap();
        rows += out.buckets.len() + out.term_structure.len() + out.discrimination.len() + out.risk_premia.len();
    }
    let migration = migration_rows(&facts, &dates, outcome_end).unwrap();
    let t_tests = t1.elapsed().as_secs_f64();
    println!(
        "backtest core on {entities} names x {} cohorts (years {}..{}), 3 recoveries: {n_members} member rows",
        dates.len(),
        dates[0].year(),
        dates[dates.len() - 1].year()
    );
    println!("  members            {t_members:>8.3} s");
    println!("  pooled tests       {t_tests:>8.3} s   ({rows} bucket, term, discrimination and premium rows; {} migration cells)", migration.len());
    println!("  peak resident      {:>8.0} MiB (curve sets built: {rss0:.0} MiB)", peak_rss_mib());
}
