//! Entity shards of a run, and the per-shard results that a merge combines.
//!
//! A run splits into two halves. The first works on each entity alone: the CDS bootstrap, the
//! bond and CIR fits, the backtest members (implied PD, outcome and exposure of an entity in
//! each cohort) and the curve series of the stability stage. The second pools entities: data
//! quality accounting, bucket tests, risk premia, cross-sectional stability, flags, report.
//!
//! [`compute_partition`] runs the first half for the entities of one [`Shard`] (all of them in
//! a single run): the CDS node and residual rows stream into a [`RowSinks`] (the run's tables,
//! or the part's), the rest comes back as a [`Partition`]; a sharded run writes it to a folder
//! with [`write_partition`]; `merge` reads every shard's folder back ([`read_partition`],
//! and [`merge_part_rows`] for the streamed rows) and runs the second half on them, which is
//! the same code a single run runs on its one partition.
//! Each table of a partition is written with the same writers as the run's tables, so floats
//! and labels come back bit for bit, and the second half puts every table in one canonical
//! order, so the merged run equals the single run byte for byte.

use crate::backtest;
use crate::config::RunConfig;
use crate::error::{Error, Result};
use crate::ingest::{discount, Dataset, Reject};
use crate::parts::{DateRange, DateScope, Shard};
use crate::report::markdown::{NodeFold, ResidualFold};
use crate::stability::{MarketMove, PanelBuilder, SpreadEdge};
use crate::stages::backtest::{backtest_members_stage, may_serve_a_cohort, CurveCoverage};
use crate::stages::calibrate::{calibrate_blocks, CalibrationParams};
use crate::stages::fits::{calibrate_intensity, CurvesForFits};
use crate::stages::stability::{grade_book, CurveSeries, RowDigest};
use crate::tables::parquet::{FrameTable, WriterThread};
use crate::tables::*;
use chrono::NaiveDate;
use std::collections::{BTreeMap, BTreeSet};
use std::path::Path;
use std::time::Instant;

/// The per-entity results of one shard (or of the whole universe).
#[derive(Debug, Clone, Default)]
pub struct Partition {
    /// Node rows not yet handed to a [`RowSinks`]: after [`compute_partition`], those of the
    /// bond fits (the CDS nodes went to the sinks as they were computed); after
    /// [`read_partition`], all of the part's.
    pub hazard: Vec<HazardCurveRow>,
    /// Residual rows not yet handed to a [`RowSinks`], as for `hazard`.
    pub residuals: Vec<ResidualRow>,
    pub params: Vec<IntensityParamRow>,
    pub basis: Vec<BasisRow>,
    /// Sensitivity rows not yet handed to a [`RowSinks`]: none after [`compute_partition`]
    /// (they go to the sinks as the curves are calibrated); after [`read_partition`], the
    /// part's (in the table's order once merged).
    pub sensitivities: Vec<SensitivityRow>,
    pub discount: Vec<DiscountCurveRow>,
    /// Rows the calibration stages rejected.
    pub rejects: Vec<Reject>,
    /// Curve series of the stability stage.
    pub curve_obs: PanelBuilder,
    pub market: Vec<MarketMove>,
    /// Each series entity's first and last curve's spreads, for the moves across the
    /// boundaries of date ranges.
    pub edges: Vec<SpreadEdge>,
    /// Backtest members per recovery, base first.
    pub members: Vec<(f64, Vec<backtest::Observation>)>,
    pub curves: usize,
    pub curves_complete: usize,
    pub max_abs_residual_bp: f64,
    pub curve_dates: Option<(NaiveDate, NaiveDate)>,
    pub curve_entities: Vec<String>,
    pub multi_currency: Vec<String>,
    /// The entity shard (its index) and the date range of this part.
    pub shard: u32,
    pub range: DateRange,
}

/// One stage's wall time and the memory after it.
pub type StageTiming = (String, f64, f64, f64);

fn timed(name: &str, t: Instant) -> StageTiming {
    let (rss, peak) = crate::run::memory_mib();
    logged((name.to_string(), t.elapsed().as_secs_f64(), rss, peak))
}

