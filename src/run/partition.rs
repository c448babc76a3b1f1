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

use crate::backtest::{self, Outcome};
use crate::stages::backtest::{backtest_members_stage, may_serve_a_cohort, CurveCoverage};
use crate::stages::calibrate::{calibrate_blocks, CalibrationParams};
use crate::stages::fits::{calibrate_intensity, CurvesForFits};
use crate::stability::SpreadEdge;
use crate::stages::stability::{grade_book, CurveSeries, RowDigest};
use crate::config::RunConfig;
use crate::parts::{DateRange, DateScope, Shard};
use crate::error::{Error, Result};
use crate::ingest::{discount, Dataset, Reject};
use crate::tables::parquet::{write_parquet, TableBuilder, WriterThread};
use crate::report::markdown::{NodeFold, ResidualFold};
use crate::tables::readback;
use crate::tables::records::*;
use crate::stability::{MarketMove, PanelBuilder};
use chrono::NaiveDate;
use std::collections::{BTreeMap, BTreeSet, HashSet};
use std::path::{Path, PathBuf};
use std::time::Instant;

/// Keeps the rows of the shard's entities in the tables calibration consumes: CDS quotes by
/// entity, bonds by issuer, bond prices by their bond's issuer. Ingestion and its rules ran on
/// the whole input before (every rule looks at one entity's rows, or at the shared tables), so
/// the rows kept, and their flags, are exactly those of a single run.
pub fn keep_shard(ds: &mut Dataset, shard: Shard) {
    if shard.count == 1 {
        return;
    }
    let mut dropped: Vec<(&'static str, usize)> = Vec::new();
    if let Some(p) = &mut ds.cds {
        let before = p.rows.len();
        let own: Vec<bool> = (0..p.entities.len() as u32).map(|i| shard.owns(p.entities.name(i))).collect();
        let keep: Vec<bool> = p.rows.iter().map(|r| own[r.entity as usize]).collect();
        retain_quotes(p, &mut ds.cds_flags, &keep);
        dropped.push((crate::ingest::cds::TABLE, before - p.rows.len()));
    }
    if let Some(b) = &mut ds.bonds {
        let before = b.rows.len();
        b.rows.retain(|(r, _)| shard.owns(&r.entity));
        dropped.push((crate::ingest::tables::BONDS, before - b.rows.len()));
        let kept: HashSet<String> = b.rows.iter().map(|(r, _)| r.bond.clone()).collect();
        if let Some(q) = &mut ds.bond_quotes {
            let before = q.rows.len();
            q.rows.retain(|(r, _)| kept.contains(&r.bond));
            dropped.push((crate::ingest::tables::BOND_QUOTES, before - q.rows.len()));
        }
    }
    // The shard's own accounting: other shards' rows are out of its scope (the merge accounts
    // for the whole input).
    leave_out(&mut ds.counts, dropped);
}

/// Keeps the CDS quotes (and their flag bits) where `keep` is true, and gives back the room of
/// the others: the panel of the whole input stays allocated otherwise until the calibration
/// ends (a shrink of a large allocation is done in place by the allocator, without a copy).
fn retain_quotes(p: &mut crate::ingest::cds::CdsPanel, flags: &mut Vec<u8>, keep: &[bool]) {
    let mut it = keep.iter();
    p.rows.retain(|_| *it.next().unwrap_or(&false));
    if flags.len() == keep.len() {
        let mut it = keep.iter();
        flags.retain(|_| *it.next().unwrap_or(&false));
    }
    p.rows.shrink_to_fit();
    flags.shrink_to_fit();
}

/// Takes rows a part cut away out of its accounting (the merge accounts for the whole input).
fn leave_out(counts: &mut [crate::ingest::TableCounts], dropped: Vec<(&'static str, usize)>) {
    for (table, n) in dropped {
        for c in counts.iter_mut().filter(|c| c.table == table) {
            c.rows_in -= n;
            c.used -= n;
        }
    }
}

/// Each entity's last usable CDS quote date in the panel: where the data on it ends.
pub fn data_ends(ds: &Dataset) -> BTreeMap<String, NaiveDate> {
    let mut out = BTreeMap::new();
    if let Some(p) = &ds.cds {
        let mut last: Vec<Option<NaiveDate>> = vec![None; p.entities.len()];
        for r in &p.rows {
            let slot = &mut last[r.entity as usize];
            *slot = Some(slot.map_or(r.date, |d| d.max(r.date)));
        }
        for (i, d) in last.into_iter().enumerate() {
            if let Some(d) = d {
                out.insert(p.entities.name(i as u32).to_string(), d);
            }
        }
    }
    out
}

/// Cuts `ds` (after [`keep_shard`]) to the curve dates of `range`, and returns the
/// [`DateScope`] of the part. The CDS quotes outside the range leave the part's accounting,
/// but some stay in the panel as a margin that is calibrated and never written: those within
/// the backtest's look-back before the range (a cohort date in the range may use a curve
/// dated before it) and every quote of a CIR name (the CIR fit runs day after day from the
/// name's first curve: the free mode starts each day from the day before, the
/// fixed-kappa-sigma mode's windows count the name's days from its first). Bond quotes are
/// cut to the range (their fits look at one day).
pub fn keep_dates(ds: &mut Dataset, range: DateRange, cfg: &RunConfig) -> DateScope {
    let data_end = data_ends(ds);
    if range.is_all() {
        return DateScope { range, data_end };
    }
    let lookback = chrono::Duration::days(cfg.backtest.core.lookback_days.max(0));
    let margin_from = range.from.filter(|_| cfg.backtest.enabled).map(|f| (f.checked_sub_signed(lookback).unwrap_or(NaiveDate::MIN), f));
    let mut dropped: Vec<(&'static str, usize)> = Vec::new();
    if let Some(p) = &mut ds.cds {
        let s = &cfg.intensity;
        let cir: Vec<bool> = (0..p.entities.len() as u32).map(|i| s.cir && s.cir_entities.as_ref().is_none_or(|l| l.iter().any(|x| x == p.entities.name(i)))).collect();
        let mut outside = 0;
        let keep: Vec<bool> = p
            .rows
            .iter()
            .map(|r| {
                if range.contains(r.date) {
                    return true;
                }
                outside += 1;
                cir[r.entity as usize] || margin_from.is_some_and(|(a, b)| r.date >= a && r.date < b)
            })
            .collect();
        retain_quotes(p, &mut ds.cds_flags, &keep);
        dropped.push((crate::ingest::cds::TABLE, outside));
    }
    if let Some(q) = &mut ds.bond_quotes {
        let before = q.rows.len();
        q.rows.retain(|(r, _)| range.contains(r.date));
        dropped.push((crate::ingest::tables::BOND_QUOTES, before - q.rows.len()));
    }
    leave_out(&mut ds.counts, dropped);
    DateScope { range, data_end }
}

/// What a partition says about itself (`partition.json`).
#[derive(Debug, Clone, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct PartitionMeta {
    pub tool: String,
    pub version: String,
    /// SHA-256 of the pipeline file the shard ran.
    pub pipeline_sha256: String,
    pub shard: u32,
    pub shards: u32,
    pub curves: usize,
    pub curves_complete: usize,
    pub max_abs_residual_bp: f64,
    /// First and last CDS curve date of the shard (ISO dates).
    pub curve_dates: Option<(String, String)>,
    /// Entities with at least one CDS curve.
    pub curve_entities: Vec<String>,
    /// Entities quoted in more than one currency.
    pub multi_currency: Vec<String>,
    /// Recoveries of the backtest members, base first.
    pub recoveries: Vec<f64>,
    /// First and last curve date of the part's date range (ISO dates; None: open).
    #[serde(default)]
    pub dates_from: Option<String>,
    #[serde(default)]
    pub dates_to: Option<String>,
}

impl PartitionMeta {
    /// The part's date range.
    pub fn range(&self, path: &Path) -> Result<DateRange> {
        let date = |s: &Option<String>| s.as_deref().map(|s| parse_date(path, s)).transpose();
        Ok(DateRange { from: date(&self.dates_from)?, to: date(&self.dates_to)? })
    }
}

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
    (name.to_string(), t.elapsed().as_secs_f64(), rss, peak)
}

/// The order of the `hazard_curves` table: CDS nodes first, by (date, entity, currency),
/// then the bond nodes by the same key; a curve's nodes keep their order (a stable sort).
pub fn sort_hazard(rows: &mut [HazardCurveRow]) {
    rows.sort_by(|a, b| (a.source != "cds", a.date, &a.entity, &a.currency).cmp(&(b.source != "cds", b.date, &b.entity, &b.currency)));
}

/// The order of the `calibration_residuals` table: the bootstrap's residuals first, by (date,
/// entity, currency), then the other methods' by (method, date, entity, currency); a curve's
/// residuals keep their order (a stable sort).
pub fn sort_residuals(rows: &mut [ResidualRow]) {
    rows.sort_by(|a, b| (a.method != "bootstrap", a.method, a.date, &a.entity, &a.currency).cmp(&(b.method != "bootstrap", b.method, b.date, &b.entity, &b.currency)));
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
    /// None for a shard's part: the merge digests the rows it reads back.
    digest: Option<RowDigest<'a>>,
}

impl<'a> RowSinks<'a> {
    /// Starts `hazard_curves` and `calibration_residuals` in `dir` (single files, or folders
    /// of a file per year when `split`: see [`hazard_table`]), each written on a thread of
    /// its own; `report`: what the report takes from them is gathered on the way (a whole run;
    /// none for a shard's part).
    pub fn create(dir: &Path, meta: &[(String, String)], digest: Option<RowDigest<'a>>, report: Option<(NodeFold, ResidualFold)>, split: bool) -> Result<Self> {
        let (nodes, residuals) = report.map_or((None, None), |(a, b)| (Some(a), Some(b)));
        let hazard = WriterThread::spawn(hazard_table(dir, meta, split)?, nodes);
        let residuals = WriterThread::spawn(residual_table(dir, meta, split)?, residuals);
        Ok(RowSinks { hazard, residuals, digest })
    }

    /// Node rows, in the table's order, after those already given.
    pub fn nodes(&mut self, rows: Vec<HazardCurveRow>) -> Result<()> {
        if let Some(d) = &mut self.digest {
            d.nodes(&rows);
        }
        self.hazard.push(rows)
    }

    /// Residual rows, in the table's order, after those already given.
    pub fn residual_rows(&mut self, rows: Vec<ResidualRow>) -> Result<()> {
        if let Some(d) = &mut self.digest {
            d.residuals(&rows);
        }
        self.residuals.push(rows)
    }

    /// Appends `hazard` and `residuals` in the tables' order ([`sort_hazard`],
    /// [`sort_residuals`]) and closes both tables; returns the digest and the report's folds.
    pub fn finish(mut self, mut hazard: Vec<HazardCurveRow>, mut residuals: Vec<ResidualRow>) -> Result<(Option<RowDigest<'a>>, Option<ReportFolds>)> {
        sort_hazard(&mut hazard);
        sort_residuals(&mut residuals);
        self.nodes(hazard)?;
        self.residual_rows(residuals)?;
        let RowSinks { hazard, residuals, digest } = self;
        let (_, nodes) = hazard.finish()?;
        let (_, residuals) = residuals.finish()?;
        Ok((digest, nodes.zip(residuals)))
    }
}

/// Runs the per-entity half of a run on `ds` (already cut to the shard with [`keep_shard`]).
/// The CDS node and residual rows go to `sinks` block by block as the curves are calibrated;
/// the curves themselves are kept only where a later step reads them (the bond and CIR fits,
/// the backtest's curves near a cohort date), the stability series being taken on the way.
/// `multi` is [`crate::stages::stability::multi_currency`] of the panel.
pub fn compute_partition(ds: &mut Dataset, cfg: &RunConfig, params: &CalibrationParams, shard: Shard, scope: &DateScope, sinks: &mut RowSinks, multi: &BTreeSet<String>) -> Result<(Partition, Vec<StageTiming>)> {
    let mut timings = Vec::new();
    let t = Instant::now();
    let grades = grade_book(ds);
    let for_fits = CurvesForFits::new(ds, &cfg.intensity);
    let period = ds.cds.as_ref().and_then(|p| p.quote_period());
    let serves = may_serve_a_cohort(period, params, &cfg.backtest);
    let backtest = cfg.backtest.enabled;
    let mut series = CurveSeries::new(&grades, multi);
    let mut coverage = CurveCoverage::default();
    let mut kept = BTreeMap::new();
    let mut cal = if cfg.cds_bootstrap {
        // Calibration (on rayon's threads) and the handling of its finished blocks (writing,
        // digest, series: serial work) overlap: a second thread takes each block from a channel
        // that holds one, so at most three blocks are alive at once.
        let (tx, rx) = std::sync::mpsc::sync_channel::<crate::stages::calibrate::CurveBlock>(1);
        let (series, coverage, kept) = (&mut series, &mut coverage, &mut kept);
        let (serves, for_fits, range) = (&serves, &for_fits, scope.range);
        std::thread::scope(|threads| {
            let consumer = threads.spawn(move || -> Result<()> {
                for block in rx {
                    sinks.nodes(block.hazard)?;
                    sinks.residual_rows(block.residuals)?;
                    for (key, curve) in block.curves {
                        if range.contains(key.0) {
                            coverage.add(key.0, &key.1);
                            series.add(key.0, &key.1, &key.2, &curve);
                        }
                        if (backtest && serves(key.0)) || for_fits.wants(&key) {
                            kept.insert(key, curve);
                        }
                    }
                }
                Ok(())
            });
            let cal = calibrate_blocks(ds, params, range, move |block| tx.send(block).map_err(|_| Error::Other("the writer of the calibrated curves stopped".into())));
            let consumed = consumer.join().map_err(|_| Error::Other("the writer of the calibrated curves failed; this is a bug, please report it".into()))?;
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
        // panel's rows can go.
        p.release_rows();
    }
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
        // Every part builds the same discount curves from the whole discount table.
        rejects.retain(|r| r.table != discount::TABLE);
        discount_rows.clear();
    }
    let part = Partition {
        hazard: std::mem::take(&mut fits.hazard),
        residuals: std::mem::take(&mut fits.residuals),
        params: std::mem::take(&mut fits.params),
        basis: std::mem::take(&mut fits.basis),
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

const OUTCOMES: [(Outcome, &str); 3] = [(Outcome::Defaulted, "defaulted"), (Outcome::Survived, "survived"), (Outcome::Censored, "censored")];

fn outcome_name(o: Outcome) -> &'static str {
    OUTCOMES.iter().find(|(x, _)| *x == o).map_or("censored", |(_, n)| n)
}

/// A shard's part folder being written: under a temporary name beside `dir` until
/// [`write_partition`] renames it, so a folder that exists is whole.
pub struct PartFolder {
    pub dir: PathBuf,
    pub work: PathBuf,
}

/// An empty folder beside `dir`, under a temporary name of this process, in which `dir` is
/// assembled before it is renamed into place (so a folder that exists is whole).
pub fn work_folder(dir: &Path) -> Result<PathBuf> {
    let parent = dir.parent().unwrap_or(Path::new(".")).to_path_buf();
    let name = dir.file_name().map(|n| n.to_string_lossy().to_string()).unwrap_or_else(|| "part".into());
    let work = parent.join(format!(".{name}.partial-{}", std::process::id()));
    let _ = std::fs::remove_dir_all(&work);
    std::fs::create_dir_all(&work).map_err(|e| Error::Write { path: work.clone(), message: e.to_string() })?;
    Ok(work)
}

impl PartFolder {
    pub fn create(dir: &Path) -> Result<PartFolder> {
        Ok(PartFolder { dir: dir.to_path_buf(), work: work_folder(dir)? })
    }

    /// The sinks of the part's node and residual rows (no digest: the merge digests them).
    pub fn sinks<'a>(&self) -> Result<RowSinks<'a>> {
        RowSinks::create(&self.work, &[], None, None, false)
    }
}

/// Finishes a part folder: the rows `part` still holds go after those `sinks` took, the other
/// tables and `partition.json` are written, and the folder is renamed into place.
pub fn write_partition(folder: PartFolder, sinks: RowSinks, mut part: Partition, shard: Shard, pipeline_sha256: &str) -> Result<()> {
    let PartFolder { dir, work } = folder;
    let dir = dir.as_path();
    let none: &[(String, String)] = &[];
    sinks.finish(std::mem::take(&mut part.hazard), std::mem::take(&mut part.residuals))?;
    write_intensity_params(&part.params, &work.join("intensity_params.parquet"), none)?;
    write_basis(&part.basis, &work.join("cds_bond_basis.parquet"), none)?;
    write_discount_curves(&part.discount, &work.join("discount_curves.parquet"), none)?;
    write_rejects(&part.rejects, &work.join("rejects.parquet"), none)?;

    let o = &part.curve_obs;
    let mut df = TableBuilder::new()
        .strings("series", o.observations().map(|x| Some(x.series)))
        .strings("entity", o.observations().map(|x| Some(x.entity)))
        .ints("grade", o.observations().map(|x| x.grade.map(i64::from)))
        .dates("date", o.observations().map(|x| Some(x.date)))
        .floats("value", o.observations().map(|x| Some(x.value)))
        .finish()?;
    write_parquet(&mut df, &work.join("stability_series.parquet"), none)?;
    let m = &part.market;
    let mut df = TableBuilder::new()
        .strings("entity", m.iter().map(|x| Some(&x.entity)))
        .dates("date", m.iter().map(|x| Some(x.date)))
        .floats("mean_abs_change_bp", m.iter().map(|x| Some(x.mean_abs_change_bp)))
        .floats("mean_level_bp", m.iter().map(|x| Some(x.mean_level_bp)))
        .finish()?;
    write_parquet(&mut df, &work.join("stability_market.parquet"), none)?;
    // One row per (edge, tenor); an edge without par spreads (upfront quotes only) keeps one
    // row with empty tenor and spread, since it still ends the carry of the part before.
    let e: Vec<(&SpreadEdge, Option<(u32, f64)>)> = part
        .edges
        .iter()
        .flat_map(|x| {
            let rows: Vec<Option<(u32, f64)>> = if x.spreads.is_empty() { vec![None] } else { x.spreads.iter().map(|(t, v)| Some((*t, *v))).collect() };
            rows.into_iter().map(move |r| (x, r))
        })
        .collect();
    let mut df = TableBuilder::new()
        .strings("entity", e.iter().map(|(x, _)| Some(&*x.entity)))
        .strings("edge", e.iter().map(|(x, _)| Some(if x.last { "last" } else { "first" })))
        .dates("date", e.iter().map(|(x, _)| Some(x.date)))
        .ints("tenor_months", e.iter().map(|(_, r)| r.map(|r| i64::from(r.0))))
        .floats("spread_bp", e.iter().map(|(_, r)| r.map(|r| r.1)))
        .finish()?;
    write_parquet(&mut df, &work.join("stability_edges.parquet"), none)?;
    let rows: Vec<(f64, &backtest::Observation)> = part.members.iter().flat_map(|(r, v)| v.iter().map(move |o| (*r, o))).collect();
    let mut df = TableBuilder::new()
        .floats("recovery", rows.iter().map(|(r, _)| Some(*r)))
        .strings("entity", rows.iter().map(|(_, o)| Some(&o.entity)))
        .dates("cohort", rows.iter().map(|(_, o)| Some(o.cohort)))
        .ints("horizon", rows.iter().map(|(_, o)| Some(i64::from(o.horizon_years))))
        .ints("grade", rows.iter().map(|(_, o)| o.grade.map(i64::from)))
        .floats("implied_pd", rows.iter().map(|(_, o)| Some(o.implied_pd)))
        .strings("outcome", rows.iter().map(|(_, o)| Some(outcome_name(o.outcome))))
        .floats("exposure_years", rows.iter().map(|(_, o)| Some(o.exposure_years)))
        .floats("integrated_hazard", rows.iter().map(|(_, o)| Some(o.integrated_hazard)))
        .floats("spread_bp", rows.iter().map(|(_, o)| o.spread_bp))
        .finish()?;
    write_parquet(&mut df, &work.join("backtest_members.parquet"), none)?;

    let meta = PartitionMeta {
        tool: "hazardline".into(),
        version: env!("CARGO_PKG_VERSION").into(),
        pipeline_sha256: pipeline_sha256.to_string(),
        shard: shard.index,
        shards: shard.count,
        curves: part.curves,
        curves_complete: part.curves_complete,
        max_abs_residual_bp: part.max_abs_residual_bp,
        curve_dates: part.curve_dates.map(|(a, b)| (a.to_string(), b.to_string())),
        curve_entities: part.curve_entities.clone(),
        multi_currency: part.multi_currency.clone(),
        recoveries: part.members.iter().map(|(r, _)| *r).collect(),
        dates_from: part.range.from.map(|d| d.to_string()),
        dates_to: part.range.to.map(|d| d.to_string()),
    };
    let text = serde_json::to_string_pretty(&meta).map_err(|e| Error::Other(format!("partition.json: {e}")))?;
    crate::tables::manifest::write_text(&work.join("partition.json"), &(text + "\n"))?;
    if dir.exists() {
        std::fs::remove_dir_all(dir).map_err(|e| Error::Write { path: dir.to_path_buf(), message: e.to_string() })?;
    }
    std::fs::rename(&work, dir).map_err(|e| Error::Write { path: dir.to_path_buf(), message: e.to_string() })
}

/// Reads `partition.json` of a partition folder.
pub fn read_meta(dir: &Path) -> Result<PartitionMeta> {
    let path = dir.join("partition.json");
    let text = std::fs::read_to_string(&path).map_err(|e| Error::Read { path: path.clone(), format: "JSON", message: e.to_string() })?;
    serde_json::from_str(&text).map_err(|e| Error::Read { path, format: "JSON", message: e.to_string() })
}

fn parse_date(path: &Path, s: &str) -> Result<NaiveDate> {
    NaiveDate::parse_from_str(s, "%Y-%m-%d").map_err(|e| Error::Read { path: path.to_path_buf(), format: "JSON", message: format!("date `{s}`: {e}") })
}

fn missing(path: &Path, column: &str, row: usize) -> Error {
    Error::Read { path: path.to_path_buf(), format: "Parquet", message: format!("row {}: column {column} is empty", row + 1) }
}

/// A text column as shared labels; an empty cell is an error naming its row.
fn required_labels(df: &polars::prelude::DataFrame, path: &Path, name: &str) -> Result<Vec<crate::tables::records::Label>> {
    let nulls = df.column(name).map(|c| c.null_count()).unwrap_or(0);
    if nulls > 0 {
        let i = readback::strs(df, path, name)?.iter().position(Option::is_none).unwrap_or(0);
        return Err(missing(path, name, i));
    }
    readback::labels(df, path, name)
}

/// Streams the node and residual rows of the parts in `dirs` (shard order) into `sinks`: the
/// CDS rows, which every part holds first and in the tables' order, by a k-way merge on (date,
/// entity, currency) that keeps a curve's rows together, read a slice at a time; the rows
/// after them (the bond and CIR fits') are returned, for [`RowSinks::finish`] to sort in.
pub fn merge_part_rows(dirs: &[PathBuf], sinks: &mut RowSinks) -> Result<(Vec<HazardCurveRow>, Vec<ResidualRow>)> {
    let cursors = dirs.iter().map(|d| readback::hazard_cursor(&d.join("hazard_curves.parquet"))).collect::<Result<Vec<_>>>()?;
    let hazard = merge_sorted(cursors, |r| r.source == "cds", |r| (r.date, r.entity.clone(), r.currency.clone()), |rows| sinks.nodes(rows))?;
    let cursors = dirs.iter().map(|d| readback::residual_cursor(&d.join("calibration_residuals.parquet"))).collect::<Result<Vec<_>>>()?;
    let residuals = merge_sorted(cursors, |r| r.method == "bootstrap", |r| (r.date, r.entity.clone(), r.currency.clone()), |rows| sinks.residual_rows(rows))?;
    Ok((hazard, residuals))
}

/// Rows handed on at a time by [`merge_sorted`].
const MERGED_ROWS: usize = 1 << 16;

/// Merges the leading rows (`leads`) of sorted cursors by `key` into `emit`, a run of equal
/// keys at a time (ties go to the earlier cursor, as a stable sort of the concatenation would
/// have it); returns every row after the leading ones, cursor by cursor.
fn merge_sorted<T, K: Ord>(mut cursors: Vec<readback::RowCursor<T>>, leads: impl Fn(&T) -> bool, key: impl Fn(&T) -> K, mut emit: impl FnMut(Vec<T>) -> Result<()>) -> Result<Vec<T>> {
    let mut out = Vec::with_capacity(MERGED_ROWS);
    loop {
        let mut best: Option<(usize, K)> = None;
        for (i, c) in cursors.iter_mut().enumerate() {
            if let Some(r) = c.peek()?.filter(|r| leads(r)) {
                let k = key(r);
                if best.as_ref().is_none_or(|(_, b)| k < *b) {
                    best = Some((i, k));
                }
            }
        }
        let Some((i, k)) = best else { break };
        while cursors[i].peek()?.is_some_and(|r| leads(r) && key(r) == k) {
            out.extend(cursors[i].next_row()?);
        }
        if out.len() >= MERGED_ROWS {
            emit(std::mem::replace(&mut out, Vec::with_capacity(MERGED_ROWS)))?;
        }
    }
    emit(out)?;
    let mut rest = Vec::new();
    for c in cursors.iter_mut() {
        while let Some(r) = c.next_row()? {
            rest.push(r);
        }
    }
    Ok(rest)
}

/// Reads a partition folder written by [`write_partition`] (all but its node and residual
/// rows, see [`merge_part_rows`]).
pub fn read_partition(dir: &Path) -> Result<(PartitionMeta, Partition)> {
    use readback::{dates, floats, ints, read_frame, strs};
    let meta = read_meta(dir)?;
    // The node and residual rows stay on disk: `merge_part_rows` streams them.
    let mut part = Partition {
        params: readback::intensity_params(&dir.join("intensity_params.parquet"))?,
        basis: readback::basis(&dir.join("cds_bond_basis.parquet"))?,
        discount: readback::discount_curves(&dir.join("discount_curves.parquet"))?,
        rejects: readback::rejects(&dir.join("rejects.parquet"))?,
        curves: meta.curves,
        curves_complete: meta.curves_complete,
        max_abs_residual_bp: meta.max_abs_residual_bp,
        curve_entities: meta.curve_entities.clone(),
        multi_currency: meta.multi_currency.clone(),
        shard: meta.shard,
        range: meta.range(&dir.join("partition.json"))?,
        ..Default::default()
    };
    let json = dir.join("partition.json");
    part.curve_dates = match &meta.curve_dates {
        Some((a, b)) => Some((parse_date(&json, a)?, parse_date(&json, b)?)),
        None => None,
    };

    let path = dir.join("stability_series.parquet");
    let df = read_frame(&path)?;
    let (s, e, g, d, v) = (required_labels(&df, &path, "series")?, required_labels(&df, &path, "entity")?, ints(&df, &path, "grade")?, dates(&df, &path, "date")?, floats(&df, &path, "value")?);
    for i in 0..df.height() {
        part.curve_obs.push(&s[i], &e[i], g[i].map(|x| x as u32), d[i].ok_or_else(|| missing(&path, "date", i))?, v[i].ok_or_else(|| missing(&path, "value", i))?);
    }

    let path = dir.join("stability_market.parquet");
    let df = read_frame(&path)?;
    let (e, d, c, l) = (required_labels(&df, &path, "entity")?, dates(&df, &path, "date")?, floats(&df, &path, "mean_abs_change_bp")?, floats(&df, &path, "mean_level_bp")?);
    part.market = (0..df.height())
        .map(|i| {
            Ok(MarketMove {
                entity: e[i].clone(),
                date: d[i].ok_or_else(|| missing(&path, "date", i))?,
                mean_abs_change_bp: c[i].ok_or_else(|| missing(&path, "mean_abs_change_bp", i))?,
                mean_level_bp: l[i].ok_or_else(|| missing(&path, "mean_level_bp", i))?,
            })
        })
        .collect::<Result<_>>()?;

    let path = dir.join("stability_edges.parquet");
    let df = read_frame(&path)?;
    let (e, side, d, t, v) = (required_labels(&df, &path, "entity")?, strs(&df, &path, "edge")?, dates(&df, &path, "date")?, ints(&df, &path, "tenor_months")?, floats(&df, &path, "spread_bp")?);
    for i in 0..df.height() {
        let last = match side[i].as_deref() {
            Some("last") => true,
            Some("first") => false,
            _ => return Err(Error::Read { path: path.clone(), format: "Parquet", message: format!("row {}: column edge is not `first` or `last`", i + 1) }),
        };
        let date = d[i].ok_or_else(|| missing(&path, "date", i))?;
        let same = part.edges.last().is_some_and(|x: &SpreadEdge| x.last == last && x.date == date && x.entity == e[i]);
        if !same {
            part.edges.push(SpreadEdge { entity: e[i].clone(), date, last, spreads: BTreeMap::new() });
        }
        if let (Some(t), Some(v), Some(x)) = (t[i], v[i], part.edges.last_mut()) {
            x.spreads.insert(t as u32, v);
        }
    }

    let path = dir.join("backtest_members.parquet");
    let df = read_frame(&path)?;
    let (r, mut e, c, h, g, pd, mut o, x, ih, sp) = (
        floats(&df, &path, "recovery")?,
        strs(&df, &path, "entity")?,
        dates(&df, &path, "cohort")?,
        ints(&df, &path, "horizon")?,
        ints(&df, &path, "grade")?,
        floats(&df, &path, "implied_pd")?,
        strs(&df, &path, "outcome")?,
        floats(&df, &path, "exposure_years")?,
        floats(&df, &path, "integrated_hazard")?,
        floats(&df, &path, "spread_bp")?,
    );
    let mut members: Vec<(f64, Vec<backtest::Observation>)> = meta.recoveries.iter().map(|r| (*r, Vec::new())).collect();
    for i in 0..df.height() {
        let rec = r[i].ok_or_else(|| missing(&path, "recovery", i))?;
        let slot = members
            .iter_mut()
            .find(|(x, _)| x.to_bits() == rec.to_bits())
            .ok_or_else(|| Error::Read { path: path.clone(), format: "Parquet", message: format!("row {}: recovery {rec} is not listed in partition.json", i + 1) })?;
        let outcome_text = o[i].take().ok_or_else(|| missing(&path, "outcome", i))?;
        let outcome = OUTCOMES
            .iter()
            .find(|(_, n)| *n == outcome_text)
            .map(|(x, _)| *x)
            .ok_or_else(|| Error::Read { path: path.clone(), format: "Parquet", message: format!("row {}: unknown outcome `{outcome_text}`", i + 1) })?;
        slot.1.push(backtest::Observation {
            entity: e[i].take().ok_or_else(|| missing(&path, "entity", i))?,
            cohort: c[i].ok_or_else(|| missing(&path, "cohort", i))?,
            horizon_years: h[i].ok_or_else(|| missing(&path, "horizon", i))? as u32,
            grade: g[i].map(|x| x as u32),
            bucket: backtest::Bucket::Ungraded,
            implied_pd: pd[i].ok_or_else(|| missing(&path, "implied_pd", i))?,
            outcome,
            exposure_years: x[i].ok_or_else(|| missing(&path, "exposure_years", i))?,
            integrated_hazard: ih[i].ok_or_else(|| missing(&path, "integrated_hazard", i))?,
            spread_bp: sp[i],
        });
    }
    part.members = members;
    Ok((meta, part))
}

#[cfg(test)]
mod tests {
    use super::*;

    fn node(day: u32, entity: &str, source: &'static str, tenor: &str) -> HazardCurveRow {
        let date = NaiveDate::from_ymd_opt(2024, 5, day).unwrap();
        HazardCurveRow {
            date,
            entity: entity.into(),
            currency: "EUR".into(),
            source,
            tenor: tenor.into(),
            maturity: date,
            node_date: date,
            hazard: Some(f64::from(day) / 100.0),
            survival: None,
            status: "ok",
            recovery: 0.4,
            iterations: 3,
            detail: None,
        }
    }

    #[test]
    fn merging_parts_gives_the_order_of_one_sort() {
        // Three parts, each with its CDS curves in (date, entity) order and then its bond
        // nodes; entity names spread over the parts. The merged CDS rows, then the sorted rest,
        // must be the concatenation put through the table's own stable sort.
        let dir = tempfile::tempdir().unwrap();
        let names = [["Ash", "Fir"], ["Beech", "Oak"], ["Cedar", "Yew"]];
        let mut all = Vec::new();
        let mut dirs = Vec::new();
        for (k, pair) in names.iter().enumerate() {
            let mut rows = Vec::new();
            for day in [2, 3, 6, 7] {
                for e in pair {
                    if (day + k as u32) % 5 != 0 {
                        rows.extend(["1Y", "5Y", "10Y"].iter().map(|t| node(day, e, "cds", t)));
                    }
                }
            }
            rows.push(node(3, pair[1], "bond", "bond"));
            rows.push(node(2, pair[0], "bond", "bond"));
            rows.sort_by_key(|r| r.source != "cds");
            let d = dir.path().join(format!("part-{k}"));
            let mut w = hazard_writer(&d.join("hazard_curves.parquet"), &[]).unwrap();
            w.push(rows.iter().cloned()).unwrap();
            w.finish().unwrap();
            residual_writer(&d.join("calibration_residuals.parquet"), &[]).unwrap().finish().unwrap();
            all.extend(rows);
            dirs.push(d);
        }
        let out = dir.path().join("out");
        let mut sinks = RowSinks::create(&out, &[], None, None, false).unwrap();
        let (rest, residuals) = merge_part_rows(&dirs, &mut sinks).unwrap();
        assert_eq!((rest.len(), residuals.len()), (6, 0));
        sinks.finish(rest, residuals).unwrap();
        sort_hazard(&mut all);
        assert_eq!(readback::hazard_curves(&out.join("hazard_curves.parquet")).unwrap(), all);
    }
}
