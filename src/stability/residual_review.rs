//! Calibration residuals across many calibrations: per curve (date, entity, method) RMSE and
//! largest |residual|; per (method, tenor) the residual distribution; the worst residuals with
//! their quotes; the share of curves that reprice within a tolerance.

use super::settings::StabilitySettings;
use super::summary::{keep_first_n, quantile_sorted, sorted};
use chrono::NaiveDate;
use std::collections::BTreeMap;
use std::sync::Arc;

/// One repriced quote of one calibration (a row of `calibration_residuals`).
#[derive(Debug, Clone, PartialEq)]
pub struct ResidualObservation {
    /// Calibration date.
    pub date: NaiveDate,
    /// Entity identifier (labels are shared between the rows that repeat them).
    pub entity: Arc<str>,
    /// Calibration method (`bootstrap`, `bond_fit`, `cir`, ...).
    pub method: Arc<str>,
    /// Instrument kind (`cds_par_spread`, `cds_upfront`, `bond_price`, ...).
    pub instrument: Arc<str>,
    /// Tenor or bond label.
    pub tenor: Arc<str>,
    /// Market quote, in the instrument's unit.
    pub market: f64,
    /// Model quote, in the same unit.
    pub model: f64,
    /// Model minus market, in bp.
    pub residual_bp: f64,
    /// Whether the calibration that produced the curve converged.
    pub converged: bool,
}

/// Residual summary of one calibrated curve.
#[derive(Debug, Clone, PartialEq)]
pub struct CurveResidualRow {
    /// Calibration date.
    pub date: NaiveDate,
    /// Entity identifier.
    pub entity: String,
    /// Calibration method.
    pub method: String,
    /// Quotes repriced.
    pub n: usize,
    /// sqrt(mean residual_bp^2).
    pub rmse_bp: f64,
    /// Largest |residual_bp|.
    pub max_abs_bp: f64,
    /// Tenor of the largest |residual_bp|.
    pub worst_tenor: String,
    /// Every row of the curve converged.
    pub converged: bool,
    /// Converged and max_abs_bp <= `reprice_tolerance_bp`.
    pub reprices: bool,
}

/// Distribution of the residuals of one (method, tenor): quantiles by definition 7 (Hyndman
/// and Fan 1996) of the residual and of its absolute value, in bp.
#[derive(Debug, Clone, PartialEq)]
pub struct TenorResidualRow {
    /// Calibration method.
    pub method: String,
    /// Tenor or bond label.
    pub tenor: String,
    /// Residuals pooled.
    pub n: usize,
    /// 1% quantile of the residual, bp.
    pub q01: f64,
    /// 5% quantile of the residual, bp.
    pub q05: f64,
    /// 50% quantile of the residual, bp.
    pub q50: f64,
    /// 95% quantile of the residual, bp.
    pub q95: f64,
    /// 99% quantile of the residual, bp.
    pub q99: f64,
    /// 1% quantile of |residual|, bp.
    pub abs_q01: f64,
    /// 5% quantile of |residual|, bp.
    pub abs_q05: f64,
    /// 50% quantile of |residual|, bp.
    pub abs_q50: f64,
    /// 95% quantile of |residual|, bp.
    pub abs_q95: f64,
    /// 99% quantile of |residual|, bp.
    pub abs_q99: f64,
}

/// One of the largest |residuals|, with its quotes.
#[derive(Debug, Clone, PartialEq)]
pub struct WorstResidualRow {
    /// 1 for the largest |residual|.
    pub rank: usize,
    /// The residual row itself.
    pub residual: ResidualObservation,
}

/// Share of one method's curves that reprice within the tolerance.
#[derive(Debug, Clone, PartialEq)]
pub struct RepricingShare {
    /// Calibration method.
    pub method: String,
    /// Curves.
    pub curves: usize,
    /// Curves that reprice.
    pub repricing: usize,
    /// repricing / curves.
    pub share: f64,
    /// The tolerance used, bp.
    pub tolerance_bp: f64,
}

/// Everything the residual review produces.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct ResidualAnalysis {
    /// One row per (date, entity, method).
    pub curves: Vec<CurveResidualRow>,
    /// One row per (method, tenor).
    pub tenors: Vec<TenorResidualRow>,
    /// The `worst_n` largest |residuals|, largest first (ties by date, entity, method, tenor).
    pub worst: Vec<WorstResidualRow>,
    /// One row per method.
    pub repricing: Vec<RepricingShare>,
    /// Rows dropped because residual_bp was not finite.
    pub non_finite: usize,
}

