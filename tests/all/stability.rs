//! The stability stage end to end on invented panels: a planted level shift, its detection and
//! its estimated date, the break test's false-alarm rate on iid, persistent and random-walk
//! panels without a break, PSI through the panel path,
//! and the rule that every flag points at data in the output.
//!
//! All entities and values are invented. Measured figures are printed (run with `--nocapture`).

use chrono::{Datelike, NaiveDate, Weekday};
use hazardline::stability::{
    analyse, analyse_series, CalibrationCounts, CusumScope, CusumTarget, MarketMove, MoveThreshold, Observation,
    PsiEdges, ResidualObservation, StabilitySettings,
};

/// splitmix64 (Steele, Lea and Flood 2014, OOPSLA) for reproducible test data.
struct SplitMix(u64);

impl SplitMix {
    fn next_u64(&mut self) -> u64 {
        self.0 = self.0.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut z = self.0;
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        z ^ (z >> 31)
    }

    /// Uniform on (0, 1): 53 random bits, shifted off zero.
    fn uniform(&mut self) -> f64 {
        ((self.next_u64() >> 11) as f64 + 0.5) / (1u64 << 53) as f64
    }

    /// Standard normal by Box-Muller (Box and Muller 1958, Annals of Mathematical Statistics).
    fn normal(&mut self) -> f64 {
        let (u1, u2) = (self.uniform(), self.uniform());
        (-2.0 * u1.ln()).sqrt() * (2.0 * std::f64::consts::PI * u2).cos()
    }
}

fn d(y: i32, m: u32, day: u32) -> NaiveDate {
    NaiveDate::from_ymd_opt(y, m, day).unwrap()
}

/// Weekdays from `start` to `end` inclusive.
fn business_days(start: NaiveDate, end: NaiveDate) -> Vec<NaiveDate> {
    start
        .iter_days()
        .take_while(|x| *x <= end)
        .filter(|x| !matches!(x.weekday(), Weekday::Sat | Weekday::Sun))
        .collect()
}

fn obs(series: &str, entity: &str, grade: u32, date: NaiveDate, value: f64) -> Observation {
    Observation { series: series.into(), entity: entity.into(), grade: Some(grade), date, value }
}

/// A stable series: level * (1 + rel_sd * N(0, 1)) each day, iid.
fn noisy(
    rng: &mut SplitMix,
    days: &[NaiveDate],
    level: f64,
    rel_sd: f64,
    series: &str,
    entity: &str,
) -> Vec<Observation> {
    days.iter().map(|&t| obs(series, entity, 3, t, level * (1.0 + rel_sd * rng.normal()))).collect()
}

/// Business days between two dates (0 when equal).
fn business_delay(from: NaiveDate, to: NaiveDate) -> usize {
    business_days(from, to).len().saturating_sub(1)
}

/// 100 invented entities, cir_theta (a parameter the model holds constant) iid around 2% with a 5% relative sd (0.1% absolute) through
/// 2024Q1; from 2024-02-14 (business day 31 of 64) the level is 3 sd (0.3%) higher.
fn shifted_panel(shift: NaiveDate) -> Vec<Observation> {
    let days = business_days(d(2024, 1, 2), d(2024, 3, 29));
    let mut rng = SplitMix(20_240_214);
    let mut all = Vec::new();
    for i in 0..100 {
        let entity = format!("Shiftco {i:03}");
        for o in noisy(&mut rng, &days, 0.02, 0.05, "cir_theta", &entity) {
            let bump = if o.date >= shift { 0.003 } else { 0.0 };
            all.push(Observation { value: o.value + bump, ..o });
        }
    }
    all
}

/// (distance in business days between the shift and each rejecting window's estimated break,
/// sorted; rejections whose estimated break is more than 10 business days from the shift).
fn break_distances(out: &[hazardline::stability::BreakRow], shift: NaiveDate) -> (Vec<usize>, usize) {
    let mut dist: Vec<usize> = out
        .iter()
        .filter(|b| b.p_value.is_some_and(|p| p < 0.05))
        .filter_map(|b| b.break_date)
        .map(|t| if t < shift { business_delay(t, shift) } else { business_delay(shift, t) })
        .collect();
    dist.sort_unstable();
    let far = dist.iter().filter(|&&k| k > 10).count();
    (dist, far)
}

