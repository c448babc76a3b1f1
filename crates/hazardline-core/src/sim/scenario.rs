//! The invented universe: entities with grades that migrate, risk-free curves, historical and
//! pricing-measure intensities, defaults, CDS quotes priced with the crate's own pricer, bonds
//! with a CDS-bond basis, a longer cohort history, and data faults planted at known places.
//! Everything is a plain value; writing files is the application's job (`stages::universe`).
//!
//! Kept in one file on purpose: the generator draws every quantity from one random stream in a
//! fixed order (the same seed must give the same bytes), and the steps below read as that one
//! sequence of draws; split into files, the order of draws would be spread out of sight.

use super::credit::{self, DefaultClock, GradeProfile};
use super::names;
use super::rates::{demo_rate_models, RateModel};
use super::rng::Rng;
use crate::curves::{year_time, DiscountCurve, HazardCurve};
use crate::instruments::bond::{price_bond, BondTerms, RecoveryConvention};
use crate::instruments::cds::price_legs_set;
use crate::instruments::{AccrualIntegration, CdsContract};
use crate::models::cir::cir_hazard_curve;
use crate::time::{add_days, add_months, Calendar, DayCount, Tenor};
use chrono::{Datelike, NaiveDate, Weekday};
use rayon::prelude::*;
use std::collections::BTreeSet;

/// CDS tenors quoted for every entity (months).
pub const CDS_TENORS: [u32; 8] = [6, 12, 24, 36, 48, 60, 84, 120];
/// Discount pillars (months).
pub const DISCOUNT_TENORS: [u32; 12] = [1, 3, 6, 12, 24, 36, 60, 84, 120, 180, 240, 360];
/// Recovery used to price the quotes (the pipeline's default, common practice for senior
/// unsecured).
pub const RECOVERY: f64 = 0.40;

/// What to generate.
#[derive(Debug, Clone, PartialEq)]
pub struct ScenarioSpec {
    pub seed: u64,
    pub entities: usize,
    pub years: u32,
    /// First calendar day of the quoted period.
    pub start: NaiveDate,
    /// Years of cohort history before `start`.
    pub history_years: u32,
    /// Share of entities with bonds.
    pub bond_share: f64,
    /// Relative noise of a quoted spread (standard deviation of the log quote).
    pub quote_noise: f64,
    /// Plant data faults.
    pub faults: bool,
    /// Multiplies every grade's long-run historical intensity (1 for the demo; the self-check
    /// raises it so that a small universe has defaults in most grades).
    pub intensity_scale: f64,
    /// Grades migrate month by month (true for the demo). Off, every entity keeps its first
    /// grade, so its intensity follows one CIR process with constant parameters: the
    /// no-instability universe of the flag-rate measurement.
    pub migration: bool,
    /// Parameter instabilities to plant on distinct entities (none for the demo); see
    /// [`Instability`].
    pub instabilities: usize,
}

/// A planted instability: something about one name that a stable model would not do, from
/// `date` to `last_date`.
#[derive(Debug, Clone, PartialEq)]
pub struct Instability {
    /// `premium_shift` (the pricing multiplier doubles from `date` to the end: spreads jump and
    /// stay up) or `noisy_quotes` (the quotes' relative noise is ten times the usual for 63
    /// business days).
    pub kind: &'static str,
    pub entity: usize,
    pub date: NaiveDate,
    pub last_date: NaiveDate,
}

impl Instability {
    /// The factor on the pricing multiplier of `entity` on `date` (1 outside a premium shift).
    fn multiplier_factor(list: &[Instability], entity: usize, date: NaiveDate) -> f64 {
        list.iter()
            .filter(|x| x.kind == "premium_shift" && x.entity == entity && x.date <= date && date <= x.last_date)
            .fold(1.0, |f, _| f * 2.0)
    }

    /// The factor on the quote noise of `entity` on `date` (1 outside a noisy spell).
    fn noise_factor(list: &[Instability], entity: usize, date: NaiveDate) -> f64 {
        list.iter()
            .filter(|x| x.kind == "noisy_quotes" && x.entity == entity && x.date <= date && date <= x.last_date)
            .fold(1.0, |f, _| f * 10.0)
    }
}

impl ScenarioSpec {
    /// The bundled demo's settings, from a seed.
    pub fn demo(seed: u64) -> ScenarioSpec {
        ScenarioSpec {
            seed,
            entities: 250,
            years: 5,
            start: NaiveDate::from_ymd_opt(2015, 1, 1).expect("valid date"),
            history_years: 20,
            bond_share: 0.12,
            quote_noise: 0.004,
            faults: true,
            intensity_scale: 1.0,
            migration: true,
            instabilities: 0,
        }
    }

    /// The last calendar day of the quoted period.
    pub fn end(&self) -> NaiveDate {
        add_days(add_months(self.start, 12 * self.years as i32), -1)
    }
}

