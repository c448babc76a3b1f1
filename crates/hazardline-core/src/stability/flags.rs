//! Flag rows (the `flags` table): one row for every breach of a stability or residual
//! threshold, with the value, the threshold and a sentence a reviewer can follow.

use super::breaks::BreakRow;
use super::metrics::{Scope, StabilityRow, CALIBRATION_SERIES};
use super::population::PsiRow;
use super::residual_review::CurveResidualRow;
use super::settings::StabilitySettings;
use crate::text::{FlagRule, Severity};
use chrono::NaiveDate;

/// Severity of a breach that needs action before the model is relied on.
pub const RED: Severity = Severity::Red;
/// Severity of a breach that needs a look and a written view.
pub const AMBER: Severity = Severity::Amber;

/// One row of the `flags` table (columns fixed by docs/design.md, "Output tables").
#[derive(Debug, Clone, PartialEq)]
pub struct FlagRow {
    /// The rule, e.g. `psi_shift`, `cusum_break`.
    pub rule: FlagRule,
    /// `red` or `amber` here; the data-quality rules add `warning` and `info`.
    pub severity: Severity,
    /// Entity concerned; `None` for universe-level rules.
    pub entity: Option<String>,
    /// Series concerned (a parameter series, `calibration`, or `residual_bp/<method>`).
    pub series: String,
    /// Review period label.
    pub period: String,
    /// The date the breach happened on, when it is a single date.
    pub date: Option<NaiveDate>,
    /// The measured value.
    pub value: f64,
    /// The threshold it breached.
    pub threshold: f64,
    /// A sentence saying what was measured, against what, and why it matters.
    pub explanation: String,
}

/// The series name of residual flags for `method`.
pub fn residual_series(method: &str) -> String {
    format!("residual_bp/{method}")
}

fn flag(
    rule: FlagRule,
    severity: Severity,
    row: &StabilityRow,
    value: f64,
    threshold: f64,
    explanation: String,
) -> FlagRow {
    let entity = (row.scope == Scope::Entity).then(|| row.key.clone());
    FlagRow {
        rule,
        severity,
        entity,
        series: row.series.clone(),
        period: row.period.clone(),
        date: None,
        value,
        threshold,
        explanation,
    }
}

fn who(row: &StabilityRow) -> String {
    match row.scope {
        Scope::Entity => format!("{}'s {}", row.key, row.series),
        Scope::Grade => format!("grade {} {}", row.key, row.series),
        Scope::Universe => format!("the universe's {}", row.series),
    }
}

fn spread_flags(row: &StabilityRow, s: &StabilitySettings, out: &mut Vec<FlagRow>) {
    if let Some(cv) = row.cv.filter(|cv| *cv > s.cv_max) {
        let text = format!("{} varied with a coefficient of variation of {cv:.3} in {} (sd over |mean| of {} values), above the limit {}.", who(row), row.period, row.n, s.cv_max);
        out.push(flag(FlagRule::CvHigh, AMBER, row, cv, s.cv_max, text));
    }
    if let Some(share) = row.large_move_share.filter(|v| *v > s.large_move_share_max) {
        let t = s.move_threshold(&row.series).describe();
        let text = format!(
            "{:.1}% of {}'s {} daily moves in {} exceeded the large-move threshold ({t}), above the allowed share {}.",
            share * 100.0,
            row.key,
            row.moves.unwrap_or(0),
            row.period,
            s.large_move_share_max
        );
        let mut f = flag(FlagRule::LargeMoves, AMBER, row, share, s.large_move_share_max, text);
        f.date = row.max_move_date;
        out.push(f);
    }
    if let (Some(ratio), Some(p), Some(m)) = (row.move_ratio, row.param_rel_move, row.market_rel_move) {
        if ratio > s.market_ratio_max && p >= s.param_move_min {
            let text = format!("{} moved {:.2}% a day on average in {} while the entity's spreads moved {:.3}% a day: {ratio:.1} times the market's move, above {}; the parameter swings more than the quotes justify.", who(row), p * 100.0, row.period, m * 100.0, s.market_ratio_max);
            out.push(flag(FlagRule::MovesVsMarket, AMBER, row, ratio, s.market_ratio_max, text));
        }
    }
}

fn change_flags(row: &StabilityRow, s: &StabilitySettings, out: &mut Vec<FlagRow>) {
    if row.scope == Scope::Grade || (row.scope == Scope::Universe && row.n < s.universe_min_entities) {
        return;
    }
    for (rule, what, change) in [
        (FlagRule::PeriodChangeMean, "mean", row.mean_change),
        (FlagRule::PeriodChangeMedian, "median", row.median_change),
    ] {
        if let Some(c) = change.filter(|c| c.abs() > s.change_max) {
            let text = format!("The {what} of {} changed by {:+.1}% from the previous period to {}, beyond the limit of {:.0}% either way.", who(row), c * 100.0, row.period, s.change_max * 100.0);
            out.push(flag(rule, AMBER, row, c, s.change_max, text));
        }
    }
}

