//! An honest coverage test of the whole backtest chain: synthetic universes whose historical
//! intensity and premium multiplier are known, drawn with the crate's own simulation helpers
//! (sim::credit), run through cohort construction and the risk-premium estimate; the 95%
//! interval of the pricing/historical ratio must cover the planted multiplier in at least 90%
//! of 200 repetitions, per grade.

use chrono::NaiveDate;
use hazardline::backtest::{
    run_backtest, AssetCorrelation, BacktestSettings, Bucketing, CensoringPolicy, CurveSet, DatedCurve, EntityFacts,
    GradeSpell,
};
use hazardline::curves::HazardCurve;
use hazardline::models::cir::{cir_hazard_curve, CirParams};
use hazardline::sim::credit::{sigma_for, simulate_obligor};
use hazardline::sim::Rng;
use hazardline::stats::ZoneThresholds;

fn d(y: i32, m: u32, day: u32) -> NaiveDate {
    NaiveDate::from_ymd_opt(y, m, day).unwrap()
}

/// The pricing curve of a grade: m times the marginal historical hazard of a CIR intensity,
/// piecewise flat on monthly nodes matching the closed-form survival (Cox, Ingersoll and
/// Ross, 1985). With it the expected pricing cumulative hazard over the members' exposure is
/// exactly m times the expected number of defaults (the compensator of a default time with a
/// deterministic hazard function), so m is the quantity the ratio estimates.
fn pricing_curve(t: NaiveDate, p: &CirParams, m: f64) -> HazardCurve {
    let nodes: Vec<f64> = (1..=24).map(|k| k as f64 / 12.0).collect();
    let h = cir_hazard_curve(t, p, &nodes).unwrap();
    HazardCurve::new(t, nodes, h.hazards().iter().map(|x| m * x).collect()).unwrap()
}

#[test]
fn ratio_interval_covers_the_planted_multiplier() {
    let t = d(2020, 1, 2);
    // (grade, historical long-run level, planted multiplier, obligors): invented values.
    let grades = [(1u32, 0.01, 4.0, 1500usize), (2u32, 0.05, 2.0, 1500usize)];
    let settings = BacktestSettings {
        cohort_dates: vec![t],
        horizons_years: vec![1],
        lookback_days: 0,
        censoring: CensoringPolicy::Exclude,
        bucketing: Bucketing::Grades,
        level: 0.95,
        zones: ZoneThresholds::default(),
        outcome_end: Some(d(2021, 6, 30)),
        correlation: AssetCorrelation::Supervisory,
        term_structure_years: 0,
    };
    let reps = 200;
    let mut covered = [0usize; 2];
    let mut mean_ratio = [0.0f64; 2];
    for rep in 0..reps {
        let mut rng = Rng::stream(2026, "coverage", rep);
        let mut facts = Vec::new();
        let mut items = Vec::new();
        for &(g, theta, m, n) in &grades {
            let p = CirParams { kappa: 0.5, theta, sigma: sigma_for(theta), lambda0: theta };
            let curve = pricing_curve(t, &p, m);
            for i in 0..n {
                let entity = format!("Synthco {g}-{i:04}");
                let (tau, _) = simulate_obligor(&mut rng, &p, 1.0, 1.0 / 52.0);
                // Default dates on the Act/365F axis of the curves, at least a day after t.
                let default_date = tau.map(|x| t + chrono::Duration::days(((x * 365.0).round() as i64).max(1)));
                facts.push(EntityFacts {
                    entity: entity.clone(),
                    grades: vec![GradeSpell { from_date: d(2019, 1, 1), grade: g }],
                    default_date,
                    coverage_end: None,
                });
                let dc = DatedCurve { date: t, currency: "EUR".into(), curve: curve.clone(), spreads: Vec::new() };
                items.push((entity, dc));
            }
        }
        let out = run_backtest(&facts, &CurveSet::from_keyed(0.4, items), &settings).unwrap();
        for (k, &(g, _, m, _)) in grades.iter().enumerate() {
            let row = out
                .risk_premia
                .iter()
                .find(|r| r.cohort == "all" && r.bucket == format!("grade {g}") && r.horizon_years == 1)
                .unwrap();
            let lo = row.ratio_lo.unwrap();
            let hi = row.ratio_hi.unwrap_or(f64::INFINITY);
            covered[k] += (lo <= m && m <= hi) as usize;
            mean_ratio[k] += row.ratio.unwrap_or(f64::NAN) / reps as f64;
        }
    }
    for (k, &(g, _, m, _)) in grades.iter().enumerate() {
        let share = covered[k] as f64 / reps as f64;
        println!("grade {g}: planted multiplier {m}, mean estimate {:.3}, 95% interval covered it in {} of {reps} repetitions ({:.1}%)", mean_ratio[k], covered[k], 100.0 * share);
        assert!(share >= 0.90, "grade {g}: coverage {share}");
    }
}

