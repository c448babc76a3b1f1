//! `hazardline calibrate`: the CDS bootstrap alone, on input tables named by flags, into an
//! output folder: hazard_curves, calibration_residuals, rejects, data_quality and
//! quality_flags (Parquet).

use crate::error::{Error, Result};
use crate::ingest::{load, InputPaths, QualitySettings, TableCounts};
use crate::parts::DateRange;
use crate::stages::calibrate::{calibrate_blocks, metadata, top_reasons, CalibrationParams};
use crate::tables::flags::{FlagRecord, QUALITY_FLAGS};
use crate::tables::{self, hazard_writer, residual_writer};
use crate::time::Calendar;
use std::collections::BTreeMap;
use std::path::PathBuf;

/// Checked settings of the calibrate command.
#[derive(Debug, Clone)]
pub struct CalibrateSettings {
    /// cds_quotes and discount are required; defaults (for the after-default rule) and the
    /// other tables are optional.
    pub inputs: InputPaths,
    pub out: PathBuf,
    pub params: CalibrationParams,
    pub calendar: Calendar,
    pub quality: QualitySettings,
}

/// What a calibrate run did.
#[derive(Debug, Clone, Default)]
pub struct CalibrateSummary {
    /// Per input table, after calibration (rejects of the calibrate stage included).
    pub counts: Vec<TableCounts>,
    pub curves: usize,
    pub curves_complete: usize,
    pub nodes: usize,
    pub nodes_by_status: BTreeMap<&'static str, usize>,
    pub max_abs_residual_bp: f64,
    pub top_reasons: Vec<(String, &'static str, usize)>,
    pub outputs: Vec<PathBuf>,
}

/// Calibrates the inputs and writes the tables.
pub fn calibrate(s: &CalibrateSettings) -> Result<CalibrateSummary> {
    if s.inputs.cds_quotes.is_none() || (s.inputs.discount.is_none() && s.inputs.rate_quotes.is_none()) {
        return Err(Error::Argument {
            name: "inputs",
            message: "calibrate needs the cds_quotes table and the discount or rate_quotes table".into(),
        });
    }
    let mut ds = load(&s.inputs, &s.calendar, &s.quality)?;
    let meta = metadata(&s.params, &s.quality);
    let out = &s.out;
    let paths = [
        out.join("hazard_curves.parquet"),
        out.join("calibration_residuals.parquet"),
        out.join("rejects.parquet"),
        out.join("data_quality.parquet"),
        out.join(format!("{QUALITY_FLAGS}.parquet")),
    ];
    // Each block of curves goes to the two tables as it is done (the rows moved, never
    // copied); the files are renamed into place only once every block is written.
    let mut hazard = hazard_writer(&paths[0], &meta)?;
    let mut residuals = residual_writer(&paths[1], &meta)?;
    let cal = calibrate_blocks(&mut ds, &s.params, DateRange::ALL, false, |b| {
        hazard.push(b.hazard)?;
        residuals.push(b.residuals)
    })?;
    let nodes = hazard.finish()?;
    residuals.finish()?;
    let mut rejects = std::mem::take(&mut ds.rejects);
    rejects.extend(cal.rejects.iter().cloned());
    let summary = CalibrateSummary {
        counts: ds.counts.clone(),
        curves: cal.curves,
        curves_complete: cal.curves_complete,
        nodes,
        nodes_by_status: cal.nodes_by_status.clone(),
        max_abs_residual_bp: cal.max_abs_residual_bp,
        top_reasons: top_reasons(&rejects, 10),
        outputs: Vec::new(),
    };
    tables::write_to(&rejects, &paths[2], &meta)?;
    tables::write_to(&ds.data_quality, &paths[3], &meta)?;
    let flags: Vec<FlagRecord> = ds.flags.iter().map(FlagRecord::quality).collect();
    tables::write_to(&flags, &paths[4], &meta)?;
    Ok(CalibrateSummary { outputs: paths.to_vec(), ..summary })
}

/// Runs the command and prints what it did.
pub fn run(s: &CalibrateSettings) -> Result<u8> {
    let started = std::time::Instant::now();
    let s = calibrate(s)?;
    super::print_counts(&s.counts);
    super::print_reasons(&s.top_reasons);
    say!("curves: {} ({} with every node ok), nodes: {}", s.curves, s.curves_complete, s.nodes);
    for (status, n) in &s.nodes_by_status {
        say!("  {status}: {n}");
    }
    say!("largest |residual| on ok nodes: {:.3e} bp", s.max_abs_residual_bp);
    for p in &s.outputs {
        say!("wrote {}", p.display());
    }
    tracing::info!(seconds = started.elapsed().as_secs_f64(), "calibrate finished");
    Ok(0)
}