/// Logs a stage's timing (target `hazardline::stage`: fields stage, seconds, rss_mib,
/// peak_rss_mib), as `--log-format json` writes it for schedulers, and hands it back.
pub fn logged(t: StageTiming) -> StageTiming {
    tracing::info!(
        target: "hazardline::stage",
        stage = %t.0,
        seconds = t.1,
        rss_mib = t.2,
        peak_rss_mib = t.3,
        "stage done"
    );
    t
}

/// What the report takes from the node and residual tables (see [`NodeFold`]).
pub type ReportFolds = (NodeFold, ResidualFold);

/// Where the node and residual rows go as they are computed: written straight into their
/// tables, in the tables' order (the CDS rows as calibration hands them over, which is that
/// order; then the rest, sorted, at [`RowSinks::finish`]), and digested for the stability
/// stage on the way when this is a whole run.
pub struct RowSinks<'a> {
    hazard: WriterThread<HazardCurveRow, Option<NodeFold>>,
    residuals: WriterThread<ResidualRow, Option<ResidualFold>>,
    /// `cds_quote_conversions`: the conversions the residual rows carry.
    conversions: WriterThread<QuoteConversionRow>,
    /// `sensitivities`, gathered as frames as the curves of the sensitivity dates come and
    /// written at the end (kept as rows to the end, a whole run's were 730 MiB at 2,000 names
    /// x 10 years).
    sensitivities: FrameTable,
    /// None for a shard's part: the merge digests the rows it reads back.
    digest: Option<RowDigest<'a>>,
    /// Years whose CDS node and residual rows (and their conversions) are in files a merge
    /// copied from a part that holds the year whole ([`RowSinks::copied_years`]): digested
    /// and folded, not written again.
    copied: BTreeSet<i32>,
}

/// Cuts `rows` into runs of consecutive rows alike under `copied`, in order.
fn runs<T>(rows: Vec<T>, copied: impl Fn(&T) -> bool) -> Vec<(bool, Vec<T>)> {
    let mut out: Vec<(bool, Vec<T>)> = Vec::new();
    for r in rows {
        let c = copied(&r);
        match out.last_mut() {
            Some((k, v)) if *k == c => v.push(r),
            _ => out.push((c, vec![r])),
        }
    }
    out
}

impl<'a> RowSinks<'a> {
    /// Starts `hazard_curves` and `calibration_residuals` in `dir` (single files, or folders
    /// of a file per year when `split`: see [`hazard_table`]), each written on a thread of
    /// its own; `report`: what the report takes from them is gathered on the way (a whole run;
    /// none for a shard's part).
    pub fn create(
        dir: &Path,
        meta: &[(String, String)],
        digest: Option<RowDigest<'a>>,
        report: Option<(NodeFold, ResidualFold)>,
        split: bool,
    ) -> Result<Self> {
        let (nodes, residuals) = report.map_or((None, None), |(a, b)| (Some(a), Some(b)));
        let hazard = WriterThread::spawn(hazard_table(dir, meta, split)?, nodes);
        let residuals = WriterThread::spawn(residual_table(dir, meta, split)?, residuals);
        let conversions = WriterThread::spawn(conversion_table(dir, meta, split)?, ());
        let sensitivities = sensitivity_table(dir, meta)?;
        Ok(RowSinks { hazard, residuals, conversions, sensitivities, digest, copied: BTreeSet::new() })
    }

    /// Years whose CDS node and residual rows the caller has put in the tables' folders as
    /// whole files (the merge copies a part's file of a year the part holds whole): the rows
    /// of those years still come through [`RowSinks::nodes`] and [`RowSinks::residual_rows`],
    /// to be digested and folded in their place, but are not written again.
    pub fn copied_years(&mut self, years: BTreeSet<i32>) {
        self.copied = years;
    }

    /// Node rows, in the table's order, after those already given.
    pub fn nodes(&mut self, rows: Vec<HazardCurveRow>) -> Result<()> {
        if let Some(d) = &mut self.digest {
            d.nodes(&rows);
        }
        if self.copied.is_empty() {
            return self.hazard.push(rows);
        }
        let copied = |r: &HazardCurveRow| {
            r.source == crate::text::CurveSource::Cds && self.copied.contains(&chrono::Datelike::year(&r.date))
        };
        for (c, rows) in runs(rows, copied) {
            if c {
                self.hazard.fold_only(rows)?;
            } else {
                self.hazard.push(rows)?;
            }
        }
        Ok(())
    }

