//! The `calibrate` stage: CDS quotes + discount zero rates -> hazard_curves,
//! calibration_residuals and rejects (Parquet) in one output folder.
//!
//! Reads: cds_quotes (date, entity, currency, tenor, par_spread_bp | upfront + coupon_bp,
//! recovery), discount (date, currency, tenor, zero_rate). Writes: hazard_curves.parquet,
//! calibration_residuals.parquet, rejects.parquet. Every input row is either used by a curve
//! or rejected with a reason: rows in = rows used + rows rejected, per table.
//!
//! Curves are independent and run in parallel (rayon) over plain structs; polars is done
//! before the parallel section starts and only resumes to write.

use crate::calibrate::residuals::reprice;
use crate::calibrate::{bootstrap, BootstrapQuote, BootstrapSettings, InfeasiblePolicy};
use crate::curves::DiscountCurve;
use crate::error::{Error, Result};
use crate::ingest::cds::{self, CdsRow};
use crate::ingest::discount::{self, DiscountRow};
use crate::ingest::Reject;
use crate::instruments::AccrualIntegration;
use crate::report::tables::{write_hazard_curves, write_rejects, write_residuals, HazardCurveRow, ResidualRow};
use crate::time::{Calendar, Tenor};
use chrono::NaiveDate;
use rayon::prelude::*;
use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

/// Checked settings of the calibrate stage.
#[derive(Debug, Clone)]
pub struct CalibrateSettings {
    pub cds: PathBuf,
    pub discount: PathBuf,
    pub out: PathBuf,
    /// Recovery for rows without one.
    pub recovery: f64,
    pub bootstrap: BootstrapSettings,
    pub calendar: Calendar,
}

/// Counts of one input table.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq)]
pub struct RowCounts {
    pub rows_in: usize,
    pub used: usize,
    pub rejected: usize,
}

/// What a calibrate run did.
#[derive(Debug, Clone, Default)]
pub struct CalibrateSummary {
    pub cds: RowCounts,
    pub discount: RowCounts,
    pub curves: usize,
    pub curves_complete: usize,
    pub nodes: usize,
    pub nodes_by_status: BTreeMap<&'static str, usize>,
    pub max_abs_residual_bp: f64,
    pub outputs: Vec<PathBuf>,
}

type CurveKey = (NaiveDate, String, String);

/// A curve's result, kept in key order.
struct CurveOutput {
    hazard: Vec<HazardCurveRow>,
    residuals: Vec<ResidualRow>,
    rejects: Vec<Reject>,
    used: usize,
}

/// Builds discount curves per (date, currency); the rows of a curve that cannot be built are
/// rejected.
fn discount_curves(rows: Vec<DiscountRow>, rejects: &mut Vec<Reject>) -> (BTreeMap<(NaiveDate, String), DiscountCurve>, usize) {
    let mut groups: BTreeMap<(NaiveDate, String), Vec<DiscountRow>> = BTreeMap::new();
    for r in rows {
        groups.entry((r.date, r.currency.clone())).or_default().push(r);
    }
    let mut out = BTreeMap::new();
    let mut used = 0;
    for (key, rows) in groups {
        let pillars: Vec<(Tenor, f64)> = rows.iter().map(|r| (r.tenor, r.zero_rate)).collect();
        match DiscountCurve::from_zero_rates(key.0, &pillars) {
            Ok(c) => {
                used += rows.len();
                out.insert(key, c);
            }
            Err(e) => {
                for r in rows {
                    rejects.push(Reject { table: discount::TABLE, source: r.source, row: r.row, reason: "bad_discount_curve", detail: e.to_string() });
                }
            }
        }
    }
    (out, used)
}

fn calibrate_one(key: &CurveKey, rows: &[CdsRow], curve: &DiscountCurve, s: &CalibrateSettings) -> CurveOutput {
    let quotes: Vec<BootstrapQuote> = rows
        .iter()
        .map(|r| BootstrapQuote { tenor: r.tenor, quote: r.quote, recovery: r.recovery.unwrap_or(s.recovery) })
        .collect();
    let fit = match bootstrap(key.0, &quotes, curve, &s.calendar, &s.bootstrap) {
        Ok(f) => f,
        Err(e) => {
            let rejects = rows
                .iter()
                .map(|r| Reject {
                    table: cds::TABLE,
                    source: r.source.clone(),
                    row: r.row,
                    reason: "curve_not_built",
                    detail: format!("{} {} {}: {e}", key.0, key.1, key.2),
                })
                .collect();
            return CurveOutput { hazard: Vec::new(), residuals: Vec::new(), rejects, used: 0 };
        }
    };
    let residuals = reprice(&fit, &quotes, curve, s.bootstrap.accrual);
    let hazard = fit
        .nodes
        .iter()
        .map(|n| HazardCurveRow {
            date: key.0,
            entity: key.1.clone(),
            currency: key.2.clone(),
            source: "cds",
            tenor: n.tenor.to_string(),
            maturity: n.maturity,
            node_date: n.node_date,
            hazard: n.hazard,
            survival: n.survival,
            status: n.status.as_str(),
            recovery: quotes[n.quote_index].recovery,
            iterations: n.iterations as i64,
            detail: n.detail.clone(),
        })
        .collect();
    let residuals = residuals
        .into_iter()
        .map(|q| ResidualRow {
            date: key.0,
            entity: key.1.clone(),
            currency: key.2.clone(),
            method: "bootstrap",
            instrument: q.instrument,
            tenor_or_bond: q.tenor.to_string(),
            market: q.market,
            model: q.model,
            residual_bp: q.residual_bp,
            status: fit.nodes.iter().find(|n| n.quote_index == q.quote_index).map_or("ok", |n| n.status.as_str()),
        })
        .collect();
    CurveOutput { hazard, residuals, rejects: Vec::new(), used: rows.len() }
}

