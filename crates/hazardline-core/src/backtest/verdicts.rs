//! One verdict per test family, from the base recovery's rows: a family passes only when none
//! of its tests rejects at the yellow threshold (the configured significance), needs attention
//! when some reject there and none at the red threshold, and fails otherwise. Over-prediction
//! (the lower tails) is the risk premium the review measures: it is reported with its own
//! status, never folded into a pass.

use super::{BacktestOutput, BacktestSettings};
use crate::backtest::discrimination::Score;

/// A family's status.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord)]
pub enum Status {
    Pass,
    Attention,
    Fail,
    /// No test of the family could be run.
    NotTested,
}
crate::text_form!(Status { Pass => "pass", Attention => "attention", Fail => "fail", NotTested => "not tested" });

/// One row of `backtest_verdicts`.
#[derive(Debug, Clone, PartialEq)]
pub struct VerdictRow {
    pub family: &'static str,
    /// What a rejection means in this family.
    pub reading: &'static str,
    pub tests: u64,
    /// Tests that count against the model at the yellow threshold (p below it), and at the
    /// red one.
    pub against: u64,
    pub strongly_against: u64,
    /// The smallest p-value of the family (for discrimination: the largest p-value of "no
    /// power", the weakest evidence of ranking).
    pub extreme_p: Option<f64>,
    pub status: Status,
    /// For the two-sided families, which way the rejecting tests lean: how many have fewer
    /// defaults than forecast (over-prediction, the premium) and how many more.
    pub note: Option<String>,
    /// The same as counts: rejecting tests with fewer defaults than forecast, and with more.
    pub over_predicting: Option<u64>,
    pub under_predicting: Option<u64>,
}

impl VerdictRow {
    /// Whether every rejection of the family says the PD is too high (the lower-tail families,
    /// or a two-sided family whose rejections all over-predict): the premium, not a shortfall.
    pub fn only_over_prediction(&self) -> bool {
        self.family.ends_with("lower tail") || (self.against > 0 && self.under_predicting == Some(0))
    }
}

fn status(tests: usize, against: u64, strongly: u64) -> Status {
    if tests == 0 {
        Status::NotTested
    } else if strongly > 0 {
        Status::Fail
    } else if against > 0 {
        Status::Attention
    } else {
        Status::Pass
    }
}

fn verdict(family: &'static str, reading: &'static str, ps: Vec<f64>, s: &BacktestSettings) -> VerdictRow {
    let against = ps.iter().filter(|p| **p < s.zones.yellow).count() as u64;
    let strongly_against = ps.iter().filter(|p| **p < s.zones.red).count() as u64;
    VerdictRow {
        family,
        reading,
        tests: ps.len() as u64,
        against,
        strongly_against,
        extreme_p: ps.iter().copied().reduce(f64::min),
        status: status(ps.len(), against, strongly_against),
        note: None,
        over_predicting: None,
        under_predicting: None,
    }
}

/// The direction of a two-sided family from (p-value, defaults minus forecast) per test: the
/// note and the counts of rejecting tests with fewer and with more defaults than forecast.
fn direction(tests: &[(f64, f64)], s: &BacktestSettings) -> (Option<String>, Option<u64>, Option<u64>) {
    let rejecting: Vec<f64> = tests.iter().filter(|(p, _)| *p < s.zones.yellow).map(|t| t.1).collect();
    if rejecting.is_empty() {
        return (None, Some(0), Some(0));
    }
    let over = rejecting.iter().filter(|x| **x < 0.0).count();
    let under = rejecting.len() - over;
    let note = format!(
        "of the {} rejecting tests, {over} have fewer defaults than forecast (over-prediction: the premium) and {under} more (under-prediction)",
        rejecting.len()
    );
    (Some(note), Some(over as u64), Some(under as u64))
}

