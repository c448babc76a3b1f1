//! `hazardline run`: the stages in order, into the run folder
//! `<output root>/<pipeline name>/<run label>/` with `report.md`, `charts/`, `tables/`,
//! `manifest.json` and `run.log`.
//!
//! The folder is built under a temporary name beside its final place and renamed at the end,
//! so an interrupted run leaves no folder that looks complete; each file inside is itself
//! written to a temporary name first. Everything but `run.log` is deterministic.
//!
//! A run can also be split by entity: `run --shard I/N` computes the per-entity half of the
//! run (see [`crate::run::partition`]) for shard I of N and writes it to
//! `<output root>/<pipeline name>/<run label>.shards/part-I-of-N/`; [`merge`] then reads every
//! part and finishes the run into the same run folder, byte for byte as a single run.

pub mod partition;
pub mod selfcheck;

use crate::stages::backtest::{backtest_from_members, first_defaults, write_backtest_tables, BacktestContext, BacktestResults};
use crate::stages::calibrate::{metadata, CalibrationParams};
use crate::stages::stability::{multi_currency, quality_flags, run_stability, stability_inputs, write_flags, write_stability_tables, AnyFlag, RowDigest};
use crate::stages::stability::grade_book;
use crate::ingest::Dataset;
use crate::parts::{check_tiling, DateRange, Shard};
use crate::run::partition::{compute_partition, keep_dates, keep_shard, merge_part_rows, work_folder, read_partition, write_partition, PartFolder, Partition, RowSinks, StageTiming};
use crate::config::RunConfig;
use crate::error::{Error, Result};
use crate::ingest::{load, TableCounts};
use crate::tables::manifest::{hash_file, relative, write_text, CountRecord, FileRecord, InputRecord, Manifest};
use crate::report::markdown::{self, NodeFold, ResidualFold};
use crate::tables::records::*;
use std::collections::BTreeSet;
use std::path::{Path, PathBuf};
use std::time::Instant;

/// Overrides from the command line.
#[derive(Debug, Clone, Default)]
pub struct RunOptions {
    pub out_root: Option<PathBuf>,
    pub label: Option<String>,
}

/// What a run did.
#[derive(Debug, Clone)]
pub struct RunSummary {
    pub run_dir: PathBuf,
    pub counts: Vec<TableCounts>,
    pub curves: usize,
    pub curves_complete: usize,
    pub max_abs_residual_bp: f64,
    pub flags: usize,
    pub red_flags: usize,
    pub rejected: usize,
    pub timings: Vec<(String, f64)>,
    /// Resident and peak resident memory (MiB) at the end of each stage, where the platform
    /// reports them (Linux /proc); NaN elsewhere.
    pub memory: Vec<(String, f64, f64)>,
}

/// (resident, peak resident) memory of this process in MiB, from /proc/self/status.
pub fn memory_mib() -> (f64, f64) {
    let s = std::fs::read_to_string("/proc/self/status").unwrap_or_default();
    let field = |name: &str| {
        s.lines()
            .find(|l| l.starts_with(name))
            .and_then(|l| l.split_whitespace().nth(1))
            .and_then(|v| v.parse::<f64>().ok())
            .map_or(f64::NAN, |k| k / 1024.0)
    };
    (field("VmRSS:"), field("VmHWM:"))
}

fn counts_records(stage: &str, counts: &[TableCounts]) -> Vec<CountRecord> {
    counts
        .iter()
        .map(|c| CountRecord { stage: stage.into(), table: c.table.into(), rows_in: c.rows_in as u64, used: c.used as u64, rejected: c.rejected as u64, flagged: c.flagged as u64 })
        .collect()
}

/// Every table a run writes. `intensity_params` and `cds_bond_basis` are always written, empty
/// (with their schema) when the CIR or bond fit is off, so consumers find the same files.
pub const TABLES: [&str; 20] = [
    "data_quality",
    "rejects",
    "discount_curves",
    "hazard_curves",
    "calibration_residuals",
    "intensity_params",
    "cds_bond_basis",
    "backtest_buckets",
    "backtest_hosmer_lemeshow",
    "backtest_history",
    "risk_premia",
    "stability",
    "stability_bands",
    "stability_psi",
    "stability_breaks",
    "residual_curves",
    "residual_tenors",
    "residual_worst",
    "residual_repricing",
    "flags",
];