    /// Residual rows, in the table's order, after those already given.
    pub fn residual_rows(&mut self, rows: Vec<ResidualRow>) -> Result<()> {
        if let Some(d) = &mut self.digest {
            d.residuals(&rows);
        }
        if self.copied.is_empty() {
            return self.write_residuals(rows);
        }
        let copied = |r: &ResidualRow| {
            r.method == crate::text::FitMethod::Bootstrap && self.copied.contains(&chrono::Datelike::year(&r.date))
        };
        for (c, rows) in runs(rows, copied) {
            if c {
                // Their conversions are in the copied files too.
                self.conversions.fold_only(Vec::new())?;
                self.residuals.fold_only(rows)?;
            } else {
                self.write_residuals(rows)?;
            }
        }
        Ok(())
    }

    fn write_residuals(&mut self, rows: Vec<ResidualRow>) -> Result<()> {
        let conversions: Vec<QuoteConversionRow> = rows.iter().filter_map(QuoteConversionRow::of).collect();
        if !conversions.is_empty() {
            self.conversions.push(conversions)?;
        }
        self.residuals.push(rows)
    }

    /// Sensitivity rows, in the table's order, after those already given.
    pub fn sensitivity_rows(&mut self, rows: Vec<SensitivityRow>) -> Result<()> {
        if rows.is_empty() {
            return Ok(());
        }
        self.sensitivities.push(framed(&rows)?)
    }

    /// Appends `hazard` and `residuals` in the tables' order ([`sort_hazard`],
    /// [`sort_residuals`]) and `sensitivities` (already in theirs), and closes the tables;
    /// returns the digest and the report's folds.
    pub fn finish(
        mut self,
        mut hazard: Vec<HazardCurveRow>,
        mut residuals: Vec<ResidualRow>,
        sensitivities: Vec<SensitivityRow>,
    ) -> Result<(Option<RowDigest<'a>>, Option<ReportFolds>)> {
        sort_hazard(&mut hazard);
        sort_residuals(&mut residuals);
        self.nodes(hazard)?;
        self.residual_rows(residuals)?;
        self.sensitivity_rows(sensitivities)?;
        let RowSinks { hazard, residuals, conversions, sensitivities, digest, .. } = self;
        let (_, nodes) = hazard.finish()?;
        let (_, residuals) = residuals.finish()?;
        conversions.finish()?;
        sensitivities.finish()?;
        Ok((digest, nodes.zip(residuals)))
    }
}

