//! Checks of the backtest statistics added for discrimination, censoring, correlated defaults
//! and obligor-level calibration against general-purpose libraries, driven by
//! tests/reference/backtest_scipy.py; the values are committed in
//! tests/reference/backtest_scipy.json with the library versions (scikit-learn 1.9.1,
//! statsmodels 0.15.0, scipy 1.17.1, numpy 2.4.6) and the function behind each value:
//! - AUC: `sklearn.metrics.roc_auc_score`; its DeLong variance (DeLong, DeLong and
//!   Clarke-Pearson, 1988) and the paired test from the structural components in numpy; the
//!   p-value of no power from `scipy.stats.mannwhitneyu` (asymptotic, no continuity correction);
//! - Kaplan-Meier survival and Greenwood standard error: statsmodels `SurvfuncRight`; the
//!   log-log interval (`lo` / `hi`) checked there against `quantile_ci` (its default
//!   transform);
//! - one-factor (Vasicek) count tails: `scipy.integrate.quad` over the factor of
//!   `scipy.stats.binom` tails, cross-checked there by Gauss-Hermite to 1e-13;
//! - Spiegelhalter's z and the Brier score: numpy sums, `scipy.stats.norm.sf`,
//!   `sklearn.metrics.brier_score_loss`;
//! - Poisson tails of the term-structure test: `scipy.stats.poisson.sf` and `.cdf`.
//!
//! Every value is compared to 1e-9 relative (1e-12 absolute near zero) unless a comment beside
//! the check says otherwise.

use hazardline::stats::{
    auc_delong, auc_paired, kaplan_meier, poisson_lower_tail, poisson_upper_tail, spiegelhalter, vasicek_lower_tail,
    vasicek_upper_tail,
};
use serde_json::Value;

const REL: f64 = 1e-9;
const ABS: f64 = 1e-12;

fn reference() -> Value {
    let path = concat!(env!("CARGO_MANIFEST_DIR"), "/tests/reference/backtest_scipy.json");
    serde_json::from_str(&std::fs::read_to_string(path).expect("reference file")).expect("valid JSON")
}

fn num(v: &Value) -> f64 {
    v.as_f64().unwrap_or_else(|| panic!("not a number: {v}"))
}

fn nums(v: &Value) -> Vec<f64> {
    v.as_array().unwrap_or_else(|| panic!("not an array: {v}")).iter().map(num).collect()
}

fn flags(v: &Value) -> Vec<bool> {
    v.as_array()
        .unwrap_or_else(|| panic!("not an array: {v}"))
        .iter()
        .map(|x| x.as_u64().map(|k| k == 1).or(x.as_bool()).unwrap_or_else(|| panic!("not a 0/1 flag: {x}")))
        .collect()
}

/// Collects failures instead of stopping at the first, so one run shows the whole picture.
#[derive(Default)]
struct Checks {
    failures: Vec<String>,
    count: usize,
}

impl Checks {
    fn close(&mut self, what: String, got: f64, want: f64) {
        self.count += 1;
        let err = (got - want).abs();
        if !(err <= ABS || err <= REL * got.abs().max(want.abs())) {
            self.failures.push(format!("{what}: got {got:e}, want {want:e}"));
        }
    }
    fn done(self) {
        assert!(self.count > 0, "no reference value checked");
        assert!(
            self.failures.is_empty(),
            "{} of {} checks failed:\n{}",
            self.failures.len(),
            self.count,
            self.failures.join("\n")
        );
    }
}

#[test]
fn auc_and_delong_variance_against_scikit_learn() {
    let r = reference();
    let mut c = Checks::default();
    for case in r["auc"].as_array().unwrap() {
        let id = case["id"].as_str().unwrap_or("?");
        let a = auc_delong(&nums(&case["scores"]), &flags(&case["labels"])).unwrap();
        c.close(format!("auc {id}"), a.auc, num(&case["auc"]));
        c.close(format!("auc_var {id}"), a.variance, num(&case["auc_var"]));
        c.close(format!("auc_se {id}"), a.se(), num(&case["auc_se"]));
        let p = hazardline::stats::auc_no_power_p(&nums(&case["scores"]), &flags(&case["labels"])).unwrap();
        match case["p_no_power"].as_f64() {
            Some(want) => c.close(format!("p_no_power {id}"), p.unwrap_or(f64::NAN), want),
            None => assert_eq!(p, None, "{id}: every score tied"),
        }
    }
    c.done();
}

#[test]
fn paired_delong_test_against_numpy() {
    let r = reference();
    let mut c = Checks::default();
    for case in r["auc_paired"].as_array().unwrap() {
        let id = case["id"].as_str().unwrap_or("?");
        let p = auc_paired(&nums(&case["scores_a"]), &nums(&case["scores_b"]), &flags(&case["labels"])).unwrap();
        c.close(format!("auc_a {id}"), p.a.auc, num(&case["auc_a"]));
        c.close(format!("auc_b {id}"), p.b.auc, num(&case["auc_b"]));
        c.close(format!("var_a {id}"), p.a.variance, num(&case["var_a"]));
        c.close(format!("var_b {id}"), p.b.variance, num(&case["var_b"]));
        c.close(format!("cov {id}"), p.covariance, num(&case["cov_ab"]));
        c.close(format!("z {id}"), p.z.unwrap(), num(&case["z"]));
        c.close(format!("p {id}"), p.p_value.unwrap(), num(&case["p_value"]));
    }
    c.done();
}

