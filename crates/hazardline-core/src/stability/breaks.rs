//! The structural-break test (see [`super::cusum`]) run on each entity's history of each
//! series, per review period or over the whole history.

use super::cusum::{adf_critical_5, adf_lags, adf_t, changes_autocorrelation, robust_cusum, CusumScope, CusumTarget};
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

/// One break test: one entity, one series, one window.
#[derive(Debug, Clone, PartialEq)]
pub struct BreakRow {
    /// Entity identifier.
    pub entity: String,
    /// Series name.
    pub series: String,
    /// The window: a period label, or `history`.
    pub window: String,
    /// What was tested: `levels` or `daily_changes`.
    pub target: &'static str,
    /// Values in the window (T, before differencing).
    pub n: usize,
    /// Whether the test ran.
    pub status: BreakStatus,
    /// Dickey-Fuller t-statistic of the levels (in the `auto` form).
    pub adf_t: Option<f64>,
    /// Its 5% critical value for the regression's rows.
    pub adf_critical: Option<f64>,
    /// First-order autocorrelation of the window's changes (in the `auto` form).
    pub changes_r1: Option<f64>,
    /// Bartlett bandwidth of the long-run variance.
    pub lags: Option<i64>,
    /// Long-run standard deviation of the tested values.
    pub long_run_sd: Option<f64>,
    /// sup |partial sum of deviations| / (long-run sd sqrt T).
    pub statistic: Option<f64>,
    /// Kolmogorov tail probability of the statistic.
    pub p_value: Option<f64>,
    /// Date of the last value before the estimated break (where the partial sum peaks).
    pub break_date: Option<NaiveDate>,
}

/// The values the test sees, in the form the fit produced them. A step function (runs of
/// identical consecutive values, as kappa and sigma are in the CIR fit's `fixed_kappa_sigma`
/// mode: one estimate per window of curve dates, repeated on each date) is one value per step,
/// dated at the step's first date: tested date by date, a constant-mean CUSUM rejects any step
/// function with more than one level, which says nothing about the model.
fn series_of(points: &[Point], settings: &StabilitySettings) -> Vec<(NaiveDate, f64)> {
    match settings.cusum_target {
        CusumTarget::Levels | CusumTarget::Auto => steps(points.iter().map(|p| (p.date, p.value))),
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

/// The changes between consecutive values of a window, dated at the later one. A daily series
/// (median spacing within `max_gap_days` calendar days) drops the changes across a longer gap,
/// as the daily-changes form does; a series of window estimates (steps weeks apart) keeps
/// every change.
fn changes(data: &[(NaiveDate, f64)], max_gap_days: i64) -> Vec<(NaiveDate, f64)> {
    let mut gaps: Vec<i64> = data.windows(2).map(|w| (w[1].0 - w[0].0).num_days()).collect();
    gaps.sort_unstable();
    let daily = gaps.get(gaps.len() / 2).is_some_and(|&g| g <= max_gap_days);
    data.windows(2)
        .filter(|w| !daily || (w[1].0 - w[0].0).num_days() <= max_gap_days)
        .map(|w| (w[1].0, w[1].1 - w[0].1))
        .collect()
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
        target: match settings.cusum_target {
            CusumTarget::DailyChanges => "daily_changes",
            _ => "levels",
        },
        n: x.len(),
        status: BreakStatus::TooShort,
        adf_t: None,
        adf_critical: None,
        changes_r1: None,
        lags: None,
        long_run_sd: None,
        statistic: None,
        p_value: None,
        break_date: None,
    };
    if x.len() < settings.cusum_min_obs {
        return row;
    }
    if x.iter().all(|v| v.to_bits() == x[0].to_bits()) {
        row.status = BreakStatus::Constant;
        return row;
    }
    // In the auto form a series whose unit root the Dickey-Fuller test cannot reject and
    // whose changes are not over-differenced is tested on its changes (dated at the later
    // value); see the module notes of `cusum`.
    let mut tested: Vec<(NaiveDate, f64)> = data.to_vec();
    if settings.cusum_target == CusumTarget::Auto {
        row.changes_r1 = changes_autocorrelation(&x);
        if let Some((t, rows)) = adf_t(&x, adf_lags(x.len())) {
            let crit = adf_critical_5(rows);
            row.adf_t = Some(t);
            row.adf_critical = Some(crit);
            if !(t < crit) && row.changes_r1.is_some_and(|r| r > -0.25) {
                row.target = "daily_changes";
                tested = changes(data, settings.max_gap_days);
            }
        }
    }
    let y: Vec<f64> = tested.iter().map(|d| d.1).collect();
    match robust_cusum(&y) {
        Ok(r) => {
            row.status = BreakStatus::Tested;
            row.lags = Some(r.lags as i64);
            row.long_run_sd = Some(r.long_run_sd);
            row.statistic = Some(r.statistic);
            row.p_value = Some(r.p_value);
            row.break_date = Some(tested[r.argmax].0);
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
    /// Changes across a gap longer than `max_gap_days` are dropped from a daily series, and
    /// kept between window estimates weeks apart.
    #[test]
    fn changes_skip_gaps_of_daily_series_only() {
        let daily = [(day(0), 1.0), (day(1), 1.5), (day(2), 1.25), (day(30), 3.0), (day(31), 3.5)];
        assert_eq!(changes(&daily, 5), [(day(1), 0.5), (day(2), -0.25), (day(31), 0.5)]);
        let steps = [(day(0), 1.0), (day(28), 2.0), (day(56), 1.5)];
        assert_eq!(changes(&steps, 5), [(day(28), 1.0), (day(56), -0.5)]);
    }

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
