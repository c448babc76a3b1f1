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

/// The values the test sees, in the form the fit produced them. A step function (runs of
/// identical consecutive values, as kappa and sigma are in the CIR fit's `fixed_kappa_sigma`
/// mode: one estimate per window of curve dates, repeated on each date) is one value per step,
/// dated at the step's first date: tested date by date, a constant-mean CUSUM rejects any step
/// function with more than one level, which says nothing about the model.
fn series_of(points: &[Point], settings: &StabilitySettings) -> Vec<(NaiveDate, f64)> {
    match settings.cusum_target {
        CusumTarget::Levels => steps(points.iter().map(|p| (p.date, p.value))),
        CusumTarget::DailyChanges => {
            let moves = daily_moves(points, settings.max_gap_days);
            let stepped = moves.iter().any(|m| m.value.to_bits() == m.previous.to_bits());
            if stepped {
                // The changes of a step function are zeros with a jump at each step: test the
                // steps' changes instead.
                let s = steps(points.iter().map(|p| (p.date, p.value)));
                s.windows(2).map(|w| (w[1].0, w[1].1 - w[0].1)).collect()
            } else {
                moves.iter().map(|m| (m.date, m.value - m.previous)).collect()
            }
        }
    }
}

/// Consecutive bit-identical values merged into one, at the first date of each run.
fn steps(values: impl Iterator<Item = (NaiveDate, f64)>) -> Vec<(NaiveDate, f64)> {
    let mut out: Vec<(NaiveDate, f64)> = Vec::new();
    for (d, v) in values {
        if out.last().is_none_or(|last| last.1.to_bits() != v.to_bits()) {
            out.push((d, v));
        }
    }
    out
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

#[cfg(test)]
mod tests {
    use super::*;

    fn day(k: i64) -> NaiveDate {
        NaiveDate::from_ymd_opt(2024, 1, 1).unwrap() + chrono::Duration::days(k)
    }

    /// A window estimate repeated on each of its 20 dates is tested as one value per window;
    /// a daily series is tested as it is.
    #[test]
    fn a_step_function_is_tested_on_its_steps() {
        let s = StabilitySettings::default();
        let stepped: Vec<Point> =
            (0..60).map(|k| Point::new(day(k), [0.2, 0.9, 0.4][(k / 20) as usize], None)).collect();
        assert_eq!(series_of(&stepped, &s), [(day(0), 0.2), (day(20), 0.9), (day(40), 0.4)]);
        let daily: Vec<Point> = (0..60).map(|k| Point::new(day(k), 0.2 + 0.001 * (k % 7) as f64, None)).collect();
        assert_eq!(series_of(&daily, &s).len(), 60);
        let changes = StabilitySettings { cusum_target: CusumTarget::DailyChanges, ..s.clone() };
        let got = series_of(&stepped, &changes);
        assert_eq!(got.len(), 2);
        assert!((got[0].1 - 0.7).abs() < 1e-15 && (got[1].1 + 0.5).abs() < 1e-15, "{got:?}");
        // Before: 60 values, a constant-mean CUSUM on three levels; now 3, too few to test
        // (cusum_min_obs 20), which is what one quarter of window estimates supports.
        let row = test_window("Alder", "cir_kappa", "2024Q1".into(), &series_of(&stepped, &s), &s);
        assert_eq!((row.n, row.status), (3, BreakStatus::TooShort));
    }
}