#[test]
fn stability_planted_level_shift_is_found_and_dated() {
    // The break test per quarter at 5% (the defaults): iid noise around the level, so the
    // Dickey-Fuller test rejects a unit root and the levels are tested.
    let shift = d(2024, 2, 14);
    let panel = shifted_panel(shift);
    let out = analyse(&panel, &[], &[], &[], &StabilitySettings::default()).unwrap();
    let on_levels = out.series.breaks.iter().filter(|b| b.target == "levels").count();
    let (dist, far) = break_distances(&out.series.breaks, shift);
    let found = dist.len();
    let median = dist.get(found / 2).copied().unwrap_or(usize::MAX);
    println!("planted 3-sd shift: {on_levels}/100 tested on levels; found {found}/100; estimated break within {median} business days of the shift in half of them, {far} more than 10 days off");
    // Measured with this seed: 97 on levels, 80/100 found (the Brown-Durbin-Evans test used
    // before found 100/100, but it assumes independent values and raised the demo's red flags
    // on persistent series: 114 at first, 39 on the daily cir_theta once window estimates were
    // tested on their steps), median distance 1 business day, none more than 10 days off.
    assert!(on_levels >= 95, "on levels {on_levels}");
    assert!(found >= 70, "found {found}");
    assert!(median <= 2 && far <= 3, "median {median}, far {far}");
    // Every rejection is a flag on the same entity and date.
    let flagged = out.flags.iter().filter(|f| f.rule == hazardline::text::FlagRule::CusumBreak).count();
    assert_eq!(flagged, found);
    // The same test forced onto daily changes sees the shift as one large change and finds
    // far fewer (the reason changes are used only where the levels look like a random walk).
    let on_changes = StabilitySettings { cusum_target: CusumTarget::DailyChanges, ..StabilitySettings::default() };
    let out = analyse_series(&panel, &[], &[], &on_changes).unwrap();
    let (changes_found, _) = break_distances(&out.breaks, shift);
    println!("planted 3-sd shift, daily changes: found {}/100", changes_found.len());
    assert!(changes_found.len() < found / 2, "daily changes found {}", changes_found.len());
}

/// `series` invented entities, each an AR(1) x_t = m + phi (x_{t-1} - m) + e_t around 2% with
/// innovations scaled so that the stationary sd is 0.1% (phi < 1), or a random walk with 0.1%
/// daily steps (phi = 1); no break anywhere.
fn persistent_panel(days: &[NaiveDate], phi: f64, seed: u64, series: usize) -> Vec<Observation> {
    let mut rng = SplitMix(seed);
    let mut all = Vec::new();
    for i in 0..series {
        let entity = format!("Calmco {i:03}");
        let step = if phi < 1.0 { 0.001 * (1.0 - phi * phi).sqrt() } else { 0.001 };
        let mut x = 0.02 + if phi < 1.0 { 0.001 * rng.normal() } else { 0.0 };
        for &t in days {
            x = 0.02 + phi * (x - 0.02) + step * rng.normal();
            all.push(obs("cir_theta", &entity, 3, t, x));
        }
    }
    all
}

/// (share of tested windows that reject at 5%, windows tested).
fn false_alarm_rate(panel: &[Observation], scope: CusumScope) -> (f64, usize) {
    let settings = StabilitySettings { cusum_scope: scope, ..StabilitySettings::default() };
    let out = analyse_series(panel, &[], &[], &settings).unwrap();
    let tested = out.breaks.iter().filter(|b| b.p_value.is_some()).count();
    let rejected = out.breaks.iter().filter(|b| b.p_value.is_some_and(|p| p < 0.05)).count();
    (rejected as f64 / tested as f64, tested)
}