/// One invented entity.
#[derive(Debug, Clone, PartialEq)]
pub struct Entity {
    pub entity: String,
    pub name: String,
    pub sector: &'static str,
    pub region: &'static str,
    pub currency: &'static str,
    /// The date the entity leaves the institution's coverage (planted on a few names,
    /// independently of their credit), None when it stays covered.
    pub coverage_end: Option<NaiveDate>,
}

/// A CDS quote cell: a number, or text as typed (for the planted unparseable cells).
#[derive(Debug, Clone, PartialEq)]
pub enum QuoteValue {
    Number(f64),
    Text(String),
}

/// Which file of the cds_quotes folder a row goes to.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord)]
pub enum QuoteFile {
    /// `quotes_<year>.parquet`: the daily feed of one calendar year.
    Year(i32),
    /// `manual_entries.csv`: rows typed in by hand.
    Manual,
}

impl QuoteFile {
    pub fn file_name(self) -> String {
        match self {
            QuoteFile::Year(y) => format!("quotes_{y}.parquet"),
            QuoteFile::Manual => "manual_entries.csv".to_string(),
        }
    }
}

/// One cds_quotes row.
#[derive(Debug, Clone, PartialEq)]
pub struct QuoteRow {
    pub date: NaiveDate,
    pub entity: usize,
    pub tenor: u32,
    pub value: QuoteValue,
    pub file: QuoteFile,
    /// Index into [`Scenario::faults`] when the row is part of a planted fault.
    pub fault: Option<usize>,
}

/// A planted data fault.
#[derive(Debug, Clone, PartialEq)]
pub struct Fault {
    /// `stale_run`, `spike`, `conflicting_duplicate`, `missing_tenors`, `after_default`,
    /// `weekend_date`, `unit_slip`, `unparseable_number`.
    pub kind: &'static str,
    pub entity: usize,
    pub date: NaiveDate,
    /// Last date the fault covers (runs).
    pub last_date: NaiveDate,
    pub tenor: Option<u32>,
    /// What the quality stage should produce: `reject:<reason>` or `flag:<rule>`.
    pub expected: &'static str,
    pub detail: String,
}

/// A bond of the universe.
#[derive(Debug, Clone, PartialEq)]
pub struct Bond {
    pub bond: String,
    pub entity: usize,
    pub terms: BondTerms,
    /// Planted CDS-bond basis in bp (bond spread over the CDS-implied one).
    pub basis_bp: f64,
}

/// One row of the planted intensity truth (month ends).
#[derive(Debug, Clone, PartialEq)]
pub struct IntensityTruth {
    pub date: NaiveDate,
    pub entity: usize,
    pub grade: u32,
    pub lambda_p: f64,
    pub lambda_q: f64,
}

/// One row of the cohort history (an invented institution's own counts).
#[derive(Debug, Clone, PartialEq)]
pub struct CohortHistory {
    pub year: i32,
    pub grade: u32,
    pub obligors: u64,
    pub defaults: u64,
    pub withdrawn: u64,
    /// The planted one-year PD of that grade and year.
    pub pd: f64,
}