type CurveKey<'a> = (NaiveDate, &'a str, &'a str);

fn curve_row(key: &CurveKey<'_>, rows: &[&ResidualObservation], tolerance_bp: f64) -> CurveResidualRow {
    let n = rows.len();
    let rmse_bp = (rows.iter().map(|r| r.residual_bp * r.residual_bp).sum::<f64>() / n as f64).sqrt();
    let worst = rows.iter().max_by(|a, b| a.residual_bp.abs().total_cmp(&b.residual_bp.abs()));
    let max_abs_bp = worst.map_or(0.0, |r| r.residual_bp.abs());
    let converged = rows.iter().all(|r| r.converged);
    CurveResidualRow {
        date: key.0,
        entity: key.1.to_string(),
        method: key.2.to_string(),
        n,
        rmse_bp,
        max_abs_bp,
        worst_tenor: worst.map(|r| r.tenor.to_string()).unwrap_or_default(),
        converged,
        reprices: converged && max_abs_bp <= tolerance_bp,
    }
}

fn tenor_row(method: &str, tenor: &str, residuals: &[f64]) -> TenorResidualRow {
    let s = sorted(residuals);
    let a = sorted(&residuals.iter().map(|r| r.abs()).collect::<Vec<_>>());
    let q = |v: &[f64], p: f64| quantile_sorted(v, p).unwrap_or(f64::NAN);
    TenorResidualRow {
        method: method.to_string(),
        tenor: tenor.to_string(),
        n: residuals.len(),
        q01: q(&s, 0.01),
        q05: q(&s, 0.05),
        q50: q(&s, 0.5),
        q95: q(&s, 0.95),
        q99: q(&s, 0.99),
        abs_q01: q(&a, 0.01),
        abs_q05: q(&a, 0.05),
        abs_q50: q(&a, 0.5),
        abs_q95: q(&a, 0.95),
        abs_q99: q(&a, 0.99),
    }
}

fn worst_rows(rows: &[&ResidualObservation], n: usize) -> Vec<WorstResidualRow> {
    let order = |a: &ResidualObservation, b: &ResidualObservation| {
        b.residual_bp.abs().total_cmp(&a.residual_bp.abs()).then_with(|| (a.date, &a.entity, &a.method, &a.tenor).cmp(&(b.date, &b.entity, &b.method, &b.tenor)))
    };
    // The first n of a stable sort, in one pass.
    let mut v: Vec<&ResidualObservation> = Vec::with_capacity(n + 1);
    for &r in rows {
        keep_first_n(&mut v, r, n, |a, b| order(a, b));
    }
    v.into_iter().enumerate().map(|(i, r)| WorstResidualRow { rank: i + 1, residual: r.clone() }).collect()
}

fn repricing_shares(curves: &[CurveResidualRow], tolerance_bp: f64) -> Vec<RepricingShare> {
    let mut acc: BTreeMap<&str, (usize, usize)> = BTreeMap::new();
    for c in curves {
        let e = acc.entry(&c.method).or_default();
        e.0 += 1;
        e.1 += usize::from(c.reprices);
    }
    acc.into_iter().map(|(m, (n, k))| RepricingShare { method: m.to_string(), curves: n, repricing: k, share: k as f64 / n as f64, tolerance_bp }).collect()
}