fn flat_set(recovery: f64, items: Vec<(String, NaiveDate, f64)>) -> CurveSet {
    CurveSet::from_keyed(
        recovery,
        items.into_iter().map(|(e, t, l)| {
            (e, DatedCurve { date: t, currency: "EUR".into(), curve: HazardCurve::flat(t, l), spreads: Vec::new() })
        }),
    )
}

/// Leaving coverage at random times, independent of default, and an outcome end that leaves the
/// second cohort half observed: the Kaplan-Meier rate of the bucket test covers the true PD at
/// the nominal rate, and the term-structure test (observed against expected over every cohort)
/// rejects the true model no more often than its level. Invented universe: one grade, a flat
/// hazard of 5% a year, 40% of the names leave coverage uniformly within two years.
#[test]
fn coverage_exits_and_an_outcome_end_leave_the_estimates_unbiased() {
    let (t0, t1) = (d(2020, 1, 2), d(2021, 1, 4));
    let lambda = 0.05;
    let settings = BacktestSettings {
        cohort_dates: vec![t0, t1],
        horizons_years: vec![1],
        lookback_days: 0,
        censoring: CensoringPolicy::Exclude,
        bucketing: Bucketing::Grades,
        level: 0.95,
        zones: ZoneThresholds::default(),
        outcome_end: Some(d(2021, 7, 1)),
        correlation: AssetCorrelation::Supervisory,
        term_structure_years: 0,
    };
    let h0 = hazardline::curves::year_time(t0, d(2021, 1, 2));
    let true_pd = 1.0 - (-lambda * h0).exp();
    let reps = 200;
    let (mut covered, mut mean_rate, mut rejected, mut naive) = (0usize, 0.0f64, 0usize, 0.0f64);
    for rep in 0..reps {
        let mut rng = Rng::stream(2026, "coverage-exits", rep);
        let mut facts = Vec::new();
        let mut items = Vec::new();
        for i in 0..2000 {
            let entity = format!("Synthco {i:04}");
            let tau = (rng.exponential() / lambda * 365.0).round().max(1.0) as i64;
            let exit = rng.chance(0.4).then(|| t0 + chrono::Duration::days(1 + rng.below(730) as i64));
            facts.push(EntityFacts {
                entity: entity.clone(),
                grades: vec![GradeSpell { from_date: d(2019, 1, 1), grade: 3 }],
                default_date: Some(t0 + chrono::Duration::days(tau)),
                coverage_end: exit,
            });
            items.push((entity.clone(), t0, lambda));
            items.push((entity, t1, lambda));
        }
        let out = run_backtest(&facts, &flat_set(0.4, items), &settings).unwrap();
        let b = out.buckets.iter().find(|r| r.cohort == "2020" && r.bucket == "grade 3").unwrap();
        let rate = b.realised_rate.unwrap();
        mean_rate += rate / reps as f64;
        covered += (b.km_lo.unwrap() <= true_pd && true_pd <= b.km_hi.unwrap()) as usize;
        // For comparison: d / n over the members observed to the horizon end (with censoring
        // independent of default and applied alike, close to unbiased too, but wider).
        naive += b.defaults as f64 / b.n as f64 / reps as f64;
        let ts = out.term_structure.iter().find(|r| r.bucket == "grade 3").unwrap();
        rejected += (ts.p_upper.unwrap() < 0.05) as usize;
    }
    let share = covered as f64 / reps as f64;
    let size = rejected as f64 / reps as f64;
    println!(
        "true 1Y PD {true_pd:.5}; mean Kaplan-Meier rate {mean_rate:.5} (d / n over the members observed to the horizon {naive:.5}); \
         Greenwood interval covered it in {covered} of {reps} ({:.1}%); term-structure test rejected the true model in {rejected} of {reps} ({:.1}%)",
        100.0 * share,
        100.0 * size
    );
    assert!(share >= 0.90, "coverage {share}");
    assert!((mean_rate - true_pd).abs() < 0.1 * true_pd, "mean {mean_rate} vs {true_pd}");
    assert!(size <= 0.08, "size {size}");
}