fn calibration_params(cfg: &RunConfig) -> CalibrationParams {
    CalibrationParams { recovery: cfg.recovery, recovery_by_seniority: cfg.recovery_by_seniority.clone(), bootstrap: cfg.bootstrap, calendar: cfg.calendar.clone() }
}

/// First and last date of the usable CDS quotes (the panel is sorted by date).
fn quote_period(ds: &Dataset) -> Option<(chrono::NaiveDate, chrono::NaiveDate)> {
    ds.cds.as_ref().and_then(|p| p.quote_period())
}

fn run_label(cfg: &RunConfig, opts: &RunOptions, period: Option<(chrono::NaiveDate, chrono::NaiveDate)>) -> String {
    opts.label.clone().or_else(|| cfg.label.clone()).unwrap_or_else(|| period.map_or("run".to_string(), |(_, b)| format!("asof-{b}")))
}

fn output_root(cfg: &RunConfig, opts: &RunOptions) -> PathBuf {
    opts.out_root.clone().unwrap_or_else(|| cfg.output_root.clone())
}

/// Where the shards of a run write their parts: beside the run folder, as `<label>.shards`.
pub fn shards_dir(cfg: &RunConfig, opts: &RunOptions, label: &str) -> PathBuf {
    output_root(cfg, opts).join(&cfg.name).join(format!("{label}.shards"))
}

/// `run.log`: per stage its seconds and the resident and peak memory after it, then the total.
fn stage_log(timings: &[StageTiming], total: f64) -> String {
    let mut log = String::from("stage\tseconds\trss_mib\tpeak_rss_mib\n");
    for (s, v, rss, peak) in timings {
        log += &format!("{s}\t{v:.3}\t{rss:.0}\t{peak:.0}\n");
    }
    log + &format!("total\t{total:.3}\n")
}

/// Heaps (glibc arenas) the threads of a run share.
const HEAPS: i32 = 2;

/// Asks glibc's allocator to share [`HEAPS`] heaps between all threads. By default threads
/// get heaps (arenas) of their own, up to eight per core, and memory freed in one heap is not
/// reused by the others: the writer threads, rayon's workers and the main thread each grow
/// their own, and the run's peak is close to their sum. At 2,000 x 10 years the peak was 8.4
/// GiB with the default, 7.4 GiB with one heap and 7.8 to 7.9 GiB with two; two heaps ran in
/// 169 and 173 s against 192 to 219 s with one (with one heap, threads that allocate at once
/// wait for each other: the CIR fits took 11 to 12 s instead of 8). Takes effect for heaps not
/// yet made, so it is called before a run starts its threads; a no-op off glibc.
pub fn share_heaps() {
    #[cfg(all(target_os = "linux", target_env = "gnu"))]
    // SAFETY: mallopt only changes a malloc parameter; M_ARENA_MAX with a positive value is
    // documented for glibc (mallopt(3)).
    unsafe {
        libc::mallopt(libc::M_ARENA_MAX, HEAPS);
    }
}

/// Loads every input and shows its sources relative to the pipeline file.
fn ingest(cfg: &RunConfig, timings: &mut Vec<StageTiming>) -> Result<Dataset> {
    let t = Instant::now();
    let mut ds = load(&cfg.inputs, &cfg.calendar, &cfg.quality)?;
    let base = cfg.pipeline_path.parent().map(Path::to_path_buf).unwrap_or_default();
    ds.relabel_sources(&base);
    let (rss, peak) = memory_mib();
    timings.push(("ingest".into(), t.elapsed().as_secs_f64(), rss, peak));
    Ok(ds)
}

/// A run folder being built: `work` (with `tables/`) is renamed to `final_dir` at the end.
struct RunFolder {
    label: String,
    final_dir: PathBuf,
    work: PathBuf,
}

impl RunFolder {
    fn create(cfg: &RunConfig, opts: &RunOptions, period: Option<(chrono::NaiveDate, chrono::NaiveDate)>) -> Result<RunFolder> {
        let label = run_label(cfg, opts, period);
        let final_dir = output_root(cfg, opts).join(&cfg.name).join(&label);
        let work = work_folder(&final_dir)?;
        let tables = work.join("tables");
        std::fs::create_dir_all(&tables).map_err(|e| Error::Write { path: tables.clone(), message: e.to_string() })?;
        Ok(RunFolder { label, final_dir, work })
    }