#[test]
fn stability_break_test_false_alarm_rate_near_nominal() {
    // 500 invented entities without a break, nominal size 5%: iid values (the old
    // Brown-Durbin-Evans test's own assumption), an AR(1) with phi = 0.9 (a persistent
    // stationary parameter) and a random walk (a daily theta that follows the spreads).
    let quarter = business_days(d(2024, 1, 2), d(2024, 3, 29));
    let year = business_days(d(2024, 1, 2), d(2024, 12, 31));
    let mut rng = SplitMix(7);
    let mut iid = Vec::new();
    for i in 0..500 {
        iid.extend(noisy(&mut rng, &quarter, 0.02, 0.05, "cir_theta", &format!("Calmco {i:03}")));
    }
    let cases = [
        ("iid, quarter", false_alarm_rate(&iid, CusumScope::Period)),
        ("AR(1) 0.9, quarter", false_alarm_rate(&persistent_panel(&quarter, 0.9, 11, 500), CusumScope::Period)),
        ("AR(1) 0.9, year", false_alarm_rate(&persistent_panel(&year, 0.9, 13, 500), CusumScope::History)),
        ("random walk, quarter", false_alarm_rate(&persistent_panel(&quarter, 1.0, 17, 500), CusumScope::Period)),
    ];
    for (name, (rate, n)) in &cases {
        println!("false-alarm rate at 5%, no break, {name}: {:.1}% of {n} windows", rate * 100.0);
    }
    // Measured with these seeds: 2.2%, 0.0%, 0.8% and 1.6%. The binomial sd of a 5% rate over
    // 500 windows is about 1%; the test is conservative on these panels, and the bands allow
    // three sd above 5% (no band below for the persistent panels, where it rejects almost never).
    let (iid_rate, _) = cases[0].1;
    assert!((0.005..=0.08).contains(&iid_rate), "iid rate {iid_rate}");
    for (name, (rate, _)) in &cases[1..] {
        assert!(*rate <= 0.08, "{name}: rate {rate}");
    }
}

/// Ten invented entities whose 2024Q1 and 2024Q2 pd_1y means fall 4/3/2/1 and then 2/3/3/2 in
/// the buckets (-inf, 1%], (1%, 2%], (2%, 5%], (5%, inf): the hand-worked PSI of the psi unit
/// test, 0.248491, now through the panel path.
fn psi_panel() -> Vec<Observation> {
    let q1 = [0.005, 0.006, 0.007, 0.008, 0.015, 0.016, 0.017, 0.03, 0.04, 0.08];
    let q2 = [0.004, 0.009, 0.012, 0.015, 0.018, 0.03, 0.035, 0.045, 0.06, 0.07];
    let mut out = Vec::new();
    for (i, (a, b)) in q1.iter().zip(q2).enumerate() {
        let e = format!("Psico {i}");
        for t in business_days(d(2024, 3, 25), d(2024, 3, 29)) {
            out.push(obs("pd_1y", &e, 2, t, *a));
        }
        for t in business_days(d(2024, 4, 1), d(2024, 4, 5)) {
            out.push(obs("pd_1y", &e, 2, t, b));
        }
    }
    out
}

#[test]
fn stability_psi_through_the_panel() {
    let settings =
        StabilitySettings { psi_edges: PsiEdges::Given(vec![0.01, 0.02, 0.05]), ..StabilitySettings::default() };
    let out = analyse(&psi_panel(), &[], &[], &[], &settings).unwrap();
    let row = out.series.psi.iter().find(|r| r.period == "2024Q2").expect("a PSI row for 2024Q2");
    assert_eq!((row.previous_period.as_str(), row.n_previous, row.n_current), ("2024Q1", 10, 10));
    assert!((row.psi.unwrap() - 0.248491).abs() < 1e-6);
    let f = out.flags.iter().find(|f| f.rule == hazardline::text::FlagRule::PsiShift).expect("a PSI flag");
    assert_eq!((f.severity.as_str(), f.threshold, f.period.as_str()), ("amber", 0.10, "2024Q2"));
}

