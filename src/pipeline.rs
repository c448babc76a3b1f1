//! `hazardline run`: the stages in order, into the run folder
//! `<output root>/<pipeline name>/<run label>/` with `report.md`, `charts/`, `tables/`,
//! `manifest.json` and `run.log`.
//!
//! The folder is built under a temporary name beside its final place and renamed at the end,
//! so an interrupted run leaves no folder that looks complete; each file inside is itself
//! written to a temporary name first. Everything but `run.log` is deterministic.

use crate::commands::calibrate::{calibrate_dataset, metadata, CalibrationParams};
use crate::commands::backtest::{run_backtest_stage, write_backtest_tables, BacktestResults};
use crate::commands::intensity::calibrate_intensity;
use crate::commands::review::{quality_flags, run_stability, stability_inputs, write_flags, write_stability_tables, AnyFlag, GradeBook};
use crate::config::RunConfig;
use crate::error::{Error, Result};
use crate::ingest::{load, TableCounts};
use crate::report::manifest::{hash_file, relative, write_text, CountRecord, FileRecord, InputRecord, Manifest};
use crate::report::markdown;
use crate::report::tables::*;
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
fn memory_mib() -> (f64, f64) {
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

/// Runs the pipeline.
pub fn run(cfg: &RunConfig, opts: &RunOptions) -> Result<RunSummary> {
    let mut timings: Vec<(String, f64)> = Vec::new();
    let mut memory: Vec<(String, f64, f64)> = Vec::new();
    let t0 = Instant::now();
    let mut ds = load(&cfg.inputs, &cfg.calendar, &cfg.quality)?;
    timings.push(("ingest".into(), t0.elapsed().as_secs_f64()));
    let (rss, peak) = memory_mib();
    memory.push(("ingest".into(), rss, peak));
    let ingest_counts = ds.counts.clone();
    let base = cfg.pipeline_path.parent().map(Path::to_path_buf).unwrap_or_default();
    ds.relabel_sources(&base);

    let t1 = Instant::now();
    let params = CalibrationParams {
        recovery: cfg.recovery,
        recovery_by_seniority: cfg.recovery_by_seniority.clone(),
        bootstrap: cfg.bootstrap,
        calendar: cfg.calendar.clone(),
    };
    let mut cal = if cfg.cds_bootstrap { calibrate_dataset(&mut ds, &params)? } else { Default::default() };
    timings.push(("calibrate".into(), t1.elapsed().as_secs_f64()));
    let (rss, peak) = memory_mib();
    memory.push(("calibrate".into(), rss, peak));
    let t1b = Instant::now();
    let mut fits = calibrate_intensity(&mut ds, &cal, &params, &cfg.intensity)?;
    cal.hazard.append(&mut fits.hazard);
    cal.residuals.append(&mut fits.residuals);
    cal.rejects.append(&mut fits.rejects);
    timings.push(("bond and CIR fits".into(), t1b.elapsed().as_secs_f64()));
    let (rss, peak) = memory_mib();
    memory.push(("bond and CIR fits".into(), rss, peak));

    let t1c = Instant::now();
    let backtest = if cfg.backtest.enabled { run_backtest_stage(&ds, &cal, &params, &cfg.backtest)? } else { BacktestResults::default() };
    timings.push(("backtest".into(), t1c.elapsed().as_secs_f64()));
    let (rss, peak) = memory_mib();
    memory.push(("backtest".into(), rss, peak));
    let t1d = Instant::now();
    let grades = GradeBook::new(&ds);
    let stability = run_stability(&stability_inputs(&cal, &fits.params, &grades), &cfg.stability)?;
    timings.push(("stability".into(), t1d.elapsed().as_secs_f64()));
    let (rss, peak) = memory_mib();
    memory.push(("stability".into(), rss, peak));

    let period = ds.cds.as_ref().and_then(|p| Some((p.rows.first()?.date, p.rows.last()?.date)));
    let label = opts
        .label
        .clone()
        .or_else(|| cfg.label.clone())
        .unwrap_or_else(|| period.map_or("run".to_string(), |(_, b)| format!("asof-{b}")));
    let root = opts.out_root.clone().unwrap_or_else(|| cfg.output_root.clone());
    let final_dir = root.join(&cfg.name).join(&label);
    let parent = final_dir.parent().unwrap_or(Path::new(".")).to_path_buf();
    std::fs::create_dir_all(&parent).map_err(|e| Error::Write { path: parent.clone(), message: e.to_string() })?;
    let work = parent.join(format!(".{label}.partial-{}", std::process::id()));
    let _ = std::fs::remove_dir_all(&work);
    let tables = work.join("tables");

    let t2 = Instant::now();
    let mut meta = metadata(&params, &cfg.quality);
    meta.push(("hazardline.bond_fit".into(), format!("{} (recovery convention {})", cfg.bond_fit, cfg.bond_recovery_convention)));
    meta.push(("hazardline.cir".into(), if cfg.cir { format!("true (mode {}, window {} business days)", cfg.cir_mode, cfg.cir_window) } else { "false".into() }));
    let mut rejects = std::mem::take(&mut ds.rejects);
    rejects.extend(cal.rejects.iter().cloned());
    write_data_quality(&ds.data_quality, &tables.join("data_quality.parquet"), &meta)?;
    write_rejects(&rejects, &tables.join("rejects.parquet"), &meta)?;
    write_discount_curves(&cal.discount, &tables.join("discount_curves.parquet"), &meta)?;
    write_hazard_curves(&cal.hazard, &tables.join("hazard_curves.parquet"), &meta)?;
    write_residuals(&cal.residuals, &tables.join("calibration_residuals.parquet"), &meta)?;
    write_intensity_params(&fits.params, &tables.join("intensity_params.parquet"), &meta)?;
    write_basis(&fits.basis, &tables.join("cds_bond_basis.parquet"), &meta)?;
    write_backtest_tables(&backtest, &tables, &meta)?;
    write_stability_tables(&stability, &tables, &meta)?;
    let mut all_flags = quality_flags(&ds);
    all_flags.extend(stability.flags.iter().map(|f| AnyFlag { stage: "stability", flag: f.clone(), table: None, source: None, row: None }));
    let red_flags = all_flags.iter().filter(|f| f.flag.severity == "red").count();
    write_flags(&all_flags, &tables.join("flags.parquet"), &meta)?;
    timings.push(("write tables".into(), t2.elapsed().as_secs_f64()));
    let (rss, peak) = memory_mib();
    memory.push(("write tables".into(), rss, peak));

    // Manifest.
    let (bytes, sha) = hash_file(&cfg.pipeline_path)?;
    let mut inputs = Vec::new();
    for c in &ingest_counts {
        for f in &c.files {
            let (b, h) = hash_file(f)?;
            inputs.push(InputRecord { table: c.table.into(), path: relative(f, &base), bytes: b, sha256: h });
        }
    }
    let mut counts = counts_records("ingest", &ingest_counts);
    counts.extend(counts_records("calibrate", &ds.counts));
    let manifest = Manifest {
        tool: "hazardline".into(),
        version: env!("CARGO_PKG_VERSION").into(),
        pipeline: FileRecord { path: cfg.pipeline_path.file_name().map(|n| n.to_string_lossy().to_string()).unwrap_or_default(), bytes, sha256: sha },
        name: cfg.name.clone(),
        label: label.clone(),
        period: period.map(|(a, b)| (a.to_string(), b.to_string())),
        inputs,
        counts,
        settings: serde_json::to_value(cfg).map_err(|e| Error::Other(format!("settings: {e}")))?,
        tables: TABLES.iter().map(|t| format!("tables/{t}.parquet")).collect(),
    };
    let text = serde_json::to_string_pretty(&manifest).map_err(|e| Error::Other(format!("manifest: {e}")))?;
    write_text(&work.join("manifest.json"), &(text + "\n"))?;

    // The report reads the written tables back: free the in-memory results first, so that the
    // run's peak memory is the largest stage's, not the sum of them.
    let (ds_counts, n_curves, n_complete, max_res) = (ds.counts.clone(), cal.curves, cal.curves_complete, cal.max_abs_residual_bp);
    drop(cal);
    drop(fits);
    drop(stability);
    drop(backtest);
    drop(ds);
    let t3 = Instant::now();
    markdown::render(&work)?;
    timings.push(("report".into(), t3.elapsed().as_secs_f64()));
    let (rss, peak) = memory_mib();
    memory.push(("report".into(), rss, peak));
    let total = t0.elapsed().as_secs_f64();
    let mut log = String::from("stage\tseconds\trss_mib\tpeak_rss_mib\n");
    for ((s, v), (_, rss, peak)) in timings.iter().zip(&memory) {
        log += &format!("{s}\t{v:.3}\t{rss:.0}\t{peak:.0}\n");
    }
    log += &format!("total\t{total:.3}\n");
    write_text(&work.join("run.log"), &log)?;

    // Swap the finished folder into place.
    if final_dir.exists() {
        std::fs::remove_dir_all(&final_dir).map_err(|e| Error::Write { path: final_dir.clone(), message: e.to_string() })?;
    }
    std::fs::rename(&work, &final_dir).map_err(|e| Error::Write { path: final_dir.clone(), message: e.to_string() })?;

    Ok(RunSummary {
        run_dir: final_dir,
        counts: ds_counts,
        curves: n_curves,
        curves_complete: n_complete,
        max_abs_residual_bp: max_res,
        flags: all_flags.len(),
        red_flags,
        rejected: rejects.len(),
        timings,
        memory,
    })
}
