//! `hazardline run`: the stages in order, into the run folder
//! `<output root>/<pipeline name>/<run label>/` with `report.md`, `charts/`, `tables/`,
//! `manifest.json` and `run.log`.
//!
//! The folder is built under a temporary name beside its final place and renamed at the end,
//! so an interrupted run leaves no folder that looks complete; each file inside is itself
//! written to a temporary name first. Everything but `run.log` is deterministic.
//!
//! A run can also be split by entity: `run --shard I/N` computes the per-entity half of the
//! run (see [`partition`]) for shard I of N and writes it to
//! `<output root>/<pipeline name>/<run label>.shards/part-I-of-N/`; [`merge`] then reads every
//! part and finishes the run into the same run folder, byte for byte as a single run.

pub mod flag_rates;
pub mod folders;
pub mod merge;
pub mod part_folder;
pub mod partition;
pub mod scope;
pub mod selfcheck;

pub use merge::merge;

use crate::backtest::{HistoryRow, MigrationRow, RiskPremiumRow, VerdictRow};
use crate::config::RunConfig;
use crate::error::{Error, Result};
use crate::ingest::Dataset;
use crate::ingest::{load, TableCounts};
use crate::ingest::{load::DataQualityRow, Reject};
use crate::parts::{DateRange, Shard};
use crate::report::markdown::{self, NodeFold, ResidualFold};
use crate::stability::residual_review::{CurveResidualRow, RepricingShare, TenorResidualRow, WorstResidualRow};
use crate::stability::{BreakRow, CrossSectionRow, StabilityRow};
use crate::stages::backtest::{
    backtest_from_members, first_defaults, write_backtest_tables, BacktestContext, BacktestResults,
};
use crate::stages::calibrate::{metadata, CalibrationParams};
use crate::stages::stability::{
    grade_book, multi_currency, run_stability, stability_inputs, write_stability_tables, RowDigest,
};
use crate::tables::flags::{FlagRecord, STABILITY};
use crate::tables::manifest::{hash_file, relative, write_text, CountRecord, FileRecord, InputRecord, Manifest};
use crate::tables::parts::MemberRecord;
use crate::tables::review::PsiRecord;
use crate::tables::*;
use crate::text::Severity;
use part_folder::{write_partition, PartFolder};
use partition::{compute_partition, Partition, RowSinks, StageTiming};
use scope::{keep_dates, keep_shard};
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
        .map(|c| CountRecord {
            stage: stage.into(),
            table: c.table.into(),
            rows_in: c.rows_in as u64,
            used: c.used as u64,
            rejected: c.rejected as u64,
            flagged: c.flagged as u64,
        })
        .collect()
}

/// Every table a run writes. `intensity_params` and `cds_bond_basis` are always written, empty
/// (with their schema) when the CIR or bond fit is off, so consumers find the same files.
pub const TABLES: [&str; 27] = [
    DataQualityRow::NAME,
    Reject::NAME,
    DiscountCurveRow::NAME,
    HazardCurveRow::NAME,
    ResidualRow::NAME,
    QuoteConversionRow::NAME,
    IntensityParamRow::NAME,
    BasisRow::NAME,
    SensitivityRow::NAME,
    MemberRecord::NAME,
    BucketRecord::NAME,
    HosmerLemeshowRecord::NAME,
    DiscriminationRecord::NAME,
    TermStructureRecord::NAME,
    VerdictRow::NAME,
    MigrationRow::NAME,
    HistoryRow::NAME,
    RiskPremiumRow::NAME,
    StabilityRow::NAME,
    CrossSectionRow::NAME,
    PsiRecord::NAME,
    BreakRow::NAME,
    CurveResidualRow::NAME,
    TenorResidualRow::NAME,
    WorstResidualRow::NAME,
    RepricingShare::NAME,
    FlagRecord::NAME,
];

