//! Every threshold and choice of the stability stage in one struct, with documented defaults,
//! so the pipeline file can set them and the report can print them in its method notes.

use super::cusum::{CusumLevel, CusumScope, CusumTarget};
use super::period::ReviewPeriod;
use super::psi::PsiEdges;
use super::StabilityError;

/// When a daily move counts as large, for the share of large-move days.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum MoveThreshold {
    /// |x_t - x_prev| > r * |x_prev|: r is a fraction of the previous value (0.10 = 10%).
    Relative(f64),
    /// |x_t - x_prev| > a, in the series' own units (a decimal PD, a hazard per year, ...).
    Absolute(f64),
}

impl MoveThreshold {
    /// Whether the move from `previous` to `value` exceeds the threshold (strictly).
    pub fn exceeded(self, previous: f64, value: f64) -> bool {
        let step = (value - previous).abs();
        match self {
            MoveThreshold::Relative(r) => step > r * previous.abs(),
            MoveThreshold::Absolute(a) => step > a,
        }
    }

    /// The threshold number, for flag rows.
    pub fn value(self) -> f64 {
        match self {
            MoveThreshold::Relative(v) | MoveThreshold::Absolute(v) => v,
        }
    }

    /// Text for method notes, e.g. `relative 0.1`.
    pub fn describe(self) -> String {
        match self {
            MoveThreshold::Relative(v) => format!("relative {v}"),
            MoveThreshold::Absolute(v) => format!("absolute {v}"),
        }
    }
}

/// The stability stage's settings. [`Default`] gives the documented defaults; every threshold
/// is a rule of thumb (common practice, no single source) unless its field says otherwise.
#[derive(Debug, Clone, PartialEq)]
pub struct StabilitySettings {
    /// Review period length. Default: calendar quarter.
    pub period: ReviewPeriod,
    /// Largest calendar-day gap between two consecutive observations of an entity that still
    /// counts as one daily move. Default 5 (a weekend plus a holiday). A longer gap breaks the
    /// chain: the step across it is not a daily move and enters no move statistic.
    pub max_gap_days: i64,
    /// Large-move threshold for series not listed in `move_thresholds`. Default relative 0.10.
    pub default_move_threshold: MoveThreshold,
    /// Large-move thresholds by exact series name. Default: none.
    pub move_thresholds: Vec<(String, MoveThreshold)>,
    /// Flag when the share of an entity's moves over the threshold exceeds this. Default 0.20
    /// (calibrated: at most 5% of entity-periods flagged on a universe without instabilities;
    /// see the flag-rates measurement).
    pub large_move_share_max: f64,
    /// Flag when an entity's coefficient of variation in a period exceeds this. Default 0.25.
    pub cv_max: f64,
    /// Flag when the relative period-on-period change of the mean or of the median exceeds
    /// this in absolute value. Default 0.75 (a 75% rise or fall).
    pub change_max: f64,
    /// Flag when the parameter's mean absolute relative daily move is more than this multiple
    /// of the spreads' mean absolute relative daily move. Default 5.0.
    pub market_ratio_max: f64,
    /// ... and the parameter's mean absolute relative daily move is at least this (so flat
    /// parameters on flat spreads are not flagged). Default 0.02 (2% a day).
    pub param_move_min: f64,
    /// Floor on the spreads' mean absolute relative daily move in the ratio's denominator, so
    /// the ratio stays finite when spreads did not move at all. Default 1e-4 (0.01% a day).
    pub market_move_floor: f64,
    /// Flag when an entity's calibration failures in a period exceed this. Default 0.
    pub failures_max: u64,
    /// Flag when an entity's infeasible calibrations in a period exceed this. Default 0.
    pub infeasible_max: u64,
    /// Series whose cross-sectional distribution gets a PSI (implied-PD series). Default `pd_1y`.
    pub psi_series: Vec<String>,
    /// PSI bucket edges. Default: deciles of the earlier period.
    pub psi_edges: PsiEdges,
    /// Share put in place of an empty bucket's zero share (either period) before the PSI term.
    /// Default 1e-4. Shares are not renormalised afterwards.
    pub psi_epsilon: f64,
    /// Fewest entities in each of the two periods for a PSI. Default 10.
    pub psi_min_entities: usize,
    /// Fewest entities behind a universe row for its period-on-period change rules to flag.
    /// Default 10: the mean or median of two or three names moves with any one of them, so a
    /// change there says nothing about the universe.
    pub universe_min_entities: usize,
    /// PSI over this is an amber flag. Default 0.10 (common practice, no single source).
    pub psi_amber: f64,
    /// PSI over this is a red flag. Default 0.25 (common practice, no single source).
    pub psi_red: f64,
    /// Series the CUSUM test runs on (empty: every series). Default: the CIR parameters
    /// kappa, theta and sigma, which the model holds constant, so a level shift is a break.
    /// Market-driven series (implied PD, hazards, lambda0) are persistent, close to a random
    /// walk over a quarter: the constant-mean test on their levels would reject for nearly
    /// every name, which says nothing about the model.
    pub cusum_series: Vec<String>,
    /// What the break test runs on. Default: auto, levels or changes by the Dickey-Fuller test
    /// (see [`super::cusum`] for why).
    pub cusum_target: CusumTarget,
    /// The window of one CUSUM test. Default: each review period.
    pub cusum_scope: CusumScope,
    /// Significance level of the break test: a p-value below it is an amber flag, below 1%
    /// red. Default 5% (Kolmogorov critical value 1.3581).
    pub cusum_level: CusumLevel,
    /// Fewest observations in a window for a CUSUM test. Default 20.
    pub cusum_min_obs: usize,
    /// A curve of an exact fit (the bootstrap, and any method not in `residual_flag_bp`)
    /// reprices when it converged and every |residual| is at most this (bp). Default 1e-6.
    pub reprice_tolerance_bp: f64,
    /// Repricing tolerance and residual flag threshold (bp) by calibration method; methods not
    /// listed use `reprice_tolerance_bp`. Default: `cir` 10 bp, `bond_fit` 10 bp (least-squares
    /// fits are not exact, so an exact-fit tolerance would call every such curve a misfit; the
    /// bootstrap is exact).
    pub residual_flag_bp: Vec<(String, f64)>,
    /// How many of the largest absolute residuals to list. Default 20.
    pub worst_n: usize,
}