fn calibration_flags(row: &StabilityRow, s: &StabilitySettings, out: &mut Vec<FlagRow>) {
    let checks = [
        (FlagRule::CalibrationFailures, "failed", row.failures, s.failures_max),
        (FlagRule::CalibrationInfeasible, "were infeasible", row.infeasible, s.infeasible_max),
    ];
    for (rule, what, count, max) in checks {
        if let Some(c) = count.filter(|c| *c > max) {
            let text = format!("{c} calibrations of {} {what} in {} (over {} dates with a calibration status), more than the {max} allowed.", row.key, row.period, row.n);
            out.push(flag(rule, AMBER, row, c as f64, max as f64, text));
        }
    }
}

/// Flags from the stability rows: coefficient of variation, large-move share, parameter move
/// against market move (entity rows); period-on-period change of mean and median (entity and
/// universe rows); calibration failures and infeasible counts (calibration rows).
pub fn row_flags(rows: &[StabilityRow], settings: &StabilitySettings) -> Vec<FlagRow> {
    let mut out = Vec::new();
    for row in rows {
        if row.series == CALIBRATION_SERIES {
            calibration_flags(row, settings, &mut out);
            continue;
        }
        if row.scope == Scope::Entity {
            spread_flags(row, settings, &mut out);
        }
        change_flags(row, settings, &mut out);
    }
    out
}

/// PSI flags: red over `psi_red`, amber over `psi_amber`.
pub fn psi_flags(rows: &[PsiRow], settings: &StabilitySettings) -> Vec<FlagRow> {
    rows.iter()
        .filter_map(|r| {
            let psi = r.psi?;
            let (severity, threshold) = if psi > settings.psi_red {
                (RED, settings.psi_red)
            } else if psi > settings.psi_amber {
                (AMBER, settings.psi_amber)
            } else {
                return None;
            };
            let explanation = format!(
                "The cross-section of {} across {} entities in {} differs from {} ({} entities) with a PSI of {psi:.3}, above {threshold}: the implied-PD distribution has shifted.",
                r.series, r.n_current, r.period, r.previous_period, r.n_previous
            );
            Some(FlagRow { rule: FlagRule::PsiShift, severity, entity: None, series: r.series.clone(), period: r.period.clone(), date: None, value: psi, threshold, explanation })
        })
        .collect()
}

/// Break flags: red when the test's p-value is below 1%, amber when it is below the chosen
/// level only. The value is the statistic and the threshold the Kolmogorov critical value at
/// the chosen level; the date is the estimated break.
pub fn break_flags(rows: &[BreakRow], settings: &StabilitySettings) -> Vec<FlagRow> {
    let alpha = settings.cusum_level.alpha();
    rows.iter()
        .filter_map(|r| {
            let p = r.p_value?;
            if !(p < alpha) {
                return None;
            }
            let date = r.break_date?;
            let statistic = r.statistic.unwrap_or(f64::NAN);
            let severity = if p < 0.01 { RED } else { AMBER };
            let form = if r.target == "daily_changes" { "daily changes" } else { "levels" };
            let explanation = format!(
                "The mean of {}'s {} ({form}, window {}, {} values) is not constant: the CUSUM statistic {statistic:.3} with the series' long-run variance has p = {} (below {}); the partial sums peak on {date}.",
                r.entity,
                r.series,
                r.window,
                r.n,
                if p < 1e-3 { format!("{p:.2e}") } else { format!("{p:.4}") },
                settings.cusum_level.as_str()
            );
            let period = settings.period.of(date).label();
            Some(FlagRow {
                rule: FlagRule::CusumBreak,
                severity,
                entity: Some(r.entity.clone()),
                series: r.series.clone(),
                period,
                date: Some(date),
                value: statistic,
                threshold: settings.cusum_level.critical_value(),
                explanation,
            })
        })
        .collect()
}

/// Residual flags: one per curve whose largest |residual| exceeds its method's threshold.
pub fn residual_flags(curves: &[CurveResidualRow], settings: &StabilitySettings) -> Vec<FlagRow> {
    curves
        .iter()
        .filter_map(|c| {
            let threshold = settings.residual_threshold_bp(&c.method);
            (c.max_abs_bp > threshold).then(|| FlagRow {
                rule: FlagRule::ResidualOverTolerance,
                severity: AMBER,
                entity: Some(c.entity.to_string()),
                series: residual_series(&c.method),
                period: settings.period.of(c.date).label(),
                date: Some(c.date),
                value: c.max_abs_bp,
                threshold,
                explanation: format!(
                    "The {} calibration of {} on {} misses the market by up to {:.3e} bp (at {}; RMSE {:.3e} bp over {} quotes), above the tolerance of {threshold:e} bp.",
                    c.method, c.entity, c.date, c.max_abs_bp, c.worst_tenor, c.rmse_bp, c.n
                ),
            })
        })
        .collect()
}

/// Red before amber, then by rule, entity, series, period and date, for a stable table.
pub fn sort_flags(flags: &mut [FlagRow]) {
    // By the rule's text, as the table shows it.
    flags.sort_by(|a, b| {
        (a.severity != RED, a.rule.as_str(), &a.entity, &a.series, &a.period, a.date).cmp(&(
            b.severity != RED,
            b.rule.as_str(),
            &b.entity,
            &b.series,
            &b.period,
            b.date,
        ))
    });
}