    fn tables(&self) -> PathBuf {
        self.work.join("tables")
    }
}

/// Key-value metadata of every table of a run.
fn table_metadata(cfg: &RunConfig, params: &CalibrationParams) -> Vec<(String, String)> {
    let mut meta = metadata(params, &cfg.quality);
    meta.push(("hazardline.bond_fit".into(), format!("{} (recovery convention {})", cfg.bond_fit, cfg.bond_recovery_convention)));
    meta.push(("hazardline.cir".into(), if cfg.cir { format!("true (mode {}, window {} business days)", cfg.cir_mode, cfg.cir_window) } else { "false".into() }));
    meta
}

/// The run's settings as the manifest records them.
fn settings_value(cfg: &RunConfig) -> Result<serde_json::Value> {
    serde_json::to_value(cfg).map_err(|e| Error::Other(format!("settings: {e}")))
}

/// What the report takes from the node and residual tables, gathered as they are written.
fn report_folds(cfg: &RunConfig) -> Result<(NodeFold, ResidualFold)> {
    Ok((NodeFold::new(&settings_value(cfg)?), ResidualFold::new()))
}

/// Whether this run writes its two large tables as folders of files by year
/// (`report.large_tables`); decided from the usable quotes of the whole input, so a single run
/// and a merge decide alike.
fn split_tables(cfg: &RunConfig, ds: &Dataset) -> bool {
    cfg.large_tables.split(ds.cds.as_ref().map_or(0, |p| p.rows.len()))
}

/// The manifest's list of table files: `tables/<name>.parquet`, or each file of a table
/// written as a folder, in the order of their names (the table's order).
fn table_files(tables: &Path) -> Result<Vec<String>> {
    let mut out = Vec::new();
    for t in TABLES {
        let dir = tables.join(t);
        if dir.is_dir() {
            for f in crate::tables::readback::table_files(&dir)? {
                out.push(format!("tables/{t}/{}", f.file_name().map(|n| n.to_string_lossy().to_string()).unwrap_or_default()));
            }
        } else {
            out.push(format!("tables/{t}.parquet"));
        }
    }
    Ok(out)
}

/// Entities quoted in several currencies, whose series carry the currency.
fn multi_currency_of(cfg: &RunConfig, ds: &Dataset) -> BTreeSet<String> {
    match (&ds.cds, cfg.cds_bootstrap) {
        (Some(p), true) => multi_currency(p),
        _ => BTreeSet::new(),
    }
}

/// Runs the pipeline on the whole universe. The CDS node and residual rows are written into
/// the run folder's tables as calibration produces them.
pub fn run(cfg: &RunConfig, opts: &RunOptions) -> Result<RunSummary> {
    share_heaps();
    let t0 = Instant::now();
    let mut timings = Vec::new();
    let mut ds = ingest(cfg, &mut timings)?;
    let ingest_counts = ds.counts.clone();
    let params = calibration_params(cfg);
    let folder = RunFolder::create(cfg, opts, quote_period(&ds))?;
    let meta = table_metadata(cfg, &params);
    let multi = multi_currency_of(cfg, &ds);
    let mut sinks = RowSinks::create(&folder.tables(), &meta, Some(RowDigest::new(&multi, &cfg.stability)), Some(report_folds(cfg)?), split_tables(cfg, &ds))?;
    let scope = keep_dates(&mut ds, DateRange::ALL, cfg);
    let (part, t) = compute_partition(&mut ds, cfg, &params, Shard::ALL, &scope, &mut sinks, &multi)?;
    timings.extend(t);
    finish(cfg, ds, ingest_counts, part, sinks, &multi, folder, &meta, timings, t0)
}

/// What one shard did.
#[derive(Debug, Clone)]
pub struct ShardSummary {
    pub part_dir: PathBuf,
    pub curves: usize,
    pub entities: usize,
    pub timings: Vec<StageTiming>,
}

