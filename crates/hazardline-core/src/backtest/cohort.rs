//! Cohort membership and one observation per (cohort date, member, horizon).

use super::{BacktestError, BacktestSettings, Bucketing, CensoringPolicy, CurveSet, EntityFacts};
use crate::curves::year_time;
use chrono::{Datelike, Months, NaiveDate};

/// What happened to a member over (t, t + h].
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Outcome {
    /// Defaulted in (t, t + h], inside its coverage.
    Defaulted,
    /// Observed to t + h without a default.
    Survived,
    /// The entity left coverage before t + h. Whatever happened before it left (recorded in
    /// `event_date`), the binomial tests treat the member alike: excluded, or a survivor under
    /// [`CensoringPolicy::CountAsSurvivor`] (a default inside coverage then still counts).
    Censored,
    /// t + h lies after the study's outcome end: the (cohort, horizon) is not yet observable.
    /// Listed, never tested.
    Incomplete,
}
crate::text_form!(Outcome {
    Defaulted => "defaulted",
    Survived => "survived",
    Censored => "censored",
    Incomplete => "incomplete",
});

/// The bucket a member falls in.
#[derive(Debug, Clone, PartialEq, PartialOrd)]
pub enum Bucket {
    Grade(u32),
    Ungraded,
    /// Implied-PD band [lo, hi) (the last band includes 1).
    PdBand {
        index: usize,
        lo: f64,
        hi: f64,
    },
}

impl Bucket {
    /// The label written in the `bucket` column: "grade 3", "ungraded", "pd [0.001, 0.005)".
    pub fn label(&self) -> String {
        match self {
            Bucket::Grade(g) => format!("grade {g}"),
            Bucket::Ungraded => "ungraded".to_string(),
            Bucket::PdBand { lo, hi, .. } => format!("pd [{lo}, {hi})"),
        }
    }
}

/// One member of one cohort at one horizon.
#[derive(Debug, Clone, PartialEq)]
pub struct Observation {
    pub entity: String,
    /// Currency of the curve used.
    pub currency: String,
    pub cohort: NaiveDate,
    pub horizon_years: u32,
    pub grade: Option<u32>,
    pub bucket: Bucket,
    /// Date of the curve used (the latest within the look-back on or before the cohort date).
    pub curve_date: NaiveDate,
    /// 1 - S(h) from the member's curve (as of the curve's own date).
    pub implied_pd: f64,
    pub outcome: Outcome,
    /// The default date when a default was observed inside the member's window (for a
    /// censored member, before it left coverage; for an incomplete one, up to the outcome end).
    pub event_date: Option<NaiveDate>,
    /// Years from t to the event, the end of coverage, the outcome end or the horizon end,
    /// whichever is first.
    pub exposure_years: f64,
    /// Integrated hazard of the curve over the exposure window (the expected number of
    /// defaults of the member under the pricing curve). None only for a member cut at an
    /// outcome end after its curve was gone ([`Observation::cut_at`] on members built without
    /// one); the run builds members with its outcome end, so every row carries it.
    pub integrated_hazard: Option<f64>,
    /// Quoted par spread at the tenor of 12 h months on the curve date, if quoted.
    pub spread_bp: Option<f64>,
}