/// Summarises residual rows; rows with a non-finite residual are dropped and counted.
pub fn review_residuals(rows: &[ResidualObservation], settings: &StabilitySettings) -> ResidualAnalysis {
    let usable: Vec<&ResidualObservation> = rows.iter().filter(|r| r.residual_bp.is_finite()).collect();
    // A curve's residuals usually come as consecutive rows: they are grouped as runs first
    // and the runs put in key order after (a stable sort, so a key met in several runs keeps
    // its rows in input order), the same groups an ordered map would give without a lookup
    // per row.
    let mut runs: Vec<(CurveKey<'_>, Vec<&ResidualObservation>)> = Vec::new();
    let mut by_tenor: BTreeMap<(&str, &str), Vec<f64>> = BTreeMap::new();
    for r in &usable {
        let key = (r.date, &*r.entity, &*r.method);
        match runs.last_mut() {
            Some((k, v)) if *k == key => v.push(r),
            _ => runs.push((key, vec![r])),
        }
        by_tenor.entry((&*r.method, &*r.tenor)).or_default().push(r.residual_bp);
    }
    runs.sort_by(|a, b| a.0.cmp(&b.0));
    let mut by_curve: Vec<(CurveKey<'_>, Vec<&ResidualObservation>)> = Vec::with_capacity(runs.len());
    for (k, mut v) in runs {
        match by_curve.last_mut() {
            Some((k0, v0)) if *k0 == k => v0.append(&mut v),
            _ => by_curve.push((k, v)),
        }
    }
    let tol = settings.reprice_tolerance_bp;
    let curves: Vec<CurveResidualRow> = by_curve.iter().map(|(k, v)| curve_row(k, v, tol)).collect();
    ResidualAnalysis {
        tenors: by_tenor.iter().map(|((m, t), v)| tenor_row(m, t, v)).collect(),
        worst: worst_rows(&usable, settings.worst_n),
        repricing: repricing_shares(&curves, tol),
        curves,
        non_finite: rows.len() - usable.len(),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn row(day: u32, entity: &str, method: &str, tenor: &str, residual_bp: f64) -> ResidualObservation {
        ResidualObservation {
            date: NaiveDate::from_ymd_opt(2024, 3, day).unwrap(),
            entity: entity.into(),
            method: method.into(),
            instrument: "cds_par_spread".into(),
            tenor: tenor.into(),
            market: 100.0,
            model: 100.0 + residual_bp,
            residual_bp,
            converged: true,
        }
    }

    #[test]
    fn a_curve_split_over_several_runs_is_one_group() {
        // The same rows grouped and interleaved: the rows of each curve keep their relative
        // order, so the curve rows (RMSE, worst tenor with its tie rule) must be identical.
        let grouped = [
            row(4, "Birch", "cir", "1Y", 3.0),
            row(4, "Birch", "cir", "5Y", -3.0),
            row(4, "Alder", "cir", "1Y", 1.0),
            row(4, "Alder", "cir", "5Y", 2.0),
        ];
        let interleaved = [grouped[0].clone(), grouped[2].clone(), grouped[1].clone(), grouped[3].clone()];
        let s = StabilitySettings::default();
        let (a, b) = (review_residuals(&grouped, &s), review_residuals(&interleaved, &s));
        assert_eq!(a.curves, b.curves);
        assert_eq!(a.curves.len(), 2);
        // Ordered by (date, entity, method); Birch's tie of |3| keeps the later row (5Y).
        assert_eq!((a.curves[0].entity.as_str(), a.curves[1].entity.as_str()), ("Alder", "Birch"));
        assert_eq!(a.curves[1].worst_tenor, "5Y");
        assert_eq!(a.curves[1].n, 2);
    }

    #[test]
    fn curve_rmse_worst_and_share() {
        // Curve (4 Mar, Birch, cir): residuals 3, -4 -> RMSE sqrt((9 + 16) / 2) = 3.535534,
        // largest |r| 4 at 5Y. Bootstrap curves: 1e-9 (reprices) and 2e-6 (does not, tolerance 1e-6).
        let rows = [
            row(4, "Birch", "cir", "1Y", 3.0),
            row(4, "Birch", "cir", "5Y", -4.0),
            row(4, "Birch", "bootstrap", "5Y", 1e-9),
            row(5, "Birch", "bootstrap", "5Y", 2e-6),
            row(5, "Birch", "bootstrap", "1Y", f64::NAN),
        ];
        let s = StabilitySettings { worst_n: 2, ..StabilitySettings::default() };
        let r = review_residuals(&rows, &s);
        assert_eq!(r.non_finite, 1);
        let cir = r.curves.iter().find(|c| c.method == "cir").unwrap();
        assert!((cir.rmse_bp - 12.5f64.sqrt()).abs() < 1e-12);
        assert_eq!((cir.max_abs_bp, cir.worst_tenor.as_str()), (4.0, "5Y"));
        let boot = r.repricing.iter().find(|m| m.method == "bootstrap").unwrap();
        assert_eq!((boot.curves, boot.repricing, boot.share), (2, 1, 0.5));
        assert_eq!(r.worst.len(), 2);
        assert_eq!((r.worst[0].rank, r.worst[0].residual.residual_bp), (1, -4.0));
        let t = r.tenors.iter().find(|t| t.method == "bootstrap" && t.tenor == "5Y").unwrap();
        // Two values 1e-9 and 2e-6: median 1.0005e-6; 99% at position 0.99: 1e-9 + 0.99 (2e-6 - 1e-9).
        assert!((t.q50 - 1.0005e-6).abs() < 1e-15);
        assert!((t.abs_q99 - (1e-9 + 0.99 * (2e-6 - 1e-9))).abs() < 1e-15);
    }
}