/// Runs the per-entity half of the pipeline for one part, the entities of `shard` and the
/// curve dates of `dates`, and writes the part. Every part reads the whole input (the
/// data-quality rules, the data ends and the run label need it) and keeps its own entities'
/// rows and dates for calibration (with the margin of [`keep_dates`]).
pub fn run_shard(cfg: &RunConfig, opts: &RunOptions, shard: Shard, dates: DateRange) -> Result<ShardSummary> {
    share_heaps();
    let t0 = Instant::now();
    let mut timings = Vec::new();
    let mut ds = ingest(cfg, &mut timings)?;
    let label = run_label(cfg, opts, quote_period(&ds));
    keep_shard(&mut ds, shard);
    let multi = multi_currency_of(cfg, &ds);
    let scope = keep_dates(&mut ds, dates, cfg);
    let (_, sha) = hash_file(&cfg.pipeline_path)?;
    let dir = shards_dir(cfg, opts, &label).join(shard.folder() + &dates.folder_suffix());
    let folder = PartFolder::create(&dir)?;
    let mut sinks = folder.sinks()?;
    let (part, t) = compute_partition(&mut ds, cfg, &calibration_params(cfg), shard, &scope, &mut sinks, &multi)?;
    timings.extend(t);
    drop(ds);
    let t = Instant::now();
    let (curves, entities) = (part.curves, part.curve_entities.len());
    write_partition(folder, sinks, part, shard, &sha)?;
    let (rss, peak) = memory_mib();
    timings.push(("write part".into(), t.elapsed().as_secs_f64(), rss, peak));
    write_text(&dir.join("run.log"), &stage_log(&timings, t0.elapsed().as_secs_f64()))?;
    Ok(ShardSummary { part_dir: dir, curves, entities, timings })
}

/// Finishes a sharded run: reads every part under the run's `.shards` folder, checks that
/// they are shards 1..N of one N made from this pipeline file, and runs the pooled half of
/// the pipeline into the run folder.
pub fn merge(cfg: &RunConfig, opts: &RunOptions) -> Result<RunSummary> {
    share_heaps();
    let t0 = Instant::now();
    let mut timings = Vec::new();
    let ds = ingest(cfg, &mut timings)?;
    let ingest_counts = ds.counts.clone();
    let period = quote_period(&ds);
    let label = run_label(cfg, opts, period);
    let t = Instant::now();
    let dir = shards_dir(cfg, opts, &label);
    let (dirs, parts) = read_parts(&dir, &cfg.pipeline_path)?;
    let mut cal = combine(parts)?;
    let (rss, peak) = memory_mib();
    timings.push(("read parts".into(), t.elapsed().as_secs_f64(), rss, peak));
    let params = calibration_params(cfg);
    let folder = RunFolder::create(cfg, opts, period)?;
    let meta = table_metadata(cfg, &params);
    let multi: BTreeSet<String> = cal.multi_currency.iter().cloned().collect();
    let mut sinks = RowSinks::create(&folder.tables(), &meta, Some(RowDigest::new(&multi, &cfg.stability)), Some(report_folds(cfg)?), split_tables(cfg, &ds))?;
    let t = Instant::now();
    (cal.hazard, cal.residuals) = merge_part_rows(&dirs, &mut sinks)?;
    let (rss, peak) = memory_mib();
    timings.push(("merge curves".into(), t.elapsed().as_secs_f64(), rss, peak));
    finish(cfg, ds, ingest_counts, cal, sinks, &multi, folder, &meta, timings, t0)
}