impl Observation {
    /// Whether this observation counts in n under the policy.
    pub fn counts(&self, policy: CensoringPolicy) -> bool {
        match self.outcome {
            Outcome::Defaulted | Outcome::Survived => true,
            Outcome::Censored => policy == CensoringPolicy::CountAsSurvivor,
            Outcome::Incomplete => false,
        }
    }
    /// Whether this observation counts as a default (among the counted).
    pub fn defaulted(&self) -> bool {
        self.outcome == Outcome::Defaulted || (self.outcome == Outcome::Censored && self.event_date.is_some())
    }
    /// Horizon end t + 12 h months.
    pub fn horizon_end(&self) -> Option<NaiveDate> {
        horizon_end(self.cohort, self.horizon_years).ok()
    }
    /// Cuts the member at the study's outcome end: a horizon ending after it makes the member
    /// incomplete, its window and event cut at that date.
    pub fn cut_at(&mut self, outcome_end: NaiveDate) {
        let Some(end) = self.horizon_end() else { return };
        if end <= outcome_end || self.outcome == Outcome::Incomplete {
            return;
        }
        self.outcome = Outcome::Incomplete;
        self.event_date = self.event_date.filter(|d| *d <= outcome_end);
        let window_end = self.event_date.unwrap_or(outcome_end);
        let cut = year_time(self.cohort, window_end).max(0.0);
        self.exposure_years = self.exposure_years.min(cut);
        self.integrated_hazard = None;
    }
    /// The cohort label of this observation: the cohort date's year.
    pub fn cohort_year(&self) -> String {
        self.cohort.year().to_string()
    }
}

/// Builds every observation of every cohort date and horizon, bucketed per the settings.
/// Settings are assumed checked ([`BacktestSettings::check`]).
pub fn build_observations(
    facts: &[EntityFacts],
    curves: &CurveSet,
    settings: &BacktestSettings,
) -> Result<Vec<Observation>, BacktestError> {
    let mut obs = member_observations(facts, curves, settings)?;
    bucket_observations(&mut obs, settings);
    Ok(obs)
}

/// The observations of every cohort date and horizon, cohort-major, then in the order of
/// `facts`, then of the horizons, with every bucket left `Ungraded`. Everything here depends on
/// one entity alone, so the members of disjoint entity sets can be built apart and
/// concatenated; [`bucket_observations`] then assigns buckets over the whole set (PD quantile
/// bands pool every member).
pub fn member_observations(
    facts: &[EntityFacts],
    curves: &CurveSet,
    settings: &BacktestSettings,
) -> Result<Vec<Observation>, BacktestError> {
    let mut obs = Vec::new();
    for &t in &settings.cohort_dates {
        for f in facts {
            if !is_member(f, t) {
                continue;
            }
            let Some(dc) = curves.latest_within(&f.entity, t, settings.lookback_days) else { continue };
            for h in settings.member_horizons() {
                let end = horizon_end(t, h)?;
                let hy = year_time(t, end);
                let (outcome, event_date, window_end) = outcome_over(f, t, end);
                let exposure = year_time(t, window_end).max(0.0);
                let mut o = Observation {
                    entity: f.entity.clone(),
                    currency: dc.currency.clone(),
                    cohort: t,
                    horizon_years: h,
                    grade: grade_at(f, t),
                    bucket: Bucket::Ungraded,
                    curve_date: dc.date,
                    implied_pd: -(-dc.curve.integrated_hazard(hy)).exp_m1(),
                    outcome,
                    event_date,
                    exposure_years: exposure,
                    integrated_hazard: Some(dc.curve.integrated_hazard(exposure)),
                    spread_bp: dc.spreads.iter().find(|s| s.tenor_months == 12 * h).map(|s| s.spread_bp),
                };
                if let Some(e) = settings.outcome_end {
                    o.cut_at(e);
                    if o.outcome == Outcome::Incomplete {
                        // The curve is at hand: the cut window keeps its exact hazard.
                        o.integrated_hazard = Some(dc.curve.integrated_hazard(o.exposure_years));
                    }
                }
                obs.push(o);
            }
        }
    }
    Ok(obs)
}

/// Assigns each observation its bucket per the settings; PD bands use the implied PD at the
/// shortest horizon of the same (cohort, entity).
pub fn bucket_observations(obs: &mut [Observation], settings: &BacktestSettings) {
    let shortest = *settings.horizons_years.iter().min().unwrap_or(&1);
    let band_pd: Vec<((NaiveDate, String), f64)> = obs
        .iter()
        .filter(|o| o.horizon_years == shortest)
        .map(|o| ((o.cohort, o.entity.clone()), o.implied_pd))
        .collect();
    assign_buckets(obs, &band_pd, &settings.bucketing);
}