fn calibration_params(cfg: &RunConfig) -> CalibrationParams {
    CalibrationParams {
        recovery: cfg.recovery,
        recovery_by_seniority: cfg.recovery_by_seniority.clone(),
        bootstrap: cfg.bootstrap,
        calendar: cfg.calendar.clone(),
        zero_rates: crate::curves::ZeroRateConvention {
            compounding: cfg.zero_rate_compounding,
            day_count: cfg.zero_rate_day_count,
        },
        rate_conventions: cfg.rate_conventions.clone(),
        rate_calendars: cfg.currency_calendars.clone(),
        seniority_order: cfg.seniority_order.clone(),
        standard_coupons: cfg.standard_coupons.clone(),
        sensitivity_dates: cfg.sensitivity_dates.clone(),
        quote_conversions: cfg.quote_conversions,
    }
}

/// First and last date of the usable CDS quotes (the panel is sorted by date).
fn quote_period(ds: &Dataset) -> Option<(chrono::NaiveDate, chrono::NaiveDate)> {
    ds.cds.as_ref().and_then(|p| p.quote_period())
}

/// The backtest's outcome end: `backtest.outcome_end`, else the last quote date of the whole
/// input (the end of the input period). Taken before a part cuts the input, so every part and
/// the merge agree.
fn outcome_end(cfg: &RunConfig, ds: &Dataset) -> Option<chrono::NaiveDate> {
    cfg.backtest.core.outcome_end.or(quote_period(ds).map(|p| p.1))
}

fn run_label(cfg: &RunConfig, opts: &RunOptions, period: Option<(chrono::NaiveDate, chrono::NaiveDate)>) -> String {
    opts.label
        .clone()
        .or_else(|| cfg.label.clone())
        .unwrap_or_else(|| period.map_or("run".to_string(), |(_, b)| format!("asof-{b}")))
}

/// Where the run's label came from, for messages.
fn label_source(cfg: &RunConfig, opts: &RunOptions) -> &'static str {
    if opts.label.is_some() {
        "--label"
    } else if cfg.label.is_some() {
        "report.label"
    } else {
        "the default label"
    }
}

fn output_root(cfg: &RunConfig, opts: &RunOptions) -> PathBuf {
    opts.out_root.clone().unwrap_or_else(|| cfg.output_root.clone())
}