fn read_parts(dir: &Path, pipeline: &Path) -> Result<(Vec<PathBuf>, Vec<Partition>)> {
    let bad = |message: String| Error::Argument { name: "merge", message };
    let entries = std::fs::read_dir(dir).map_err(|e| bad(format!("no shard parts at {}: {e}; run `hazardline run PIPELINE --shard I/N` for every shard first", dir.display())))?;
    let mut folders: Vec<PathBuf> = entries
        .filter_map(|e| e.ok())
        .map(|e| e.path())
        .filter(|p| p.is_dir() && p.file_name().is_some_and(|n| n.to_string_lossy().starts_with("part-")))
        .collect();
    folders.sort();
    if folders.is_empty() {
        return Err(bad(format!("no shard parts in {}", dir.display())));
    }
    let (_, sha) = hash_file(pipeline)?;
    let mut metas = Vec::new();
    for f in &folders {
        let m = crate::run::partition::read_meta(f)?;
        if m.pipeline_sha256 != sha {
            return Err(bad(format!("{} was made from another version of the pipeline file (SHA-256 {}, this one {sha}); rerun that shard", f.display(), m.pipeline_sha256)));
        }
        if m.version != env!("CARGO_PKG_VERSION") {
            return Err(bad(format!("{} was made by hazardline {}, this is {}; rerun that shard", f.display(), m.version, env!("CARGO_PKG_VERSION"))));
        }
        metas.push(m);
    }
    let n = metas[0].shards;
    if let Some(m) = metas.iter().find(|m| m.shards != n) {
        return Err(bad(format!("{} holds parts of {n} and of {} shards; keep one set", dir.display(), m.shards)));
    }
    let mut keyed: Vec<(u32, DateRange, PathBuf)> = Vec::new();
    for (m, f) in metas.iter().zip(folders) {
        keyed.push((m.shard, m.range(&f.join("partition.json"))?, f));
    }
    // Parts in shard order, each shard's date ranges in date order (an open start first).
    keyed.sort_by_key(|k| (k.0, k.1.from));
    let lacking: Vec<String> = (1..=n).filter(|i| !keyed.iter().any(|k| k.0 == *i)).map(|i| format!("{i}/{n}")).collect();
    if !lacking.is_empty() {
        return Err(bad(format!("{}: shards {} are missing; run them, then merge", dir.display(), lacking.join(", "))));
    }
    for i in 1..=n {
        let ranges: Vec<DateRange> = keyed.iter().filter(|k| k.0 == i).map(|k| k.1).collect();
        check_tiling(&ranges).map_err(|m| bad(format!("{}: shard {i}/{n}: {m}", dir.display())))?;
    }
    let dirs: Vec<PathBuf> = keyed.into_iter().map(|(_, _, f)| f).collect();
    let parts = dirs.iter().map(|f| read_partition(f).map(|(_, p)| p)).collect::<Result<Vec<_>>>()?;
    Ok((dirs, parts))
}


/// The rows of every part, in one canonical order (a curve's rows stay in their order: each
/// curve is computed in one part; the node and residual rows are ordered by
/// [`RowSinks::finish`]).
fn combine(parts: Vec<Partition>) -> Result<Partition> {
    let mut all = Partition { max_abs_residual_bp: 0.0, ..Default::default() };
    let mut dates: Vec<(chrono::NaiveDate, chrono::NaiveDate)> = Vec::new();
    let mut entities = BTreeSet::new();
    let mut multi = BTreeSet::new();
    // Vec::append into an empty vector moves nothing but still copies: the first part's
    // vectors are taken over whole. (The parts' node and residual rows are not here: the
    // merge streams them, `merge_part_rows`.)
    fn join<T>(all: &mut Vec<T>, part: &mut Vec<T>) {
        if all.is_empty() {
            std::mem::swap(all, part);
        } else {
            all.append(part);
        }
    }
    // The market move on an entity's first curve in a date range's part is from its last
    // curve in an earlier part of the same shard (parts come in shard, then date order).
    let mut carry: std::collections::HashMap<crate::tables::records::Label, std::collections::BTreeMap<u32, f64>> = Default::default();
    let mut shard = None;
    for mut p in parts {
        if shard != Some(p.shard) {
            carry.clear();
            shard = Some(p.shard);
        }
        for e in p.edges.iter().filter(|e| !e.last) {
            if let Some(prev) = carry.get(&e.entity) {
                all.market.extend(crate::stability::spread_move(&e.entity, e.date, prev, &e.spreads));
            }
        }
        for e in p.edges.drain(..).filter(|e| e.last) {
            carry.insert(e.entity, e.spreads);
        }
        join(&mut all.params, &mut p.params);
        join(&mut all.basis, &mut p.basis);
        join(&mut all.discount, &mut p.discount);
        join(&mut all.rejects, &mut p.rejects);
        all.curve_obs.append(std::mem::take(&mut p.curve_obs));
        join(&mut all.market, &mut p.market);
        for (k, (r, mut v)) in p.members.into_iter().enumerate() {
            match all.members.get_mut(k) {
                Some((r0, v0)) if r0.to_bits() == r.to_bits() => v0.append(&mut v),
                Some((r0, _)) => return Err(Error::Other(format!("parts disagree on the recovery scenarios ({r0} and {r}); rerun every shard with one pipeline file"))),
                None => all.members.push((r, v)),
            }
        }
        all.curves += p.curves;
        all.curves_complete += p.curves_complete;
        all.max_abs_residual_bp = all.max_abs_residual_bp.max(p.max_abs_residual_bp);
        dates.extend(p.curve_dates);
        entities.extend(p.curve_entities);
        multi.extend(p.multi_currency);
    }
    all.curve_dates = dates.iter().map(|d| d.0).min().zip(dates.iter().map(|d| d.1).max());
    all.curve_entities = entities.into_iter().collect();
    all.multi_currency = multi.into_iter().collect();
    // The node and residual rows are put in order by the sinks they go to.
    all.params.sort_by(|a, b| (a.date, &a.entity, &a.currency).cmp(&(b.date, &b.entity, &b.currency)));
    all.basis.sort_by(|a, b| (a.date, &a.entity, &a.currency).cmp(&(b.date, &b.entity, &b.currency)));
    all.rejects.sort_by(|a, b| (a.table, &a.source, a.row).cmp(&(b.table, &b.source, b.row)));
    Ok(all)
}

