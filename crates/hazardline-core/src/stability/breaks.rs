//! The Brown-Durbin-Evans CUSUM test (see [`super::cusum`]) run on each entity's history of
//! each series, per review period or over the whole history.

use super::cusum::{bde_cusum, ols_cusum_statistic, CusumScope, CusumTarget, BDE_A_1};
use super::inputs::{daily_moves, Panel, Point};
use super::settings::StabilitySettings;
use super::StabilityError;
use chrono::NaiveDate;
use std::collections::BTreeMap;

/// Outcome of one test window.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum BreakStatus {
    /// The test ran.
    Tested,
    /// Fewer than `cusum_min_obs` values in the window.
    TooShort,
    /// Every value the same (no variance): nothing to test.
    Constant,
}
crate::text_form!(BreakStatus { Tested => "tested", TooShort => "too_short", Constant => "constant" });

/// One CUSUM test: one entity, one series, one window.
#[derive(Debug, Clone, PartialEq)]
pub struct BreakRow {
    /// Entity identifier.
    pub entity: String,
    /// Series name.
    pub series: String,
    /// The window: a period label, or `history`.
    pub window: String,
    /// `levels` or `daily_changes`.
    pub target: &'static str,
    /// Values tested (T).
    pub n: usize,
    /// Whether the test ran.
    pub status: BreakStatus,
    /// sigma of the recursive residuals.
    pub sigma: Option<f64>,
    /// max_r |W_r| / boundary_r at the chosen level (above 1: crossed).
    pub max_ratio: Option<f64>,
    /// First date |W_r| crosses the chosen level's boundary.
    pub crossed_at: Option<NaiveDate>,
    /// First date |W_r| crosses the 1% boundary (a = 1.143).
    pub crossed_at_1pct: Option<NaiveDate>,
    /// Ploberger-Kramer OLS-residual CUSUM statistic (5% critical value 1.358), for reference.
    pub ols_statistic: Option<f64>,
}

fn series_of(points: &[Point], settings: &StabilitySettings) -> Vec<(NaiveDate, f64)> {
    match settings.cusum_target {
        CusumTarget::Levels => points.iter().map(|p| (p.date, p.value)).collect(),
        CusumTarget::DailyChanges => {
            daily_moves(points, settings.max_gap_days).iter().map(|m| (m.date, m.value - m.previous)).collect()
        }
    }
}

fn windows(values: Vec<(NaiveDate, f64)>, settings: &StabilitySettings) -> BTreeMap<String, Vec<(NaiveDate, f64)>> {
    let mut out: BTreeMap<String, Vec<(NaiveDate, f64)>> = BTreeMap::new();
    for v in values {
        let key = match settings.cusum_scope {
            CusumScope::Period => settings.period.of(v.0).label(),
            CusumScope::History => "history".to_string(),
        };
        out.entry(key).or_default().push(v);
    }
    out
}

fn test_window(
    entity: &str,
    series: &str,
    window: String,
    data: &[(NaiveDate, f64)],
    settings: &StabilitySettings,
) -> BreakRow {
    let x: Vec<f64> = data.iter().map(|d| d.1).collect();
    let mut row = BreakRow {
        entity: entity.to_string(),
        series: series.to_string(),
        window,
        target: settings.cusum_target.as_str(),
        n: x.len(),
        status: BreakStatus::TooShort,
        sigma: None,
        max_ratio: None,
        crossed_at: None,
        crossed_at_1pct: None,
        ols_statistic: None,
    };
    if x.len() < settings.cusum_min_obs {
        return row;
    }
    match bde_cusum(&x) {
        Ok(path) => {
            let a = settings.cusum_level.a();
            row.status = BreakStatus::Tested;
            row.sigma = Some(path.sigma);
            row.max_ratio = Some(path.max_ratio(a));
            row.crossed_at = path.first_crossing(a).map(|i| data[i].0);
            row.crossed_at_1pct = path.first_crossing(BDE_A_1).map(|i| data[i].0);
            row.ols_statistic = ols_cusum_statistic(&x).ok();
        }
        Err(StabilityError::ZeroVariance) => row.status = BreakStatus::Constant,
        Err(_) => row.status = BreakStatus::TooShort,
    }
    row
}

/// One [`BreakRow`] per (series, entity, window).
pub(crate) fn break_rows(panel: &Panel, settings: &StabilitySettings) -> Vec<BreakRow> {
    use rayon::prelude::*;
    // Histories are independent: in parallel, concatenated in panel order.
    let histories: Vec<(&(String, String), &Vec<Point>)> = panel
        .iter()
        .filter(|((series, _), _)| settings.cusum_series.is_empty() || settings.cusum_series.contains(series))
        .collect();
    let per_history: Vec<Vec<BreakRow>> = histories
        .par_iter()
        .map(|((series, entity), points)| {
            windows(series_of(points, settings), settings)
                .into_iter()
                .map(|(window, data)| test_window(entity, series, window, &data, settings))
                .collect()
        })
        .collect();
    per_history.into_iter().flatten().collect()
}