/// Runs the per-entity half of a run on `ds` (already cut to the shard with [`keep_shard`]).
/// The CDS node and residual rows go to `sinks` block by block as the curves are calibrated;
/// the curves themselves are kept only where a later step reads them (the bond and CIR fits,
/// the backtest's curves near a cohort date), the stability series being taken on the way.
/// `multi` is [`crate::stages::stability::multi_currency`] of the panel.
pub fn compute_partition(
    ds: &mut Dataset,
    cfg: &RunConfig,
    params: &CalibrationParams,
    shard: Shard,
    scope: &DateScope,
    sinks: &mut RowSinks,
    multi: &BTreeSet<String>,
) -> Result<(Partition, Vec<StageTiming>)> {
    let mut timings = Vec::new();
    let t = Instant::now();
    let grades = grade_book(ds);
    let for_fits = CurvesForFits::new(ds, &cfg.intensity);
    let period = ds.cds.as_ref().and_then(|p| p.quote_period());
    let serves = may_serve_a_cohort(period, params, &cfg.backtest);
    let backtest = cfg.backtest.enabled;
    let mut series = CurveSeries::new(&grades, multi);
    if let Some(panel) = &ds.cds {
        series.expect_curves(panel, scope.range);
    }
    let mut coverage = CurveCoverage::default();
    let mut kept = BTreeMap::new();
    let mut cal = if cfg.cds_bootstrap {
        // Calibration (on rayon's threads) and the handling of its finished blocks (writing,
        // digest, series: serial work) overlap: a second thread takes each block from a channel
        // that holds one, so at most three blocks are alive at once.
        let (tx, rx) = std::sync::mpsc::sync_channel::<crate::stages::calibrate::CurveBlock>(1);
        let (series, coverage, kept, grades) = (&mut series, &mut coverage, &mut kept, &grades);
        let (serves, for_fits, range) = (&serves, &for_fits, scope.range);
        std::thread::scope(|threads| {
            let consumer = threads.spawn(move || -> Result<()> {
                for block in rx {
                    sinks.nodes(block.hazard)?;
                    sinks.residual_rows(block.residuals)?;
                    let mut rows = block.sensitivities;
                    for r in rows.iter_mut() {
                        r.grade = grades.grade(&r.entity, r.date).map(i64::from);
                    }
                    sinks.sensitivity_rows(rows)?;
                    for c in block.curves {
                        let crate::stages::calibrate::BlockCurve {
                            key: (date, entity, currency),
                            seniority,
                            doc_clause,
                            reference,
                            curve,
                        } = c;
                        if range.contains(date) {
                            coverage.add(date, &entity);
                            let tier = (seniority.as_deref(), doc_clause.as_deref());
                            series.add(date, &entity, &currency, tier, &curve);
                        }
                        if reference && ((backtest && serves(date)) || for_fits.wants(date, &entity, &currency)) {
                            kept.insert((date, entity.to_string(), currency.to_string()), curve);
                        }
                    }
                }
                Ok(())
            });
            let cal = calibrate_blocks(ds, params, range, true, move |block| {
                tx.send(block).map_err(|_| Error::Internal("the writer of the calibrated curves stopped".into()))
            });
            let consumed =
                consumer.join().map_err(|_| Error::Internal("the writer of the calibrated curves failed".into()))?;
            // The writer's own error says more than the calibration's "writer stopped".
            consumed?;
            cal
        })?
    } else {
        Default::default()
    };
    cal.cds_curves = kept;
    if let Some(p) = &mut ds.cds {
        // The fits and the backtest read the kept curves, which carry their own quotes: the
        // panel's rows can go (the calibration freed them piece by piece; without it, here).
        p.release_rows();
    }
    super::give_back_free_memory();
    let (curve_obs, market, edges) = series.finish();
    timings.push(timed("calibrate, curve series", t));
    let t = Instant::now();
    let mut fits = calibrate_intensity(ds, &cal, params, &cfg.intensity, scope.range)?;
    timings.push(timed("bond and CIR fits", t));

    let t = Instant::now();
    let members = if backtest { backtest_members_stage(ds, &cal, scope, params, &cfg.backtest)? } else { Vec::new() };
    timings.push(timed("backtest members", t));
    drop(cal.cds_curves);

    let mut rejects = std::mem::take(&mut cal.rejects);
    rejects.append(&mut fits.rejects);
    let mut discount_rows = std::mem::take(&mut cal.discount);
    if !(shard.is_first() && scope.range.from.is_none()) {
        // Every part builds the same discount curves from the whole discount and rate tables.
        rejects.retain(|r| r.table != discount::TABLE && r.table != crate::ingest::rates::TABLE);
        discount_rows.clear();
    }
    let part = Partition {
        hazard: std::mem::take(&mut fits.hazard),
        residuals: std::mem::take(&mut fits.residuals),
        params: std::mem::take(&mut fits.params),
        basis: std::mem::take(&mut fits.basis),
        sensitivities: Vec::new(),
        discount: discount_rows,
        rejects,
        curve_obs,
        market,
        edges,
        members,
        curves: cal.curves,
        curves_complete: cal.curves_complete,
        max_abs_residual_bp: cal.max_abs_residual_bp,
        curve_dates: coverage.dates,
        curve_entities: {
            let mut v: Vec<String> = coverage.last_by_entity.into_keys().collect();
            v.sort();
            v
        },
        multi_currency: multi.iter().cloned().collect(),
        shard: shard.index,
        range: scope.range,
    };
    Ok((part, timings))
}