/// A panel that breaks every rule at least once.
fn breach_panel() -> (Vec<Observation>, Vec<MarketMove>, Vec<CalibrationCounts>, Vec<ResidualObservation>) {
    let mut rng = SplitMix(99);
    let q1 = business_days(d(2024, 1, 2), d(2024, 3, 29));
    let q2 = business_days(d(2024, 4, 1), d(2024, 6, 28));
    let both: Vec<NaiveDate> = q1.iter().chain(&q2).copied().collect();
    let mut obs_all = psi_panel();
    for i in 0..12 {
        let e = format!("Steady {i:02}");
        obs_all.extend(noisy(&mut rng, &both, 0.01, 0.01, "hazard_5y", &e));
    }
    // Jumpy kappa: alternating 1.0 and 2.0 (100% moves), while its spreads barely move.
    for (j, t) in both.iter().enumerate() {
        obs_all.push(obs("cir_kappa", "Wobble", 4, *t, if j % 2 == 0 { 1.0 } else { 2.0 }));
    }
    // A level that doubles from Q1 to Q2 and breaks within Q2.
    for t in &q2 {
        let v = if *t < d(2024, 5, 15) { 0.01 } else { 0.03 };
        obs_all.push(obs("hazard_5y", "Stepper", 5, *t, v * (1.0 + 0.02 * rng.normal())));
    }
    for t in &q1 {
        obs_all.push(obs("hazard_5y", "Stepper", 5, *t, 0.01 * (1.0 + 0.02 * rng.normal())));
    }
    let market: Vec<MarketMove> = both
        .iter()
        .map(|t| MarketMove { entity: "Wobble".into(), date: *t, mean_abs_change_bp: 0.1, mean_level_bp: 150.0 })
        .collect();
    let counts = vec![
        CalibrationCounts { entity: "Wobble".into(), date: d(2024, 2, 1), failures: 2, infeasible: 0 },
        CalibrationCounts { entity: "Gapco".into(), date: d(2024, 2, 2), failures: 0, infeasible: 1 },
    ];
    let res = vec![ResidualObservation {
        date: d(2024, 2, 1),
        entity: "Wobble".into(),
        method: "bootstrap".into(),
        instrument: "cds_par_spread".into(),
        tenor: "5Y".into(),
        market: 150.0,
        model: 150.01,
        residual_bp: 0.01,
        converged: true,
    }];
    (obs_all, market, counts, res)
}

#[test]
fn stability_every_flag_points_at_output_rows() {
    let (o, m, c, r) = breach_panel();
    let settings = StabilitySettings {
        psi_edges: PsiEdges::Given(vec![0.01, 0.02, 0.05]),
        move_thresholds: vec![("cir_kappa".into(), MoveThreshold::Relative(0.25))],
        cusum_series: Vec::new(),
        ..StabilitySettings::default()
    };
    let out = analyse(&o, &m, &c, &r, &settings).unwrap();
    let rules: std::collections::BTreeSet<&str> = out.flags.iter().map(|f| f.rule.as_str()).collect();
    println!("{} flags; rules: {rules:?}", out.flags.len());
    for want in [
        "psi_shift",
        "cusum_break",
        "cv_high",
        "large_moves",
        "moves_vs_market",
        "period_change_mean",
        "period_change_median",
        "calibration_failures",
        "calibration_infeasible",
        "residual_over_tolerance",
    ] {
        assert!(rules.contains(want), "no {want} flag in {rules:?}");
    }
    for f in &out.flags {
        assert!(out.flag_has_target(f), "flag without a target row: {f:?}");
        assert!(f.explanation.ends_with('.') && f.explanation.len() > 40, "{}", f.explanation);
        assert!(f.value.is_finite() && f.threshold.is_finite(), "{f:?}");
    }
    // The target check itself can fail: a flag on a period with no data has no target.
    let mut stray = out.flags[0].clone();
    stray.period = "1999Q1".into();
    assert!(!out.flag_has_target(&stray));
}

/// A universe row of a few names raises no period-change flag (before: "the mean of the
/// universe's cir_kappa changed by +446%" on three names); with the minimum lowered to 0 the
/// same panel's universe rows do flag, so the rule is still there.
#[test]
fn universe_change_rules_need_enough_names() {
    let (mut o, m, c, r) = breach_panel();
    // Two names whose cir_theta triples from Q1 to Q2: a universe of two.
    for t in business_days(d(2024, 1, 2), d(2024, 6, 28)) {
        let v = if t < d(2024, 4, 1) { 0.01 } else { 0.03 };
        o.push(obs("cir_theta", "Wobble", 4, t, v));
        o.push(obs("cir_theta", "Stepper", 5, t, v));
    }
    let base = StabilitySettings { psi_edges: PsiEdges::Given(vec![0.01, 0.02, 0.05]), ..StabilitySettings::default() };
    let universe_flags = |s: &StabilitySettings| {
        let out = analyse(&o, &m, &c, &r, s).unwrap();
        out.flags.iter().filter(|f| f.rule.as_str().starts_with("period_change") && f.entity.is_none()).count()
    };
    // The cir_theta universe has two names; the panel's other universe change has 10 or more.
    let all = universe_flags(&StabilitySettings { universe_min_entities: 0, ..base.clone() });
    let at_least_ten = universe_flags(&base);
    assert!(all > at_least_ten, "{all} flags with no minimum, {at_least_ten} with 10");
    assert_eq!(universe_flags(&StabilitySettings { universe_min_entities: 1000, ..base.clone() }), 0);
}