impl Default for StabilitySettings {
    fn default() -> Self {
        StabilitySettings {
            period: ReviewPeriod::Quarter,
            max_gap_days: 5,
            default_move_threshold: MoveThreshold::Relative(0.10),
            move_thresholds: Vec::new(),
            large_move_share_max: 0.20,
            cv_max: 0.25,
            change_max: 0.75,
            market_ratio_max: 5.0,
            param_move_min: 0.02,
            market_move_floor: 1e-4,
            failures_max: 0,
            infeasible_max: 0,
            psi_series: vec!["pd_1y".to_string()],
            psi_edges: PsiEdges::EarlierDeciles,
            psi_epsilon: 1e-4,
            psi_min_entities: 10,
            universe_min_entities: 10,
            psi_amber: 0.10,
            psi_red: 0.25,
            cusum_series: vec!["cir_kappa".to_string(), "cir_theta".to_string(), "cir_sigma".to_string()],
            cusum_target: CusumTarget::Auto,
            cusum_scope: CusumScope::Period,
            cusum_level: CusumLevel::Five,
            cusum_min_obs: 20,
            reprice_tolerance_bp: 1e-6,
            residual_flag_bp: vec![("cir".to_string(), 10.0), ("bond_fit".to_string(), 10.0)],
            worst_n: 20,
        }
    }
}

/// The names of the series the review builds whatever the data (see the design notes), beside
/// `hazard_node_<tenor>` for each tenor quoted ([`is_series_name`]).
pub const FIXED_SERIES: [&str; 6] = ["pd_1y", "hazard_5y", "cir_kappa", "cir_theta", "cir_sigma", "cir_lambda0"];

/// Whether `name` can name a series: one of [`FIXED_SERIES`] or `hazard_node_<tenor>` with a
/// tenor that parses (`hazard_node_5Y`). Settings that list series are checked with it, so a
/// typo stops the run instead of silently switching a test off.
pub fn is_series_name(name: &str) -> bool {
    FIXED_SERIES.contains(&name)
        || name.strip_prefix("hazard_node_").is_some_and(|t| t.parse::<crate::time::Tenor>().is_ok())
}

