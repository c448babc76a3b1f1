//! An honest coverage test of the whole backtest chain: synthetic universes whose historical
//! intensity and premium multiplier are known, drawn with the crate's own simulation helpers
//! (sim::credit), run through cohort construction and the risk-premium estimate; the 95%
//! interval of the pricing/historical ratio must cover the planted multiplier in at least 90%
//! of 200 repetitions, per grade.

use chrono::NaiveDate;
use hazardline::backtest::{
    run_backtest, BacktestSettings, Bucketing, CensoringPolicy, CurveSet, EntityFacts, GradeSpell,
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
                    data_end: d(2021, 6, 30),
                });
                items.push(((t, entity), curve.clone(), Vec::new()));
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