/// A slow drift: each quarter the same ten invented names' 1Y PD rises by 0.6 percentage points,
/// so the period-on-period PSI stays small while the PSI against the first quarter grows. Q3
/// gets a row against Q2 (previous) and one against Q1 (the fixed reference); Q2's previous
/// period is the first, so it has one row.
#[test]
fn psi_against_the_first_period_sees_a_slow_drift() {
    let quarters = [d(2024, 1, 2), d(2024, 4, 1), d(2024, 7, 1), d(2024, 10, 1)];
    let mut o = Vec::new();
    for i in 0..10 {
        let e = format!("Driftco {i}");
        for (q, start) in quarters.iter().enumerate() {
            let v = 0.004 + 0.002 * i as f64 + 0.006 * q as f64;
            for t in business_days(*start, *start + chrono::Duration::days(4)) {
                o.push(obs("pd_1y", &e, 2, t, v));
            }
        }
    }
    let settings =
        StabilitySettings { psi_edges: PsiEdges::Given(vec![0.01, 0.02, 0.05]), ..StabilitySettings::default() };
    let out = analyse(&o, &[], &[], &[], &settings).unwrap();
    let psi = |period: &str, against: &str| {
        out.series.psi.iter().find(|r| r.period == period && r.previous_period == against).and_then(|r| r.psi)
    };
    assert_eq!(out.series.psi.iter().filter(|r| r.period == "2024Q2").count(), 1);
    let (step, drift) = (psi("2024Q4", "2024Q3").unwrap(), psi("2024Q4", "2024Q1").unwrap());
    assert!(drift > 0.25 && drift > 3.0 * step, "period on period {step}, against the first {drift}");
    assert!(psi("2024Q3", "2024Q1").is_some());
}

/// The flag-rate figures the report's method notes print (hazardline::report::flag_notes::MEASURED)
/// are what `hazardline flag-rates` measures at the default settings: both invented universes
/// are built and run through the whole pipeline again here, and every figure compared.
#[test]
fn flag_rates_in_the_method_notes_are_measured() {
    use hazardline::report::flag_notes::{MEASURED, MEASURED_ENTITY_PERIODS, MEASURED_PLANTED, MEASURED_SPEC};
    use hazardline::run::flag_rates::flag_rates;
    let (entities, years, instabilities, seed) = MEASURED_SPEC;
    let spec =
        hazardline::sim::ScenarioSpec { entities, years, instabilities, ..hazardline::sim::ScenarioSpec::demo(seed) };
    let dir = tempfile::tempdir().unwrap();
    let r = flag_rates(dir.path(), &spec).unwrap();
    println!("{}", r.table);
    assert!(r.met, "a rule misses its false-alarm target");
    // The method notes say no rule raised a red flag on the clean universe.
    assert!(r.rules.iter().all(|x| x.false_alarm_red == 0.0), "a red flag on the clean universe");
    assert_eq!(r.entity_periods, MEASURED_ENTITY_PERIODS);
    assert!(r.planted.iter().all(|p| !p.2.is_empty()), "every planted instability is caught by some rule");
    assert_eq!(r.rules.len(), MEASURED.len());
    for (got, want) in r.rules.iter().zip(MEASURED) {
        assert_eq!(got.rule, want.rule);
        assert_eq!(format!("{:.2}", 100.0 * got.false_alarm), format!("{:.2}", want.false_alarm_pct), "{}", want.rule);
        assert_eq!(got.detected.get("premium_shift"), Some(&(want.premium_shift, MEASURED_PLANTED)), "{}", want.rule);
        assert_eq!(got.detected.get("noisy_quotes"), Some(&(want.noisy_quotes, MEASURED_PLANTED)), "{}", want.rule);
    }
}