/// Alive at t (no default on or before t) and in coverage at t.
fn is_member(f: &EntityFacts, t: NaiveDate) -> bool {
    f.default_date.is_none_or(|d| d > t) && f.coverage_end.is_none_or(|c| c >= t)
}

/// t + 12 h calendar months (month-end clipped, as chrono does).
pub(crate) fn horizon_end(t: NaiveDate, h: u32) -> Result<NaiveDate, BacktestError> {
    t.checked_add_months(Months::new(12 * h)).ok_or(BacktestError::DateOverflow { date: t, years: h })
}

/// The outcome over (t, end] before any outcome end, the default observed in the window, and
/// the date the exposure window closes. Leaving coverage before `end` censors the member
/// whether or not it defaulted first (survivors and defaulters alike); a default inside
/// coverage is kept as its event.
fn outcome_over(f: &EntityFacts, t: NaiveDate, end: NaiveDate) -> (Outcome, Option<NaiveDate>, NaiveDate) {
    let covered_to = f.coverage_end.map_or(end, |c| c.min(end));
    let event = f.default_date.filter(|d| *d > t && *d <= covered_to);
    let window_end = event.unwrap_or(covered_to);
    match f.coverage_end {
        Some(c) if c < end => (Outcome::Censored, event, window_end),
        _ if event.is_some() => (Outcome::Defaulted, event, window_end),
        _ => (Outcome::Survived, None, window_end),
    }
}

/// The grade in force at t: the spell with the latest from_date <= t.
fn grade_at(f: &EntityFacts, t: NaiveDate) -> Option<u32> {
    f.grades.iter().filter(|g| g.from_date <= t).max_by_key(|g| g.from_date).map(|g| g.grade)
}

fn assign_buckets(obs: &mut [Observation], band_pd: &[((NaiveDate, String), f64)], bucketing: &Bucketing) {
    let edges = match bucketing {
        Bucketing::Grades => {
            for o in obs.iter_mut() {
                o.bucket = o.grade.map_or(Bucket::Ungraded, Bucket::Grade);
            }
            return;
        }
        Bucketing::PdEdges(e) => e.clone(),
        Bucketing::PdQuantiles(k) => quantile_edges(band_pd.iter().map(|(_, p)| *p).collect(), *k),
    };
    let lookup: std::collections::HashMap<(NaiveDate, &str), f64> =
        band_pd.iter().map(|((t, e), p)| ((*t, e.as_str()), *p)).collect();
    for o in obs.iter_mut() {
        let p = lookup.get(&(o.cohort, o.entity.as_str())).copied().unwrap_or(o.implied_pd);
        o.bucket = pd_band(p, &edges);
    }
}

/// The band of p among interior edges: [0, e1), [e1, e2), ..., [ek, 1].
fn pd_band(p: f64, edges: &[f64]) -> Bucket {
    let index = edges.partition_point(|&e| e <= p);
    let lo = if index == 0 { 0.0 } else { edges[index - 1] };
    let hi = edges.get(index).copied().unwrap_or(1.0);
    Bucket::PdBand { index, lo, hi }
}

/// Interior edges at the i/k empirical quantiles (lower order statistic), deduplicated so that
/// tied PDs never produce an empty band.
fn quantile_edges(mut pds: Vec<f64>, k: usize) -> Vec<f64> {
    pds.retain(|p| p.is_finite());
    pds.sort_by(f64::total_cmp);
    if pds.is_empty() {
        return Vec::new();
    }
    let mut edges: Vec<f64> = (1..k).map(|i| pds[(i * pds.len() / k).min(pds.len() - 1)]).collect();
    edges.dedup();
    edges.retain(|&e| e > pds[0]);
    edges
}