/// Where the shards of a run write their parts: beside the run folder, as `<label>.shards`
/// (checked and proven inside the output root as the run folder is).
pub fn shards_dir(cfg: &RunConfig, opts: &RunOptions, label: &str) -> Result<PathBuf> {
    folders::check_label(label, label_source(cfg, opts))?;
    folders::run_dir(&output_root(cfg, opts), &cfg.name, &format!("{label}.shards"), label_source(cfg, opts))
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

/// Hands the heaps' free pages back to the system (glibc's `malloc_trim`): memory a stage freed
/// in small pieces stays resident in the heap otherwise, beside the fresh pages of the next
/// stage's large vectors. Called between stages; a no-op off glibc.
pub fn give_back_free_memory() {
    #[cfg(all(target_os = "linux", target_env = "gnu"))]
    // SAFETY: malloc_trim only returns free heap pages to the system (malloc_trim(3)).
    unsafe {
        libc::malloc_trim(0);
    }
}

/// Every input file read (table, path relative to the pipeline file, size, SHA-256), as the
/// manifest lists them and a part folder records them.
fn input_records(cfg: &RunConfig, counts: &[TableCounts]) -> Result<Vec<InputRecord>> {
    let base = cfg.pipeline_path.parent().map(Path::to_path_buf).unwrap_or_default();
    let mut inputs = Vec::new();
    for c in counts {
        for f in &c.files {
            let (b, h) = hash_file(f)?;
            inputs.push(InputRecord { table: c.table.into(), path: relative(f, &base), bytes: b, sha256: h });
        }
    }
    // The holiday files: the run's calendar and each currency's standard-curve calendar.
    let files = cfg
        .holidays
        .iter()
        .map(|p| ("holidays".to_string(), p))
        .chain(cfg.calendars.iter().map(|(ccy, p)| (format!("calendar {ccy}"), p)));
    for (table, p) in files {
        let f = base.join(p);
        let (b, h) = hash_file(&f)?;
        inputs.push(InputRecord { table, path: relative(&f, &base), bytes: b, sha256: h });
    }
    Ok(inputs)
}

/// Every entity a setting names (`calibration.cir_entities`, `report.charted_entities`) is an
/// entity of the CDS quotes: a typo stops the run, naming the key and the name, instead of
/// silently fitting or drawing nothing.
fn check_named_entities(cfg: &RunConfig, ds: &Dataset) -> Result<()> {
    let quoted = |e: &str| ds.cds.as_ref().is_some_and(|p| p.entities.get(e).is_some());
    for (key, names) in
        [("calibration.cir_entities", &cfg.cir_entities), ("report.charted_entities", &cfg.charted_entities)]
    {
        if let Some(missing) = names.iter().flatten().find(|e| !quoted(e)) {
            return Err(Error::Config {
                path: cfg.pipeline_path.clone(),
                message: format!(
                    "key `{key}`: {missing:?} is not an entity of the CDS quotes (names must match exactly)"
                ),
            });
        }
    }
    Ok(())
}

/// Loads every input, checks the entities the settings name, and shows the sources relative
/// to the pipeline file.
fn ingest(cfg: &RunConfig, timings: &mut Vec<StageTiming>) -> Result<Dataset> {
    let t = Instant::now();
    let mut ds = load(&cfg.inputs, &cfg.calendar, &cfg.quality)?;
    check_named_entities(cfg, &ds)?;
    let base = cfg.pipeline_path.parent().map(Path::to_path_buf).unwrap_or_default();
    ds.relabel_sources(&base);
    let (rss, peak) = memory_mib();
    timings.push(partition::logged(("ingest".into(), t.elapsed().as_secs_f64(), rss, peak)));
    Ok(ds)
}

/// A run folder being built: its work folder (with `tables/`) is swapped in whole at the end
/// (`folders::Target`, which also holds the folder's lock).
struct RunFolder {
    label: String,
    target: folders::Target,
}

impl RunFolder {
    fn create(
        cfg: &RunConfig,
        opts: &RunOptions,
        period: Option<(chrono::NaiveDate, chrono::NaiveDate)>,
    ) -> Result<RunFolder> {
        let label = run_label(cfg, opts, period);
        let dir = folders::run_dir(&output_root(cfg, opts), &cfg.name, &label, label_source(cfg, opts))?;
        let target = folders::Target::open(&dir)?;
        let tables = target.work().join("tables");
        std::fs::create_dir_all(&tables).map_err(|e| Error::Write { path: tables.clone(), message: e.to_string() })?;
        Ok(RunFolder { label, target })
    }

    fn tables(&self) -> PathBuf {
        self.target.work().join("tables")
    }
}

/// Key-value metadata of every table of a run.
fn table_metadata(cfg: &RunConfig, params: &CalibrationParams) -> Vec<(String, String)> {
    let mut meta = metadata(params, &cfg.quality);
    meta.push((
        "hazardline.bond_fit".into(),
        format!("{} (recovery convention {})", cfg.bond_fit, cfg.bond_recovery_convention.as_str()),
    ));
    meta.push((
        "hazardline.cir".into(),
        if cfg.cir {
            format!("true (mode {}, window {} business days)", cfg.cir_mode.as_str(), cfg.cir_window)
        } else {
            "false".into()
        },
    ));
    meta
}

/// The run's settings as the manifest records them.
fn settings_value(cfg: &RunConfig) -> Result<serde_json::Value> {
    serde_json::to_value(cfg).map_err(|e| Error::Encode { what: "settings", message: e.to_string() })
}

/// What the report takes from the node and residual tables, gathered as they are written.
/// Built from the settings as the manifest records them, so a run's report and one rendered
/// later from the run folder read the same values.
fn report_folds(cfg: &RunConfig) -> Result<(NodeFold, ResidualFold)> {
    let settings: crate::tables::manifest::RecordedSettings = serde_json::from_value(settings_value(cfg)?)
        .map_err(|e| Error::Encode { what: "settings", message: e.to_string() })?;
    Ok((NodeFold::new(&settings), ResidualFold::new(cfg.stability.reprice_tolerance_bp)))
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
                out.push(format!(
                    "tables/{t}/{}",
                    f.file_name().map(|n| n.to_string_lossy().to_string()).unwrap_or_default()
                ));
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
    let mut sinks = RowSinks::create(
        &folder.tables(),
        &meta,
        Some(RowDigest::new(&multi, &cfg.stability)),
        Some(report_folds(cfg)?),
        split_tables(cfg, &ds),
    )?;
    let end = outcome_end(cfg, &ds);
    let scope = keep_dates(&mut ds, DateRange::ALL, cfg, end);
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
    let inputs = input_records(cfg, &ds.counts)?;
    // Decided on the whole input, as the single run and the merge decide it.
    let split = split_tables(cfg, &ds);
    let end = outcome_end(cfg, &ds);
    keep_shard(&mut ds, shard);
    let multi = multi_currency_of(cfg, &ds);
    let scope = keep_dates(&mut ds, dates, cfg, end);
    let (_, sha) = hash_file(&cfg.pipeline_path)?;
    let dir = shards_dir(cfg, opts, &label)?.join(shard.folder() + &dates.folder_suffix());
    let folder = PartFolder::create(&dir)?;
    let params = calibration_params(cfg);
    let mut sinks = folder.sinks(&table_metadata(cfg, &params), split)?;
    let (part, t) = compute_partition(&mut ds, cfg, &params, shard, &scope, &mut sinks, &multi)?;
    timings.extend(t);
    drop(ds);
    let t = Instant::now();
    let (curves, entities) = (part.curves, part.curve_entities.len());
    write_partition(folder, sinks, part, shard, &sha, inputs)?;
    let (rss, peak) = memory_mib();
    timings.push(partition::logged(("write part".into(), t.elapsed().as_secs_f64(), rss, peak)));
    write_text(&dir.join("run.log"), &stage_log(&timings, t0.elapsed().as_secs_f64()))?;
    Ok(ShardSummary { part_dir: dir, curves, entities, timings })
}

/// The pooled half of a run: accounting, backtest, stability, flags, tables, manifest, report.
/// `sinks` has the CDS rows the per-entity half wrote; the rows `cal` still holds go after.
#[allow(clippy::too_many_arguments)]
fn finish(
    cfg: &RunConfig,
    mut ds: Dataset,
    ingest_counts: Vec<TableCounts>,
    mut cal: Partition,
    sinks: RowSinks,
    multi: &BTreeSet<String>,
    folder: RunFolder,
    meta: &[(String, String)],
    mut timings: Vec<StageTiming>,
    t0: Instant,
) -> Result<RunSummary> {
    let params = calibration_params(cfg);
    let period = quote_period(&ds);
    if let Some(p) = &mut ds.cds {
        // The quotes themselves are not needed any more.
        p.release_rows();
    }
    let meta = meta.to_vec();
    let t = Instant::now();
    let (digest, folds) = sinks.finish(
        std::mem::take(&mut cal.hazard),
        std::mem::take(&mut cal.residuals),
        std::mem::take(&mut cal.sensitivities),
    )?;
    let digest = digest.unwrap_or_else(|| RowDigest::new(multi, &cfg.stability));
    let (rss, peak) = memory_mib();
    timings.push(partition::logged(("write curves".into(), t.elapsed().as_secs_f64(), rss, peak)));

    // Accounting after calibration: the rows its stages rejected move from used to rejected.
    let mut counts = ingest_counts.clone();
    for c in counts.iter_mut() {
        c.rejected += cal.rejects.iter().filter(|r| r.table == c.table).count();
        c.used = c.rows_in.checked_sub(c.rejected).ok_or_else(|| Error::Accounting {
            table: c.table.to_string(),
            after: " after calibration",
            rows_in: c.rows_in,
            used: c.used,
            rejected: c.rejected,
        })?;
    }

    let t = Instant::now();
    let backtest = if cfg.backtest.enabled {
        let with_curves: BTreeSet<&str> = cal.curve_entities.iter().map(String::as_str).collect();
        let ctx = BacktestContext {
            curve_dates: cal.curve_dates,
            outcome_end: outcome_end(cfg, &ds),
            graded: crate::stages::backtest::graded_facts(&ds),
            reference: match &cfg.backtest.reference_run {
                Some(r) => crate::stages::backtest::reference_discrimination(r, cfg.recovery)?,
                None => Vec::new(),
            },
            have_defaults: ds.defaults.is_some(),
            cohort_history: ds.cohort_history.as_ref(),
            defaults_without_curves: first_defaults(&ds).keys().filter(|e| !with_curves.contains(*e)).count(),
        };
        backtest_from_members(std::mem::take(&mut cal.members), &ctx, &params, &cfg.backtest)?
    } else {
        BacktestResults::default()
    };
    let (rss, peak) = memory_mib();
    timings.push(partition::logged(("backtest".into(), t.elapsed().as_secs_f64(), rss, peak)));
    let RunFolder { label, target } = folder;
    let work = target.work().to_path_buf();
    let tables = work.join("tables");

    give_back_free_memory();
    let t = Instant::now();
    let grades = grade_book(&ds);
    let inputs = stability_inputs(
        std::mem::take(&mut cal.curve_obs),
        std::mem::take(&mut cal.market),
        &cal.params,
        &grades,
        multi,
        digest,
    );
    let stability = run_stability(inputs, &cfg.stability)?;
    let (rss, peak) = memory_mib();
    timings.push(partition::logged(("stability".into(), t.elapsed().as_secs_f64(), rss, peak)));

    let t2 = Instant::now();
    let mut rejects = std::mem::take(&mut ds.rejects);
    rejects.extend(cal.rejects.iter().cloned());
    let mut all_flags: Vec<FlagRecord> = ds.flags.iter().map(FlagRecord::quality).collect();
    all_flags.extend(stability.flags.iter().map(|f| FlagRecord::review(STABILITY, f)));
    let red_flags = all_flags.iter().filter(|f| f.flag.severity == Severity::Red).count();
    // Each table is its own file: written side by side.
    crate::tables::write_all(vec![
        Box::new(|| crate::tables::write(&ds.data_quality, &tables, &meta)),
        Box::new(|| crate::tables::write(&rejects, &tables, &meta)),
        Box::new(|| crate::tables::write(&cal.discount, &tables, &meta)),
        Box::new(|| crate::tables::write(&cal.params, &tables, &meta)),
        Box::new(|| crate::tables::write(&cal.basis, &tables, &meta)),
        Box::new(|| write_backtest_tables(&backtest, &tables, &meta)),
        Box::new(|| write_stability_tables(&stability, &tables, &meta)),
        Box::new(|| crate::tables::write(&all_flags, &tables, &meta)),
    ])?;
    let (rss, peak) = memory_mib();
    timings.push(partition::logged(("write tables".into(), t2.elapsed().as_secs_f64(), rss, peak)));

    // Manifest.
    let (bytes, sha) = hash_file(&cfg.pipeline_path)?;
    let inputs = input_records(cfg, &ingest_counts)?;
    let mut count_rows = counts_records("ingest", &ingest_counts);
    count_rows.extend(counts_records("calibrate", &counts));
    for c in &count_rows {
        tracing::info!(
            target: "hazardline::counts",
            stage = %c.stage,
            table = %c.table,
            rows_in = c.rows_in,
            used = c.used,
            rejected = c.rejected,
            flagged = c.flagged,
            "row accounting"
        );
    }
    let manifest = Manifest {
        tool: "hazardline".into(),
        version: env!("CARGO_PKG_VERSION").into(),
        source_revision: crate::tables::manifest::SOURCE_REVISION.into(),
        pipeline: FileRecord {
            path: cfg.pipeline_path.file_name().map(|n| n.to_string_lossy().to_string()).unwrap_or_default(),
            bytes,
            sha256: sha,
        },
        name: cfg.name.clone(),
        label: label.clone(),
        period: period.map(|(a, b)| (a.to_string(), b.to_string())),
        inputs,
        counts: count_rows,
        settings: settings_value(cfg)?,
        tables: table_files(&tables)?,
    };
    let text = serde_json::to_string_pretty(&manifest)
        .map_err(|e| Error::Encode { what: "manifest", message: e.to_string() })?;
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
    timings.push(partition::logged(("report".into(), t3.elapsed().as_secs_f64(), rss, peak)));
    let total = t0.elapsed().as_secs_f64();
    write_text(&work.join("run.log"), &stage_log(&timings, total))?;

    // Swap the finished folder into place (the old one aside, the new one in, the old removed).
    let final_dir = target.commit()?;

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