#[test]
fn kaplan_meier_and_greenwood_against_statsmodels() {
    let r = reference();
    let mut c = Checks::default();
    for case in r["kaplan_meier"].as_array().unwrap() {
        let id = case["id"].as_str().unwrap_or("?");
        let level = num(&case["level"]);
        let km = kaplan_meier(&nums(&case["times"]), &flags(&case["events"])).unwrap();
        for at in case["at"].as_array().unwrap() {
            let t = num(&at["t"]);
            let (s, se) = km.at(t);
            c.close(format!("S({t}) {id}"), s, num(&at["survival"]));
            c.close(format!("se({t}) {id}"), se, num(&at["se"]));
            let i = km.interval(t, level).unwrap();
            c.close(format!("lo({t}) {id}"), i.lo, num(&at["lo"]));
            c.close(format!("hi({t}) {id}"), i.hi, num(&at["hi"]));
        }
    }
    c.done();
}

#[test]
fn one_factor_count_tails_against_scipy_quadrature() {
    let r = reference();
    let mut c = Checks::default();
    for case in r["vasicek"].as_array().unwrap() {
        let id = case["id"].as_str().unwrap_or("?");
        let (n, d) = (case["n"].as_u64().unwrap(), case["d"].as_u64().unwrap());
        let (pd, rho) = (num(&case["pd"]), num(&case["rho"]));
        c.close(format!("p_upper {id}"), vasicek_upper_tail(d, n, pd, rho).unwrap(), num(&case["p_upper"]));
        c.close(format!("p_lower {id}"), vasicek_lower_tail(d, n, pd, rho).unwrap(), num(&case["p_lower"]));
        if let Some(cdf) = case["cdf"].as_array() {
            for (k, want) in cdf.iter().enumerate() {
                c.close(format!("cdf[{k}] {id}"), vasicek_lower_tail(k as u64, n, pd, rho).unwrap(), num(want));
            }
        }
    }
    c.done();
}

#[test]
fn spiegelhalter_and_brier_against_scipy() {
    let r = reference();
    let mut c = Checks::default();
    for case in r["spiegelhalter"].as_array().unwrap() {
        let id = case["id"].as_str().unwrap_or("?");
        let s = spiegelhalter(&nums(&case["p"]), &flags(&case["y"])).unwrap();
        c.close(format!("brier {id}"), s.brier, num(&case["brier"]));
        c.close(format!("z {id}"), s.z.unwrap(), num(&case["z"]));
        c.close(format!("p {id}"), s.p_value.unwrap(), num(&case["p_value"]));
    }
    c.done();
}

#[test]
fn poisson_tails_against_scipy() {
    let r = reference();
    let mut c = Checks::default();
    for case in r["poisson"].as_array().unwrap() {
        let (k, mean) = (case["k"].as_u64().unwrap(), num(&case["mean"]));
        c.close(format!("P[X >= {k}; {mean}]"), poisson_upper_tail(k, mean).unwrap(), num(&case["upper"]));
        c.close(format!("P[X <= {k}; {mean}]"), poisson_lower_tail(k, mean).unwrap(), num(&case["lower"]));
    }
    c.done();
}

/// One-year migration counts against pandas: tests/reference/migration_pandas.py applies the
/// cohort-method rule with pandas.merge_asof and counts with pandas.crosstab (pandas 3.1.1) on
/// an invented universe it writes beside the counts; every cell must agree exactly.
#[test]
fn migration_counts_against_pandas_crosstab() {
    use hazardline::backtest::{migration_rows, EntityFacts, GradeSpell};
    use std::collections::BTreeMap;
    let path = concat!(env!("CARGO_MANIFEST_DIR"), "/tests/reference/migration_pandas.json");
    let r: Value = serde_json::from_str(&std::fs::read_to_string(path).expect("reference file")).unwrap();
    let date = |v: &Value| v.as_str().map(|s| chrono::NaiveDate::parse_from_str(s, "%Y-%m-%d").unwrap());
    let mut spells: BTreeMap<String, Vec<GradeSpell>> = BTreeMap::new();
    for s in r["spells"].as_array().unwrap() {
        spells
            .entry(s["entity"].as_str().unwrap().to_string())
            .or_default()
            .push(GradeSpell { from_date: date(&s["from_date"]).unwrap(), grade: s["grade"].as_u64().unwrap() as u32 });
    }
    let facts: Vec<EntityFacts> = r["entities"]
        .as_array()
        .unwrap()
        .iter()
        .map(|e| {
            let name = e["entity"].as_str().unwrap().to_string();
            EntityFacts {
                grades: spells.remove(&name).unwrap_or_default(),
                entity: name,
                default_date: date(&e["default_date"]),
                coverage_end: date(&e["coverage_end"]),
            }
        })
        .collect();
    let cohorts: Vec<chrono::NaiveDate> = r["cohort_dates"].as_array().unwrap().iter().filter_map(date).collect();
    let rows = migration_rows(&facts, &cohorts, date(&r["outcome_end"]).unwrap()).unwrap();
    let got: BTreeMap<(String, u32, String), u64> =
        rows.iter().map(|m| ((m.cohort.clone(), m.from_grade, m.to.clone()), m.count)).collect();
    let want: BTreeMap<(String, u32, String), u64> = r["counts"]
        .as_array()
        .unwrap()
        .iter()
        .map(|c| {
            (
                (
                    c["cohort"].as_str().unwrap().to_string(),
                    c["from_grade"].as_u64().unwrap() as u32,
                    c["to"].as_str().unwrap().to_string(),
                ),
                c["count"].as_u64().unwrap(),
            )
        })
        .collect();
    assert!(want.len() > 100, "the reference has {} cells", want.len());
    assert_eq!(got, want);
}