/// Correlated defaults: with asset correlation 0.12 in a one-factor Gaussian model, the
/// binomial test (independence) rejects a correct PD far more often than its level, while the
/// one-factor test stays at or below it. Invented universe: 400 names of PD 3% a year.
#[test]
fn correlated_defaults_keep_the_one_factor_test_at_its_level() {
    let t = d(2020, 1, 2);
    let (rho, n, reps) = (0.12, 400usize, 400u64);
    let settings = BacktestSettings {
        cohort_dates: vec![t],
        horizons_years: vec![1],
        lookback_days: 0,
        censoring: CensoringPolicy::Exclude,
        bucketing: Bucketing::Grades,
        level: 0.95,
        zones: ZoneThresholds::default(),
        outcome_end: Some(d(2021, 6, 30)),
        correlation: AssetCorrelation::Fixed(rho),
        term_structure_years: 0,
    };
    let lambda = 0.03;
    let h = hazardline::curves::year_time(t, d(2021, 1, 2));
    let pd = 1.0 - (-lambda * h).exp();
    let threshold = hazardline::stats::special::normal_quantile(pd).unwrap();
    let (mut binomial, mut one_factor) = (0usize, 0usize);
    for rep in 0..reps {
        let mut rng = Rng::stream(2026, "correlated", rep);
        let z = rng.normal();
        let mut facts = Vec::new();
        let mut items = Vec::new();
        for i in 0..n {
            let entity = format!("Synthco {i:04}");
            // Asset value sqrt(rho) z + sqrt(1 - rho) e below Phi^-1(pd): default, on a day
            // inside the year.
            let x = rho.sqrt() * z + (1.0 - rho).sqrt() * rng.normal();
            let default_date = (x < threshold).then(|| t + chrono::Duration::days(1 + rng.below(365) as i64));
            facts.push(EntityFacts {
                entity: entity.clone(),
                grades: vec![GradeSpell { from_date: d(2019, 1, 1), grade: 4 }],
                default_date,
                coverage_end: None,
            });
            items.push((entity, t, lambda));
        }
        let out = run_backtest(&facts, &flat_set(0.4, items), &settings).unwrap();
        let b = out.buckets.iter().find(|r| r.cohort == "all" && r.bucket == "grade 4").unwrap();
        binomial += (b.p_binom_upper.unwrap() < 0.05) as usize;
        one_factor += (b.p_vasicek_upper.unwrap() < 0.05) as usize;
    }
    let (pb, pv) = (binomial as f64 / reps as f64, one_factor as f64 / reps as f64);
    println!("correct PD {pd:.4}, rho {rho}: binomial upper-tail test rejected in {binomial} of {reps} ({:.1}%), one-factor test in {one_factor} ({:.1}%)", 100.0 * pb, 100.0 * pv);
    assert!(pb > 0.15, "the binomial test should over-reject under correlation: {pb}");
    assert!(pv <= 0.07, "the one-factor test should hold its level: {pv}");
}