/// The pooled half of a run: accounting, backtest, stability, flags, tables, manifest, report.
/// `sinks` has the CDS rows the per-entity half wrote; the rows `cal` still holds go after.
#[allow(clippy::too_many_arguments)]
fn finish(cfg: &RunConfig, mut ds: Dataset, ingest_counts: Vec<TableCounts>, mut cal: Partition, sinks: RowSinks, multi: &BTreeSet<String>, folder: RunFolder, meta: &[(String, String)], mut timings: Vec<StageTiming>, t0: Instant) -> Result<RunSummary> {
    let params = calibration_params(cfg);
    let period = quote_period(&ds);
    if let Some(p) = &mut ds.cds {
        // The quotes themselves are not needed any more.
        p.release_rows();
    }
    let meta = meta.to_vec();
    let t = Instant::now();
    let (digest, folds) = sinks.finish(std::mem::take(&mut cal.hazard), std::mem::take(&mut cal.residuals))?;
    let digest = digest.unwrap_or_else(|| RowDigest::new(multi, &cfg.stability));
    let (rss, peak) = memory_mib();
    timings.push(("write curves".into(), t.elapsed().as_secs_f64(), rss, peak));

    // Accounting after calibration: the rows its stages rejected move from used to rejected.
    let mut counts = ingest_counts.clone();
    for c in counts.iter_mut() {
        c.rejected += cal.rejects.iter().filter(|r| r.table == c.table).count();
        c.used = c.rows_in.checked_sub(c.rejected).ok_or_else(|| {
            Error::Other(format!("row accounting of {} does not add up after calibration ({} in, {} rejected); this is a bug, please report it", c.table, c.rows_in, c.rejected))
        })?;
    }

    let t = Instant::now();
    let backtest = if cfg.backtest.enabled {
        let with_curves: BTreeSet<&str> = cal.curve_entities.iter().map(String::as_str).collect();
        let ctx = BacktestContext {
            curve_dates: cal.curve_dates,
            have_defaults: ds.defaults.is_some(),
            cohort_history: ds.cohort_history.as_ref(),
            defaults_without_curves: first_defaults(&ds).keys().filter(|e| !with_curves.contains(*e)).count(),
        };
        backtest_from_members(std::mem::take(&mut cal.members), &ctx, &params, &cfg.backtest)?
    } else {
        BacktestResults::default()
    };
    let (rss, peak) = memory_mib();
    timings.push(("backtest".into(), t.elapsed().as_secs_f64(), rss, peak));
    let RunFolder { label, final_dir, work } = folder;
    let tables = work.join("tables");

    let t = Instant::now();
    let grades = grade_book(&ds);
    let inputs = stability_inputs(std::mem::take(&mut cal.curve_obs), std::mem::take(&mut cal.market), &cal.params, &grades, multi, digest);
    let stability = run_stability(inputs, &cfg.stability)?;
    let (rss, peak) = memory_mib();
    timings.push(("stability".into(), t.elapsed().as_secs_f64(), rss, peak));

    let t2 = Instant::now();
    let mut rejects = std::mem::take(&mut ds.rejects);
    rejects.extend(cal.rejects.iter().cloned());
    write_data_quality(&ds.data_quality, &tables.join("data_quality.parquet"), &meta)?;
    write_rejects(&rejects, &tables.join("rejects.parquet"), &meta)?;
    write_discount_curves(&cal.discount, &tables.join("discount_curves.parquet"), &meta)?;
    write_intensity_params(&cal.params, &tables.join("intensity_params.parquet"), &meta)?;
    write_basis(&cal.basis, &tables.join("cds_bond_basis.parquet"), &meta)?;
    write_backtest_tables(&backtest, &tables, &meta)?;
    write_stability_tables(&stability, &tables, &meta)?;
    let mut all_flags = quality_flags(&ds);
    all_flags.extend(stability.flags.iter().map(|f| AnyFlag { stage: "stability", flag: f.clone(), table: None, source: None, row: None }));
    let red_flags = all_flags.iter().filter(|f| f.flag.severity == "red").count();
    write_flags(&all_flags, &tables.join("flags.parquet"), &meta)?;
    let (rss, peak) = memory_mib();
    timings.push(("write tables".into(), t2.elapsed().as_secs_f64(), rss, peak));

    // Manifest.
    let base = cfg.pipeline_path.parent().map(Path::to_path_buf).unwrap_or_default();
    let (bytes, sha) = hash_file(&cfg.pipeline_path)?;
    let mut inputs = Vec::new();
    for c in &ingest_counts {
        for f in &c.files {
            let (b, h) = hash_file(f)?;
            inputs.push(InputRecord { table: c.table.into(), path: relative(f, &base), bytes: b, sha256: h });
        }
    }
    let mut count_rows = counts_records("ingest", &ingest_counts);
    count_rows.extend(counts_records("calibrate", &counts));
    let manifest = Manifest {
        tool: "hazardline".into(),
        version: env!("CARGO_PKG_VERSION").into(),
        pipeline: FileRecord { path: cfg.pipeline_path.file_name().map(|n| n.to_string_lossy().to_string()).unwrap_or_default(), bytes, sha256: sha },
        name: cfg.name.clone(),
        label: label.clone(),
        period: period.map(|(a, b)| (a.to_string(), b.to_string())),
        inputs,
        counts: count_rows,
        settings: settings_value(cfg)?,
        tables: table_files(&tables)?,
    };
    let text = serde_json::to_string_pretty(&manifest).map_err(|e| Error::Other(format!("manifest: {e}")))?;
    write_text(&work.join("manifest.json"), &(text + "\n"))?;

    // The report reads the written tables back: free the in-memory results first, so that the
    // run's peak memory is the largest stage's, not the sum of them.
    let (n_curves, n_complete, max_res) = (cal.curves, cal.curves_complete, cal.max_abs_residual_bp);
    drop(cal);
    drop(stability);
    drop(backtest);
    drop(ds);
    let t3 = Instant::now();
    markdown::render_with(&work, folds)?;
    let (rss, peak) = memory_mib();
    timings.push(("report".into(), t3.elapsed().as_secs_f64(), rss, peak));
    let total = t0.elapsed().as_secs_f64();
    write_text(&work.join("run.log"), &stage_log(&timings, total))?;

    // Swap the finished folder into place.
    if final_dir.exists() {
        std::fs::remove_dir_all(&final_dir).map_err(|e| Error::Write { path: final_dir.clone(), message: e.to_string() })?;
    }
    std::fs::rename(&work, &final_dir).map_err(|e| Error::Write { path: final_dir.clone(), message: e.to_string() })?;

    Ok(RunSummary {
        run_dir: final_dir,
        counts,
        curves: n_curves,
        curves_complete: n_complete,
        max_abs_residual_bp: max_res,
        flags: all_flags.len(),
        red_flags,
        rejected: rejects.len(),
        timings: timings.iter().map(|(s, v, _, _)| (s.clone(), *v)).collect(),
        memory: timings.iter().map(|(s, _, r, p)| (s.clone(), *r, *p)).collect(),
    })
}