/// Runs the stage.
pub fn run(s: &CalibrateSettings) -> Result<CalibrateSummary> {
    let disc = discount::read(&s.discount)?;
    let quotes = cds::read(&s.cds, &s.calendar)?;
    let mut rejects: Vec<Reject> = Vec::new();
    rejects.extend(disc.rejects.iter().cloned());
    let disc_rejected_rows = disc.rejects.len();
    let (curves, disc_used) = discount_curves(disc.rows, &mut rejects);
    let disc_counts = RowCounts { rows_in: disc.rows_in, used: disc_used, rejected: rejects.len() - 0 };
    debug_assert!(disc_rejected_rows <= disc_counts.rejected);

    let cds_rows_in = quotes.rows_in;
    let mut cds_rejects = quotes.rejects;
    let mut groups: BTreeMap<CurveKey, Vec<CdsRow>> = BTreeMap::new();
    for r in quotes.rows {
        if curves.contains_key(&(r.date, r.currency.clone())) {
            groups.entry((r.date, r.entity.clone(), r.currency.clone())).or_default().push(r);
        } else {
            cds_rejects.push(Reject {
                table: cds::TABLE,
                source: r.source.clone(),
                row: r.row,
                reason: "no_discount_curve",
                detail: format!("no usable {} discount curve on {}", r.currency, r.date),
            });
        }
    }
    let jobs: Vec<(&CurveKey, &Vec<CdsRow>)> = groups.iter().collect();
    let outputs: Vec<CurveOutput> = jobs
        .par_iter()
        .map(|(key, rows)| {
            let curve = &curves[&(key.0, key.2.clone())];
            calibrate_one(key, rows, curve, s)
        })
        .collect();

    let mut summary = CalibrateSummary::default();
    let mut hazard_rows = Vec::new();
    let mut residual_rows = Vec::new();
    let mut cds_used = 0;
    for o in outputs {
        cds_used += o.used;
        if !o.hazard.is_empty() {
            summary.curves += 1;
            if o.hazard.iter().all(|h| h.status == "ok") {
                summary.curves_complete += 1;
            }
        }
        for h in &o.hazard {
            *summary.nodes_by_status.entry(h.status).or_default() += 1;
        }
        summary.nodes += o.hazard.len();
        hazard_rows.extend(o.hazard);
        for r in &o.residuals {
            if r.status == "ok" {
                summary.max_abs_residual_bp = summary.max_abs_residual_bp.max(r.residual_bp.abs());
            }
        }
        residual_rows.extend(o.residuals);
        cds_rejects.extend(o.rejects);
    }
    cds_rejects.sort_by(|a, b| (&a.source, a.row).cmp(&(&b.source, b.row)));
    summary.cds = RowCounts { rows_in: cds_rows_in, used: cds_used, rejected: cds_rejects.len() };
    summary.discount = disc_counts;
    if summary.cds.rows_in != summary.cds.used + summary.cds.rejected
        || summary.discount.rows_in != summary.discount.used + summary.discount.rejected
    {
        return Err(Error::Other(format!(
            "row accounting does not add up (cds {:?}, discount {:?}); this is a bug, please report it",
            summary.cds, summary.discount
        )));
    }
    rejects.extend(cds_rejects);

    let meta = metadata(s);
    let out = &s.out;
    let paths = [out.join("hazard_curves.parquet"), out.join("calibration_residuals.parquet"), out.join("rejects.parquet")];
    write_hazard_curves(&hazard_rows, &paths[0], &meta)?;
    write_residuals(&residual_rows, &paths[1], &meta)?;
    write_rejects(&rejects, &paths[2], &meta)?;
    summary.outputs = paths.to_vec();
    Ok(summary)
}

fn metadata(s: &CalibrateSettings) -> Vec<(String, String)> {
    let b = &s.bootstrap;
    vec![
        ("hazardline.version".into(), env!("CARGO_PKG_VERSION").into()),
        ("hazardline.stage".into(), "calibrate".into()),
        ("hazardline.default_recovery".into(), format!("{}", s.recovery)),
        (
            "hazardline.accrual_on_default".into(),
            match b.accrual {
                AccrualIntegration::Standard => "standard (one interval per coupon period)".into(),
                AccrualIntegration::Exact => "exact (split at every curve node)".into(),
            },
        ),
        (
            "hazardline.infeasible_policy".into(),
            match b.infeasible {
                InfeasiblePolicy::Floor => "floor".into(),
                InfeasiblePolicy::Fail => "fail".into(),
            },
        ),
        ("hazardline.hazard_tolerance".into(), format!("{:e}", b.hazard_tolerance)),
        ("hazardline.calendar".into(), format!("weekends + {} holidays", s.calendar.holidays().len())),
    ]
}

/// Paths are shown relative to where they were given; used by `main` for messages.
pub fn show(p: &Path) -> String {
    p.display().to_string()
}