impl StabilitySettings {
    /// The large-move threshold of `series`.
    pub fn move_threshold(&self, series: &str) -> MoveThreshold {
        self.move_thresholds.iter().find(|(s, _)| s == series).map_or(self.default_move_threshold, |(_, t)| *t)
    }

    /// The residual flag threshold (bp) of calibration `method`.
    pub fn residual_threshold_bp(&self, method: &str) -> f64 {
        self.residual_flag_bp.iter().find(|(m, _)| m == method).map_or(self.reprice_tolerance_bp, |(_, t)| *t)
    }

    /// Every setting as (name, value) text pairs, in a fixed order, for the method notes.
    pub fn pairs(&self) -> Vec<(String, String)> {
        let mut out: Vec<(String, String)> = vec![
            ("period".into(), self.period.as_str().into()),
            ("max_gap_days".into(), self.max_gap_days.to_string()),
            ("default_move_threshold".into(), self.default_move_threshold.describe()),
        ];
        out.extend(self.move_thresholds.iter().map(|(s, t)| (format!("move_threshold[{s}]"), t.describe())));
        let numbers: [(&str, f64); 8] = [
            ("large_move_share_max", self.large_move_share_max),
            ("cv_max", self.cv_max),
            ("change_max", self.change_max),
            ("market_ratio_max", self.market_ratio_max),
            ("param_move_min", self.param_move_min),
            ("market_move_floor", self.market_move_floor),
            ("failures_max", self.failures_max as f64),
            ("infeasible_max", self.infeasible_max as f64),
        ];
        out.extend(numbers.iter().map(|(n, v)| (n.to_string(), v.to_string())));
        out.push(("psi_series".into(), self.psi_series.join(",")));
        out.push(("psi_edges".into(), self.psi_edges.describe()));
        for (n, v) in [("psi_epsilon", self.psi_epsilon), ("psi_amber", self.psi_amber), ("psi_red", self.psi_red)] {
            out.push((n.into(), v.to_string()));
        }
        out.push(("psi_min_entities".into(), self.psi_min_entities.to_string()));
        out.push(("universe_min_entities".into(), self.universe_min_entities.to_string()));
        out.push((
            "cusum_test".into(),
            match self.cusum_target {
                CusumTarget::Auto => "OLS-residual CUSUM with the Newey-West long-run variance (Bartlett, Andrews AR(1) bandwidth), Kolmogorov p-value; daily changes instead of levels where the augmented Dickey-Fuller test at 5% keeps a unit root and the changes' lag-1 autocorrelation is above -0.25",
                CusumTarget::Levels => "OLS-residual CUSUM with the Newey-West long-run variance (Bartlett, Andrews AR(1) bandwidth), Kolmogorov p-value, on the levels",
                CusumTarget::DailyChanges => "OLS-residual CUSUM with the Newey-West long-run variance (Bartlett, Andrews AR(1) bandwidth), Kolmogorov p-value, on the daily changes",
            }
            .into(),
        ));
        out.push((
            "cusum_series".into(),
            if self.cusum_series.is_empty() { "all".into() } else { self.cusum_series.join(",") },
        ));
        out.push(("cusum_target".into(), self.cusum_target.as_str().into()));
        out.push(("cusum_scope".into(), self.cusum_scope.as_str().into()));
        out.push((
            "cusum_level".into(),
            format!("{} (critical value {:.4})", self.cusum_level.as_str(), self.cusum_level.critical_value()),
        ));
        out.push(("cusum_min_obs".into(), self.cusum_min_obs.to_string()));
        out.push(("reprice_tolerance_bp".into(), self.reprice_tolerance_bp.to_string()));
        out.extend(self.residual_flag_bp.iter().map(|(m, v)| (format!("residual_flag_bp[{m}]"), v.to_string())));
        out.push(("worst_n".into(), self.worst_n.to_string()));
        out
    }