/// The whole universe.
#[derive(Debug, Clone, PartialEq)]
pub struct Scenario {
    pub spec: ScenarioSpec,
    pub profiles: Vec<GradeProfile>,
    pub entities: Vec<Entity>,
    /// (entity, from_date, grade), in entity then date order.
    pub grades: Vec<(usize, NaiveDate, u32)>,
    /// (entity, default date, grade at default).
    pub defaults: Vec<(usize, NaiveDate, u32)>,
    /// (date, currency, tenor months, zero rate).
    pub discount: Vec<(NaiveDate, &'static str, u32, f64)>,
    pub quotes: Vec<QuoteRow>,
    pub bonds: Vec<Bond>,
    /// (date, bond index, clean price).
    pub bond_quotes: Vec<(NaiveDate, usize, f64)>,
    pub cohort_history: Vec<CohortHistory>,
    pub intensities: Vec<IntensityTruth>,
    pub premium: Vec<PremiumTruth>,
    /// The planted pricing-measure 1Y PD of every entity alive on each annual cohort day
    /// (entity, cohort day, PD): what the calibrated curves should imply, for the planted AUC.
    pub planted_pd_1y: Vec<(usize, NaiveDate, f64)>,
    pub faults: Vec<Fault>,
    /// Planted parameter instabilities (empty unless `spec.instabilities` > 0).
    pub instabilities: Vec<Instability>,
}

/// The planted pricing-over-historical ratio for one grade and horizon, over the members of
/// the annual cohorts (entities alive on each year's first business day, by their grade then).
#[derive(Debug, Clone, PartialEq)]
pub struct PremiumTruth {
    pub grade: u32,
    pub horizon_years: u32,
    pub members: usize,
    /// Sum of the members' pricing-measure cumulative hazards over the horizon.
    pub hazard_q: f64,
    /// Sum of their historical-measure cumulative hazards (expected defaults, nearly).
    pub hazard_p: f64,
    /// The instantaneous multiplier m of the grade.
    pub multiplier: f64,
}

impl PremiumTruth {
    pub fn ratio(&self) -> f64 {
        self.hazard_q / self.hazard_p
    }
}

/// Sums the planted cumulative hazards over annual cohorts (first business day of each year).
fn premium_truth(profiles: &[GradeProfile], days: &[NaiveDate], paths: &[Path]) -> Vec<PremiumTruth> {
    let mut cohort_days = Vec::new();
    for (k, d) in days.iter().enumerate() {
        if k == 0 || days[k - 1].year() != d.year() {
            cohort_days.push(k);
        }
    }
    let mut out = Vec::new();
    for p in profiles {
        for h in [1u32, 3, 5] {
            let mut t = PremiumTruth {
                grade: p.grade,
                horizon_years: h,
                members: 0,
                hazard_q: 0.0,
                hazard_p: 0.0,
                multiplier: p.multiplier,
            };
            for path in paths {
                for &k in &cohort_days {
                    if k < path.grade.len() && path.grade[k] == p.grade {
                        let (q, hp) = credit::horizon_hazards(path.lambda_p[k], p.theta_p, p.multiplier, h as f64);
                        t.members += 1;
                        t.hazard_q += q;
                        t.hazard_p += hp;
                    }
                }
            }
            out.push(t);
        }
    }
    out
}

/// The planted 1Y pricing PD, 1 - exp(-Q cumulative hazard), of each entity alive on each
/// annual cohort day (the first business day of each year).
fn planted_pds(profiles: &[GradeProfile], days: &[NaiveDate], paths: &[Path]) -> Vec<(usize, NaiveDate, f64)> {
    let mut out = Vec::new();
    for (k, d) in days.iter().enumerate() {
        if k > 0 && days[k - 1].year() == d.year() {
            continue;
        }
        for (i, path) in paths.iter().enumerate() {
            if k < path.grade.len() {
                let p = &profiles[(path.grade[k] - 1) as usize];
                let (q, _) = credit::horizon_hazards(path.lambda_p[k], p.theta_p, p.multiplier, 1.0);
                out.push((i, *d, -(-q).exp_m1()));
            }
        }
    }
    out
}

/// Business days of the quoted period (weekends only: the demo uses no holiday list).
fn business_days(spec: &ScenarioSpec) -> Vec<NaiveDate> {
    let cal = Calendar::weekends_only();
    let mut out = Vec::new();
    let mut d = spec.start;
    while d <= spec.end() {
        if cal.is_business_day(d) {
            out.push(d);
        }
        d = add_days(d, 1);
    }
    out
}

/// Per-entity state paths over the business days.
struct Path {
    grade: Vec<u32>,
    lambda_p: Vec<f64>,
    /// Index of the first business day on or after the default, if it defaults.
    default_day: Option<usize>,
    default_date: Option<NaiveDate>,
}

fn simulate_entity(spec: &ScenarioSpec, profiles: &[GradeProfile], days: &[NaiveDate], i: usize) -> Path {
    let mut rng = Rng::stream(spec.seed, "credit", i as u64);
    let weights: Vec<f64> = profiles.iter().map(|p| p.weight).collect();
    let worst = profiles.len() as u32;
    let mut g = rng.weighted(&weights) as u32 + 1;
    let theta = |g: u32| profiles[(g - 1) as usize].theta_p;
    let mut l = theta(g) * (0.5 * rng.normal() - 0.125).exp();
    let mut clock = DefaultClock::new(&mut rng);
    let dt = 1.0 / 365.0;
    let (mut grade, mut lambda_p) = (Vec::with_capacity(days.len()), Vec::with_capacity(days.len()));
    let mut day = spec.start;
    let mut next = 0;
    let mut default_date = None;
    while next < days.len() {
        // Calendar-day steps; record on business days.
        if day == days[next] {
            grade.push(g);
            lambda_p.push(l.max(0.0));
            next += 1;
        }
        if spec.migration && day.day() == 1 {
            let (up, down) = credit::migration(g, worst);
            let u = rng.uniform();
            if u < up {
                g -= 1;
            } else if u < up + down {
                g += 1;
            }
        }
        let th = theta(g);
        let nl = credit::cir_step(l, credit::KAPPA, th, credit::sigma_for(th), dt, rng.normal());
        day = add_days(day, 1);
        if clock.advance(0.5 * (l.max(0.0) + nl.max(0.0)), dt) {
            default_date = Some(day);
            break;
        }
        l = nl;
    }
    let default_day = default_date.map(|_| grade.len());
    Path { grade, lambda_p, default_day, default_date }
}

/// Builds the universe for `spec`.
pub fn generate(spec: &ScenarioSpec) -> Scenario {
    let mut profiles = credit::demo_grades();
    for p in &mut profiles {
        p.theta_p *= spec.intensity_scale;
    }
    let days = business_days(spec);
    let models = demo_rate_models();

    // Entities.
    let mut rng = Rng::stream(spec.seed, "entities", 0);
    let mut used = BTreeSet::new();
    let entities: Vec<Entity> = (0..spec.entities)
        .map(|_| {
            let (name, sector, region) = names::invent(&mut rng, &mut used);
            let currency = if rng.chance(0.6) { "EUR" } else { "USD" };
            Entity { entity: name.clone(), name, sector, region, currency, coverage_end: None }
        })
        .collect();
    // Leaving coverage: about 4% of the names at a uniform day of the quoted period, from a
    // stream of its own so that no other draw moves.
    let mut entities = entities;
    let mut exits = Rng::stream(spec.seed, "coverage", 0);
    let span = (spec.end() - spec.start).num_days().max(1) as u64;
    for e in entities.iter_mut() {
        if exits.chance(0.04) {
            e.coverage_end = Some(add_days(spec.start, 1 + exits.below(span) as i64));
        }
    }

    // Credit paths.
    let paths: Vec<Path> =
        (0..spec.entities).into_par_iter().map(|i| simulate_entity(spec, &profiles, &days, i)).collect();
    let mut grades = Vec::new();
    let mut defaults = Vec::new();
    let mut intensities = Vec::new();
    for (i, p) in paths.iter().enumerate() {
        for (k, &g) in p.grade.iter().enumerate() {
            if k == 0 || p.grade[k - 1] != g {
                grades.push((i, if k == 0 { spec.start } else { days[k] }, g));
            }
            let month_end = k + 1 == p.grade.len() || days[k + 1].month() != days[k].month();
            if month_end {
                let m = profiles[(g - 1) as usize].multiplier;
                intensities.push(IntensityTruth {
                    date: days[k],
                    entity: i,
                    grade: g,
                    lambda_p: p.lambda_p[k],
                    lambda_q: m * p.lambda_p[k],
                });
            }
        }
        if let Some(d) = p.default_date {
            defaults.push((i, d, p.grade.last().copied().unwrap_or(1)));
        }
    }

    // Risk-free curves.
    let discount = discount_rows(spec, &models, &days);
    let curves = discount_curves(&discount, &days, &models);

    let instabilities = plant_instabilities(spec, &days, &paths);

    // CDS quotes, priced per date in parallel (each entity-day draws its own noise stream).
    let cal = Calendar::weekends_only();
    let tenors: Vec<Tenor> = CDS_TENORS.iter().filter_map(|&m| Tenor::from_months(m)).collect();
    let mut quotes: Vec<QuoteRow> = (0..days.len())
        .into_par_iter()
        .flat_map_iter(|k| {
            let date = days[k];
            let contracts: Vec<CdsContract> =
                CdsContract::standard_set(date, &tenors, &cal).into_iter().filter_map(|c| c.ok()).collect();
            let times: Vec<f64> = contracts.iter().map(|c| year_time(date, c.maturity)).collect();
            let refs: Vec<&CdsContract> = contracts.iter().collect();
            let recoveries = vec![RECOVERY; refs.len()];
            let mut rows = Vec::new();
            for (i, p) in paths.iter().enumerate() {
                if k >= p.grade.len() {
                    continue;
                }
                let prof = profiles[(p.grade[k] - 1) as usize];
                let multiplier = prof.multiplier * Instability::multiplier_factor(&instabilities, i, date);
                let params = credit::pricing_params(p.lambda_p[k], prof.theta_p, multiplier);
                let Ok(hazard) = cir_hazard_curve(date, &params, &times) else { continue };
                let quote_noise = spec.quote_noise * Instability::noise_factor(&instabilities, i, date);
                let disc = &curves[currency_index(&models, entities[i].currency)][k];
                let mut noise = Rng::stream(spec.seed, "quote_noise", (k * spec.entities + i) as u64);
                // Every tenor on one joint grid (one plan per entity and day). Priced with the
                // `standard` accrual variant, which the demo data was made with before the
                // published variant became the calibration default: the two differ by about
                // 2e-4 of a quote, far inside the quotes' 0.4% noise, and keeping it keeps the
                // bundled data's bytes.
                let Ok(all_legs) = price_legs_set(&refs, &recoveries, disc, &hazard, AccrualIntegration::Standard)
                else {
                    continue;
                };
                for (legs, &m) in all_legs.iter().zip(&CDS_TENORS) {
                    let par = legs.par_spread() * 1e4 * (quote_noise * noise.normal()).exp();
                    rows.push(QuoteRow {
                        date,
                        entity: i,
                        tenor: m,
                        value: QuoteValue::Number(round_to(par, 2)),
                        file: QuoteFile::Year(date.year()),
                        fault: None,
                    });
                }
            }
            rows
        })
        .collect();

    // Bonds.
    let (bonds, bond_quotes) = bond_rows(spec, &profiles, &entities, &paths, &days, &curves, &models);

    let cohort_history = cohort_rows(spec, &profiles);
    let premium = premium_truth(&profiles, &days, &paths);
    let planted_pd_1y = planted_pds(&profiles, &days, &paths);
    let mut faults = Vec::new();
    if spec.faults {
        plant_faults(spec, &days, &paths, &mut quotes, &mut faults);
    }
    quotes.sort_by_key(|a| (a.file, a.date, a.entity, a.tenor));
    Scenario {
        spec: spec.clone(),
        profiles,
        entities,
        grades,
        defaults,
        discount,
        quotes,
        bonds,
        bond_quotes,
        cohort_history,
        intensities,
        premium,
        planted_pd_1y,
        faults,
        instabilities,
    }
}

/// Plants `spec.instabilities` instabilities on distinct entities that are quoted through the
/// middle of the period, alternating `premium_shift` and `noisy_quotes`, each starting on a
/// business day drawn uniformly from the middle 60% of the quoted period (its own random
/// stream, so nothing else moves).
fn plant_instabilities(spec: &ScenarioSpec, days: &[NaiveDate], paths: &[Path]) -> Vec<Instability> {
    let mut out = Vec::new();
    if spec.instabilities == 0 || days.len() < 10 {
        return out;
    }
    let mut rng = Rng::stream(spec.seed, "instabilities", 0);
    let (lo, hi) = (days.len() / 5, days.len() * 4 / 5);
    let mut used = BTreeSet::new();
    let mut tries = 0;
    while out.len() < spec.instabilities && tries < 100 * spec.instabilities {
        tries += 1;
        let entity = rng.below(paths.len() as u64) as usize;
        let k = lo + rng.below((hi - lo).max(1) as u64) as usize;
        // Quoted until at least 63 business days after the start.
        if used.contains(&entity) || paths[entity].grade.len() <= k + 63 {
            continue;
        }
        used.insert(entity);
        let kind = if out.len() % 2 == 0 { "premium_shift" } else { "noisy_quotes" };
        let last = if kind == "premium_shift" { days[days.len() - 1] } else { days[(k + 62).min(days.len() - 1)] };
        out.push(Instability { kind, entity, date: days[k], last_date: last });
    }
    out.sort_by_key(|x| (x.date, x.entity));
    out
}

fn currency_index(models: &[RateModel], currency: &str) -> usize {
    models.iter().position(|m| m.currency == currency).unwrap_or(0)
}

/// Rounds to `places` decimals (quotes are typed to a fixed precision).
pub fn round_to(x: f64, places: i32) -> f64 {
    let f = 10f64.powi(places);
    (x * f).round() / f
}

fn discount_rows(
    spec: &ScenarioSpec,
    models: &[RateModel],
    days: &[NaiveDate],
) -> Vec<(NaiveDate, &'static str, u32, f64)> {
    let mut out = Vec::with_capacity(days.len() * models.len() * DISCOUNT_TENORS.len());
    for (ci, m) in models.iter().enumerate() {
        let mut rng = Rng::stream(spec.seed, "rates", ci as u64);
        let mut state = m.start();
        let mut prev = spec.start;
        for &d in days {
            let dt = (d - prev).num_days() as f64 / 365.0;
            if dt > 0.0 {
                state = m.step(state, dt, &mut rng);
            }
            prev = d;
            for &tm in &DISCOUNT_TENORS {
                let tau = year_time(d, add_months(d, tm as i32));
                out.push((d, m.currency, tm, round_to(m.zero_rate(state, tau), 6)));
            }
        }
    }
    out.sort_by(|a, b| (a.0, a.1, a.2).cmp(&(b.0, b.1, b.2)));
    out
}

/// The discount curves the tool will build from the written (rounded) zero rates, per
/// currency (in model order) and business day.
fn discount_curves(
    rows: &[(NaiveDate, &'static str, u32, f64)],
    days: &[NaiveDate],
    models: &[RateModel],
) -> Vec<Vec<DiscountCurve>> {
    models
        .iter()
        .map(|m| {
            days.iter()
                .map(|&d| {
                    let lo = rows.partition_point(|r| r.0 < d);
                    let hi = rows.partition_point(|r| r.0 <= d);
                    let pillars: Vec<(Tenor, f64)> = rows[lo..hi]
                        .iter()
                        .filter(|r| r.1 == m.currency)
                        .filter_map(|r| Tenor::from_months(r.2).map(|t| (t, r.3)))
                        .collect();
                    DiscountCurve::from_zero_rates(d, &pillars).unwrap_or_else(|_| DiscountCurve::flat(d, m.level.b))
                })
                .collect()
        })
        .collect()
}

#[allow(clippy::too_many_arguments)]
fn bond_rows(
    spec: &ScenarioSpec,
    profiles: &[GradeProfile],
    entities: &[Entity],
    paths: &[Path],
    days: &[NaiveDate],
    curves: &[Vec<DiscountCurve>],
    models: &[RateModel],
) -> (Vec<Bond>, Vec<(NaiveDate, usize, f64)>) {
    let mut rng = Rng::stream(spec.seed, "bonds", 0);
    let mut bonds = Vec::new();
    for (i, e) in entities.iter().enumerate() {
        if !rng.chance(spec.bond_share) {
            continue;
        }
        let basis_bp = round_to(15.0 + 25.0 * rng.normal(), 1);
        let count = 2 + rng.below(3) as usize;
        for b in 0..count {
            let months = 30 + rng.below(100) as i32;
            let maturity = add_months(spec.start, months);
            let (frequency, day_count) =
                if e.currency == "EUR" { (1, DayCount::ActActIcma) } else { (2, DayCount::Thirty360) };
            let g = paths[i].grade.first().copied().unwrap_or(3);
            let par_rate =
                models[currency_index(models, e.currency)].level.b + profiles[(g - 1) as usize].theta_p * 1.2;
            let coupon = (par_rate * 800.0).round() / 800.0;
            let terms =
                BondTerms { coupon, frequency, maturity, day_count, issue_date: Some(add_months(maturity, -120)) };
            bonds.push(Bond {
                bond: format!("{}-{}{:02}", initials(&e.entity), maturity.year(), b + 1),
                entity: i,
                terms,
                basis_bp,
            });
        }
    }
    // Weekly prices (Wednesdays), while the issuer is alive and the bond has over three months
    // to run.
    let mut quotes = Vec::new();
    for (k, &d) in days.iter().enumerate() {
        if d.weekday() != Weekday::Wed {
            continue;
        }
        for (bi, b) in bonds.iter().enumerate() {
            let p = &paths[b.entity];
            if k >= p.grade.len() || add_months(d, 3) >= b.terms.maturity {
                continue;
            }
            let prof = profiles[(p.grade[k] - 1) as usize];
            let params = credit::pricing_params(p.lambda_p[k], prof.theta_p, prof.multiplier);
            let times: Vec<f64> = (1..=48).map(|q| q as f64 * 0.25).collect();
            let Ok(h) = cir_hazard_curve(d, &params, &times) else { continue };
            // The basis as a parallel hazard shift of basis / (1 - R): a bond spread move of
            // about the basis in bp.
            let shift = b.basis_bp * 1e-4 / (1.0 - RECOVERY);
            let shifted: Vec<f64> = h.hazards().iter().map(|x| (x + shift).max(0.0)).collect();
            let Ok(h) = HazardCurve::new(d, h.node_times().to_vec(), shifted) else { continue };
            let disc = &curves[currency_index(models, entities[b.entity].currency)][k];
            let Ok(price) = price_bond(&b.terms, disc, &h, RECOVERY, RecoveryConvention::Par) else { continue };
            let mut noise = Rng::stream(spec.seed, "bond_noise", (k * 10_000 + bi) as u64);
            quotes.push((d, bi, round_to(price.clean + 0.03 * noise.normal(), 3)));
        }
    }
    (bonds, quotes)
}

fn initials(name: &str) -> String {
    name.split_whitespace().filter_map(|w| w.chars().next()).collect::<String>().to_ascii_uppercase()
        + &name.chars().filter(|c| c.is_ascii_lowercase()).take(3).collect::<String>().to_ascii_uppercase()
}

fn cohort_rows(spec: &ScenarioSpec, profiles: &[GradeProfile]) -> Vec<CohortHistory> {
    let mut rng = Rng::stream(spec.seed, "cohort_history", 0);
    let first = spec.start.year() - spec.history_years as i32;
    let mut out = Vec::new();
    for (k, year) in (first..spec.start.year()).enumerate() {
        // A common credit-cycle factor per year (invented): defaults cluster in bad years.
        let cycle = (0.45 * rng.normal() - 0.1).exp();
        for p in profiles {
            let obligors = (2_400.0 * p.weight * (1.0 + 0.03 * k as f64)).round() as u64;
            let pd = 1.0 - (-p.theta_p * cycle).exp();
            let defaults = rng.binomial(obligors, pd);
            let withdrawn = rng.binomial(obligors - defaults, 0.04);
            out.push(CohortHistory { year, grade: p.grade, obligors, defaults, withdrawn, pd });
        }
    }
    out
}

/// Plants the data faults, each at a place drawn from its own stream; the number of each kind
/// scales with the universe (one per ten entities, at least two).
fn plant_faults(
    spec: &ScenarioSpec,
    days: &[NaiveDate],
    paths: &[Path],
    quotes: &mut Vec<QuoteRow>,
    faults: &mut Vec<Fault>,
) {
    let per_kind = (spec.entities / 10).max(2);
    let cal = Calendar::weekends_only();
    // Index of each (entity, day, tenor) row in `quotes`, before any row is added.
    let mut index = std::collections::HashMap::with_capacity(quotes.len());
    for (q, r) in quotes.iter().enumerate() {
        if let Ok(k) = days.binary_search(&r.date) {
            index.insert((r.entity, k, r.tenor), q);
        }
    }
    let mut rng = Rng::stream(spec.seed, "faults", 0);
    let mut taken: BTreeSet<(usize, usize)> = BTreeSet::new();
    // A random (entity, day) whose curve is whole, with `span` whole days after it, away from
    // the ends and from other faults.
    let pick = |rng: &mut Rng, span: usize, taken: &mut BTreeSet<(usize, usize)>| -> Option<(usize, usize)> {
        for _ in 0..200 {
            let e = rng.below(paths.len() as u64) as usize;
            let alive = paths[e].grade.len();
            if alive < 40 + span {
                continue;
            }
            let k = 20 + rng.below((alive - 30 - span) as u64) as usize;
            if (k.saturating_sub(15)..k + span + 15).any(|j| taken.contains(&(e, j))) {
                continue;
            }
            if !(k..k + span).all(|j| CDS_TENORS.iter().all(|&t| index.contains_key(&(e, j, t)))) {
                continue;
            }
            for j in k..k + span {
                taken.insert((e, j));
            }
            return Some((e, k));
        }
        None
    };
    let number = |q: &QuoteRow| if let QuoteValue::Number(v) = q.value { v } else { f64::NAN };

    // Stale runs: one tenor repeats its value for 7 business days.
    for _ in 0..per_kind {
        let Some((e, k)) = pick(&mut rng, 7, &mut taken) else { continue };
        let t = CDS_TENORS[rng.below(CDS_TENORS.len() as u64) as usize];
        let f = faults.len();
        let v = number(&quotes[index[&(e, k, t)]]);
        for j in k..k + 7 {
            let q = &mut quotes[index[&(e, j, t)]];
            q.value = QuoteValue::Number(v);
            q.fault = Some(f);
        }
        faults.push(Fault {
            kind: "stale_run",
            entity: e,
            date: days[k],
            last_date: days[k + 6],
            tenor: Some(t),
            expected: "flag:stale_run",
            detail: format!("{v} bp repeated for 7 business days"),
        });
    }
    // Spikes: one quote times 3 (or a third), back the next day.
    for _ in 0..per_kind {
        let Some((e, k)) = pick(&mut rng, 2, &mut taken) else { continue };
        let t = CDS_TENORS[rng.below(CDS_TENORS.len() as u64) as usize];
        let factor = if rng.chance(0.5) { 3.0 } else { 1.0 / 3.0 };
        let f = faults.len();
        let q = &mut quotes[index[&(e, k, t)]];
        let v = number(q);
        q.value = QuoteValue::Number(round_to(v * factor, 2));
        q.fault = Some(f);
        faults.push(Fault {
            kind: "spike",
            entity: e,
            date: days[k],
            last_date: days[k],
            tenor: Some(t),
            expected: "flag:spike",
            detail: format!("{v} bp quoted x{factor:.3} for one day"),
        });
    }
    // Unit slips: three days of one tenor typed in percent (divided by 100).
    for _ in 0..(per_kind / 2).max(2) {
        let Some((e, k)) = pick(&mut rng, 3, &mut taken) else { continue };
        let t = CDS_TENORS[rng.below(CDS_TENORS.len() as u64) as usize];
        let f = faults.len();
        for j in k..k + 3 {
            let q = &mut quotes[index[&(e, j, t)]];
            q.value = QuoteValue::Number(round_to(number(q) / 100.0, 4));
            q.fault = Some(f);
        }
        faults.push(Fault {
            kind: "unit_slip",
            entity: e,
            date: days[k],
            last_date: days[k + 2],
            tenor: Some(t),
            expected: "reject:unit_slip",
            detail: "three days typed in percent instead of bp".into(),
        });
    }
    // Missing tenors: a curve keeps only two of its tenors.
    let mut dropped = BTreeSet::new();
    for _ in 0..per_kind {
        let Some((e, k)) = pick(&mut rng, 1, &mut taken) else { continue };
        let f = faults.len();
        let keep = [CDS_TENORS[rng.below(4) as usize], CDS_TENORS[4 + rng.below(4) as usize]];
        for &t in &CDS_TENORS {
            if !keep.contains(&t) {
                dropped.insert(index[&(e, k, t)]);
            }
        }
        for &t in &keep {
            quotes[index[&(e, k, t)]].fault = Some(f);
        }
        faults.push(Fault {
            kind: "missing_tenors",
            entity: e,
            date: days[k],
            last_date: days[k],
            tenor: None,
            expected: "flag:few_tenors",
            detail: format!("only {} and {} months quoted", keep[0], keep[1]),
        });
    }
    // Conflicting duplicates: a second row for the same key with another value.
    let mut added = Vec::new();
    for _ in 0..per_kind {
        let Some((e, k)) = pick(&mut rng, 1, &mut taken) else { continue };
        let t = CDS_TENORS[rng.below(CDS_TENORS.len() as u64) as usize];
        let f = faults.len();
        let q = &mut quotes[index[&(e, k, t)]];
        q.fault = Some(f);
        let mut dup = q.clone();
        dup.value = QuoteValue::Number(round_to(number(q) * 1.07, 2));
        added.push(dup);
        faults.push(Fault {
            kind: "conflicting_duplicate",
            entity: e,
            date: days[k],
            last_date: days[k],
            tenor: Some(t),
            expected: "reject:conflicting_duplicate",
            detail: "the same key quoted twice with values 7% apart".into(),
        });
    }
    // Unparseable numbers: a day's quote typed by hand as text.
    let garbled = ["n/a", "12,5", "1.2.3", "#VALUE!", "~90"];
    for g in 0..per_kind {
        let Some((e, k)) = pick(&mut rng, 1, &mut taken) else { continue };
        let t = CDS_TENORS[rng.below(CDS_TENORS.len() as u64) as usize];
        let f = faults.len();
        let q = &mut quotes[index[&(e, k, t)]];
        q.value = QuoteValue::Text(garbled[g % garbled.len()].to_string());
        q.file = QuoteFile::Manual;
        q.fault = Some(f);
        faults.push(Fault {
            kind: "unparseable_number",
            entity: e,
            date: days[k],
            last_date: days[k],
            tenor: Some(t),
            expected: "reject:unparseable_number",
            detail: format!("par_spread_bp typed as {:?}", garbled[g % garbled.len()]),
        });
    }
    // Weekend dates: a Friday quote typed in again with Saturday's date.
    for _ in 0..per_kind {
        let Some((e, k)) = pick(&mut rng, 1, &mut taken) else { continue };
        let saturday = add_days(days[k], (5 - days[k].weekday().num_days_from_monday() as i64).max(1));
        let t = CDS_TENORS[rng.below(CDS_TENORS.len() as u64) as usize];
        let f = faults.len();
        let mut row = quotes[index[&(e, k, t)]].clone();
        row.date = saturday;
        row.file = QuoteFile::Manual;
        row.fault = Some(f);
        added.push(row);
        faults.push(Fault {
            kind: "weekend_date",
            entity: e,
            date: saturday,
            last_date: saturday,
            tenor: Some(t),
            expected: "reject:non_business_day",
            detail: format!("the {} quote entered again dated Saturday", days[k]),
        });
    }
    // Quotes after default: the feed keeps sending the last curve for three business days.
    for (e, p) in paths.iter().enumerate() {
        let (Some(dd), Some(k)) = (p.default_date, p.default_day) else { continue };
        if k == 0 || !rng.chance(0.5) {
            continue;
        }
        let f = faults.len();
        let mut d = cal.following(dd);
        if d == dd {
            d = cal.add_business_days(dd, 1);
        }
        let first = d;
        for _ in 0..3 {
            if d > spec.end() {
                break;
            }
            for &t in &CDS_TENORS {
                if let Some(&q) = index.get(&(e, k - 1, t)) {
                    let mut row = quotes[q].clone();
                    row.date = d;
                    row.file = QuoteFile::Year(d.year());
                    row.fault = Some(f);
                    added.push(row);
                }
            }
            d = cal.add_business_days(d, 1);
        }
        if first <= spec.end() {
            faults.push(Fault {
                kind: "after_default",
                entity: e,
                date: first,
                last_date: cal.add_business_days(d, -1),
                tenor: None,
                expected: "reject:after_default",
                detail: format!("last curve repeated after the default on {dd}"),
            });
        } else {
            added.retain(|r| r.fault != Some(f));
        }
    }
    if !dropped.is_empty() {
        let mut q = 0;
        quotes.retain(|_| {
            q += 1;
            !dropped.contains(&(q - 1))
        });
    }
    quotes.extend(added);
}

#[cfg(test)]
mod tests {
    use super::*;

    fn small() -> ScenarioSpec {
        ScenarioSpec { entities: 12, years: 1, ..ScenarioSpec::demo(3) }
    }

    #[test]
    fn generation_is_deterministic() {
        let a = generate(&small());
        let b = generate(&small());
        assert_eq!(a, b);
        assert!(!a.quotes.is_empty() && !a.faults.is_empty());
    }

    #[test]
    fn quotes_stop_at_default_except_planted_after_default_rows() {
        let s = generate(&ScenarioSpec { entities: 60, years: 2, ..ScenarioSpec::demo(9) });
        for &(e, d, _) in &s.defaults {
            for q in s.quotes.iter().filter(|q| q.entity == e && q.date >= d) {
                let f = q.fault.map(|f| s.faults[f].kind);
                assert_eq!(f, Some("after_default"), "{q:?}");
            }
        }
    }
}