/// Discrimination counts against the model when the pooled AUC is not shown above 1/2 (p of
/// "no power" at or above yellow), strongly when the ranking is significantly reversed.
fn discrimination(out: &BacktestOutput, s: &BacktestSettings) -> VerdictRow {
    let ps: Vec<f64> = out
        .discrimination
        .iter()
        .filter(|r| r.cohort == "all" && r.score == Score::ImpliedPd)
        .filter_map(|r| r.p_no_power)
        .collect();
    let against = ps.iter().filter(|p| **p >= s.zones.yellow).count() as u64;
    let strongly_against = ps.iter().filter(|p| 1.0 - **p < s.zones.red).count() as u64;
    VerdictRow {
        family: "discrimination (implied PD, pooled)",
        reading: "the implied PD is not shown to rank defaulters above survivors (AUC not above 1/2)",
        tests: ps.len() as u64,
        against,
        strongly_against,
        extreme_p: ps.iter().copied().reduce(f64::max),
        status: status(ps.len(), against, strongly_against),
        note: None,
        over_predicting: None,
        under_predicting: None,
    }
}

/// The verdicts of one backtest output (normally the base recovery's).
pub fn verdict_rows(out: &BacktestOutput, s: &BacktestSettings) -> Vec<VerdictRow> {
    let b = &out.buckets;
    // Defaults minus forecast per (cohort, horizon), for the direction of Hosmer-Lemeshow.
    let excess = |cohort: &str, h: u32| -> f64 {
        b.iter()
            .filter(|r| r.cohort == cohort && r.horizon_years == h)
            .filter_map(|r| r.implied_pd.map(|p| r.defaults as f64 - r.n as f64 * p))
            .sum()
    };
    let hl: Vec<(f64, f64)> =
        out.hosmer_lemeshow.iter().filter_map(|r| r.p_value.map(|p| (p, excess(&r.cohort, r.horizon_years)))).collect();
    // Spiegelhalter's z weighs each member by 1 - 2p, so its sign is not that of d - sum p
    // once forecasts pass 1/2: the direction is read from the defaults against the forecast.
    let sp: Vec<(f64, f64)> = out
        .hosmer_lemeshow
        .iter()
        .filter_map(|r| Some((r.spiegelhalter_p?, excess(&r.cohort, r.horizon_years))))
        .collect();
    let mut rows = vec![
        verdict(
            "bucket binomial, upper tail",
            "more defaults than the implied PD allows for independent defaults: PD too low",
            b.iter().filter_map(|r| r.p_binom_upper).collect(),
            s,
        ),
        verdict(
            "one-factor (Vasicek), upper tail",
            "more defaults than the implied PD allows with correlated defaults: PD too low",
            b.iter().filter_map(|r| r.p_vasicek_upper).collect(),
            s,
        ),
        verdict(
            "Hosmer-Lemeshow",
            "bucket forecasts and outcomes disagree somewhere, in either direction",
            out.hosmer_lemeshow.iter().filter_map(|r| r.p_value).collect(),
            s,
        ),
        verdict(
            "Spiegelhalter",
            "obligor-level forecasts miscalibrated, in either direction",
            out.hosmer_lemeshow.iter().filter_map(|r| r.spiegelhalter_p).collect(),
            s,
        ),
        discrimination(out, s),
        verdict(
            "term structure (all cohorts, observed against expected), upper tail",
            "more defaults over the windows observed in every cohort, complete or not, than the implied curves expect: PD too low (overlapping cohorts: descriptive)",
            out.term_structure.iter().filter_map(|r| r.p_upper).collect(),
            s,
        ),
        verdict(
            "bucket binomial, lower tail",
            "fewer defaults than the implied PD predicts: the pricing-measure PD exceeds the realised rate (the risk premium), not a model failure by itself",
            b.iter().filter_map(|r| r.p_binom_lower).collect(),
            s,
        ),
        verdict(
            "one-factor (Vasicek), lower tail",
            "fewer defaults than the implied PD predicts even with correlated defaults: the risk premium",
            b.iter().filter_map(|r| r.p_vasicek_lower).collect(),
            s,
        ),
        verdict(
            "term structure (all cohorts, observed against expected), lower tail",
            "fewer defaults over the observed windows than the implied curves expect: the risk premium over the term structure (overlapping cohorts: descriptive)",
            out.term_structure.iter().filter_map(|r| r.p_lower).collect(),
            s,
        ),
    ];
    for r in rows.iter_mut() {
        let tests = match r.family {
            "Hosmer-Lemeshow" => &hl,
            "Spiegelhalter" => &sp,
            _ => continue,
        };
        (r.note, r.over_predicting, r.under_predicting) = direction(tests, s);
    }
    rows
}