    /// Checks every number (finite, non-negative, ordered where it must be).
    pub fn check(&self) -> Result<(), StabilityError> {
        let bad = |name: &str, value: f64| StabilityError::Setting {
            name: name.to_string(),
            value: value.to_string(),
            expected: "a finite number >= 0",
        };
        let numbers = [
            ("large_move_share_max", self.large_move_share_max),
            ("cv_max", self.cv_max),
            ("change_max", self.change_max),
            ("market_ratio_max", self.market_ratio_max),
            ("param_move_min", self.param_move_min),
            ("market_move_floor", self.market_move_floor),
            ("psi_amber", self.psi_amber),
            ("psi_red", self.psi_red),
            ("reprice_tolerance_bp", self.reprice_tolerance_bp),
            ("default_move_threshold", self.default_move_threshold.value()),
        ];
        let listed = self
            .move_thresholds
            .iter()
            .map(|(_, t)| ("move_threshold", t.value()))
            .chain(self.residual_flag_bp.iter().map(|(_, v)| ("residual_flag_bp", *v)));
        if let Some((n, v)) = numbers.into_iter().chain(listed).find(|(_, v)| !(v.is_finite() && *v >= 0.0)) {
            return Err(bad(n, v));
        }
        if !(self.psi_epsilon.is_finite() && self.psi_epsilon > 0.0 && self.psi_epsilon < 1.0) {
            return Err(StabilityError::Setting {
                name: "psi_epsilon".into(),
                value: self.psi_epsilon.to_string(),
                expected: "a number in (0, 1)",
            });
        }
        if self.psi_red < self.psi_amber {
            return Err(StabilityError::Setting {
                name: "psi_red".into(),
                value: self.psi_red.to_string(),
                expected: "at least psi_amber",
            });
        }
        if self.max_gap_days < 1 {
            return Err(StabilityError::Setting {
                name: "max_gap_days".into(),
                value: self.max_gap_days.to_string(),
                expected: "at least 1",
            });
        }
        if self.cusum_min_obs < 3 {
            return Err(StabilityError::Setting {
                name: "cusum_min_obs".into(),
                value: self.cusum_min_obs.to_string(),
                expected: "at least 3",
            });
        }
        self.psi_edges.check()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn series_names_are_the_fixed_ones_or_a_node_with_a_tenor() {
        for ok in ["pd_1y", "hazard_5y", "cir_kappa", "cir_lambda0", "hazard_node_5Y", "hazard_node_6M"] {
            assert!(is_series_name(ok), "{ok}");
        }
        for bad in ["cir_kapa", "pd_1Y", "hazard_node_", "hazard_node_5X", "hazard_5Y", ""] {
            assert!(!is_series_name(bad), "{bad}");
        }
    }

    #[test]
    fn defaults_check_and_print() {
        let s = StabilitySettings::default();
        assert_eq!(s.check(), Ok(()));
        let pairs = s.pairs();
        let get = |n: &str| pairs.iter().find(|(k, _)| k == n).map(|(_, v)| v.clone());
        assert_eq!(get("psi_red").as_deref(), Some("0.25"));
        assert_eq!(get("cusum_level").as_deref(), Some("5% (critical value 1.3581)"));
        assert_eq!(get("residual_flag_bp[cir]").as_deref(), Some("10"));
        assert_eq!(s.residual_threshold_bp("bootstrap"), 1e-6);
    }

    #[test]
    fn bad_settings_are_named() {
        let s = StabilitySettings { cv_max: f64::NAN, ..StabilitySettings::default() };
        assert!(matches!(s.check(), Err(StabilityError::Setting { name, .. }) if name == "cv_max"));
        let s = StabilitySettings { psi_red: 0.05, ..StabilitySettings::default() };
        assert!(s.check().is_err());
        let s = StabilitySettings { psi_edges: PsiEdges::Given(vec![0.02, 0.01]), ..StabilitySettings::default() };
        assert!(s.check().is_err());
    }

    #[test]
    fn move_thresholds() {
        assert!(MoveThreshold::Relative(0.1).exceeded(1.0, 1.11));
        assert!(!MoveThreshold::Relative(0.1).exceeded(1.0, 1.05));
        assert!(MoveThreshold::Absolute(0.01).exceeded(-0.5, -0.52));
        let s = StabilitySettings {
            move_thresholds: vec![("cir_kappa".into(), MoveThreshold::Absolute(0.2))],
            ..StabilitySettings::default()
        };
        assert_eq!(s.move_threshold("cir_kappa"), MoveThreshold::Absolute(0.2));
        assert_eq!(s.move_threshold("pd_1y"), MoveThreshold::Relative(0.1));
    }
}
