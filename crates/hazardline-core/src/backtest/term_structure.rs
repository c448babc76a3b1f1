//! The default term structure over every cohort, complete or not: per bucket and horizon, the
//! product-limit (Kaplan-Meier) cumulative default rate of all members of all cohorts, each
//! observed from its cohort date until its default, the end of its coverage, the outcome end
//! or its horizon end, whichever comes first. A cohort too recent for the bucket tests (its
//! horizon ends after the outcome end) still contributes the years it was observed, so the
//! multi-year rates use all the evidence there is, without the bias of dropping or keeping
//! members by their outcome.
//!
//! The test of each row is the one-sample log-rank test (Breslow, 1975): under the hypothesis
//! that each member's default intensity is its implied hazard, the number of defaults observed
//! in the members' windows has expectation E = the sum of the implied hazard integrated over
//! each window, and is compared with Poisson(E) exactly: P[O >= o] small says the PD is too low
//! (more defaults than the curves expect over the windows actually observed), P[O <= o] small
//! that it is too high (the premium). O / E is the realised-to-implied ratio of the windows.
//! Variance under the hypothesis, not from the data: the test holds with no default at all.
//!
//! Rows of `backtest_term_structure`; [`survival_points`] gives the whole curve for a figure.

use super::buckets::bucket_order;
use super::cohort::Observation;
use super::{BacktestError, BacktestSettings};
use crate::stats::{self, Zone};
use std::collections::BTreeMap;

/// One row of `backtest_term_structure`.
#[derive(Debug, Clone, PartialEq)]
pub struct TermStructureRow {
    /// A bucket label, or "all" for every member.
    pub bucket: String,
    pub horizon_years: u32,
    pub level: f64,
    /// Members of every cohort at this horizon (incomplete ones included).
    pub members: u64,
    /// Defaults observed inside the members' windows.
    pub defaults: u64,
    /// Members still observed, without a default, at the horizon end.
    pub at_risk_at_horizon: u64,
    /// 1 - S(h), Kaplan-Meier.
    pub realised_rate: Option<f64>,
    /// The Greenwood (log-transform) interval of the rate.
    pub rate_lo: Option<f64>,
    pub rate_hi: Option<f64>,
    /// Mean implied PD of the members over the horizon.
    pub implied_pd: Option<f64>,
    /// Expected defaults over the observed windows: the sum of the members' integrated implied
    /// hazards.
    pub expected_defaults: Option<f64>,
    /// defaults / expected_defaults.
    pub observed_to_expected: Option<f64>,
    /// P[O >= defaults], O ~ Poisson(expected): small when the PD is too low.
    pub p_upper: Option<f64>,
    /// P[O <= defaults]: small when the PD is too high (the premium).
    pub p_lower: Option<f64>,
    /// Zone of p_upper.
    pub zone: Option<Zone>,
    pub note: Option<String>,
}

/// A member's Kaplan-Meier time (years from its cohort date, on Act/365F) and whether its
/// window ended in a default: a default observed before coverage or the outcome end ended is an
/// event whatever the member's outcome label.
pub fn km_subject(o: &Observation) -> (f64, bool) {
    (o.exposure_years.max(0.0), o.event_date.is_some())
}

/// The horizon in Act/365F years at which a group is read: the longest horizon end among its
/// members (a horizon over a 29 February is a day longer), so that no member's last day is cut.
fn read_at(members: &[&Observation]) -> f64 {
    members.iter().filter_map(|o| o.horizon_end().map(|e| crate::curves::year_time(o.cohort, e))).fold(0.0, f64::max)
}

/// Rows per (bucket and "all", horizon), over every cohort.
pub fn term_structure_rows(
    obs: &[Observation],
    settings: &BacktestSettings,
) -> Result<Vec<TermStructureRow>, BacktestError> {
    type Key = (u32, (u8, u64), String);
    let mut groups: BTreeMap<Key, Vec<&Observation>> = BTreeMap::new();
    for o in obs {
        groups.entry((o.horizon_years, bucket_order(&o.bucket), o.bucket.label())).or_default().push(o);
        groups.entry((o.horizon_years, (u8::MAX, 0), "all".to_string())).or_default().push(o);
    }
    let mut out = Vec::with_capacity(groups.len());
    for ((h, _, bucket), members) in groups {
        let (times, events): (Vec<f64>, Vec<bool>) = members.iter().map(|o| km_subject(o)).unzip();
        let km = stats::kaplan_meier(&times, &events)?;
        let t = read_at(&members);
        let (s, _) = km.at(t);
        let n = members.len() as u64;
        let pd = members.iter().map(|o| o.implied_pd).sum::<f64>() / n as f64;
        let pd = pd.clamp(0.0, 1.0);
        let defaults = events.iter().filter(|e| **e).count() as u64;
        // Observed to its own horizon end without a default (a horizon over a 29 February is a
        // day longer than the others).
        let at_risk_at_horizon = members
            .iter()
            .filter(|o| {
                o.event_date.is_none()
                    && o.horizon_end().is_some_and(|e| o.exposure_years >= crate::curves::year_time(o.cohort, e))
            })
            .count() as u64;
        let expected: Option<f64> = members.iter().map(|o| o.integrated_hazard).sum();
        let mut row = TermStructureRow {
            bucket,
            horizon_years: h,
            level: settings.level,
            members: n,
            defaults,
            at_risk_at_horizon,
            realised_rate: None,
            rate_lo: None,
            rate_hi: None,
            implied_pd: Some(pd),
            expected_defaults: expected,
            observed_to_expected: expected.filter(|e| *e > 0.0).map(|e| defaults as f64 / e),
            p_upper: None,
            p_lower: None,
            zone: None,
            note: None,
        };
        match expected {
            Some(e) => {
                let p_upper = stats::poisson_upper_tail(defaults, e)?;
                row.p_upper = Some(p_upper);
                row.p_lower = Some(stats::poisson_lower_tail(defaults, e)?);
                row.zone = Some(stats::traffic_light(p_upper, &settings.zones)?);
            }
            None => row.note = Some("a member's window was cut without its curve: no expected count".into()),
        }
        if at_risk_at_horizon == 0 && km.steps.last().is_none_or(|st| st.survival > 0.0) {
            let note = "no member is observed to the horizon end: the rate there is not estimable";
            row.note = Some(row.note.map_or(note.to_string(), |n| format!("{n}; {note}")));
        } else {
            row.realised_rate = Some(1.0 - s);
            // Without a default Greenwood's variance is 0 and the interval would be the point:
            // left empty rather than shown as certain.
            if defaults > 0 {
                let i = km.interval(t, settings.level)?;
                row.rate_lo = Some(1.0 - i.hi);
                row.rate_hi = Some(1.0 - i.lo);
            }
        }
        out.push(row);
    }
    Ok(out)
}

/// The Kaplan-Meier cumulative default rate 1 - S(t) of `members` as a step polyline from
/// (0, 0), for a figure: one point before and one after each event time.
pub fn survival_points(members: &[&Observation]) -> Result<Vec<(f64, f64)>, BacktestError> {
    let (times, events): (Vec<f64>, Vec<bool>) = members.iter().map(|o| km_subject(o)).unzip();
    let km = stats::kaplan_meier(&times, &events)?;
    let end = read_at(members);
    let mut pts = vec![(0.0, 0.0)];
    let mut last = 0.0;
    for st in &km.steps {
        pts.push((st.time, last));
        last = 1.0 - st.survival;
        pts.push((st.time, last));
    }
    pts.push((end.max(pts.last().map_or(0.0, |p| p.0)), last));
    Ok(pts)
}
