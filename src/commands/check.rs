//! `hazardline check`: ingestion and data quality only, no calibration.
//!
//! Reads any of the input tables, applies every data-quality rule, and writes rejects,
//! data_quality and quality_flags (Parquet) when an output folder is given.

use crate::error::Result;
use crate::ingest::{load, InputPaths, QualitySettings, TableCounts};
use crate::stages::calibrate::top_reasons;
use crate::tables;
use crate::tables::flags::{FlagRecord, QUALITY_FLAGS};
use crate::time::Calendar;
use std::collections::BTreeMap;
use std::path::PathBuf;

#[derive(Debug, Clone)]
pub struct CheckSettings {
    pub inputs: InputPaths,
    pub calendar: Calendar,
    pub quality: QualitySettings,
    pub out: Option<PathBuf>,
}

#[derive(Debug, Clone, Default)]
pub struct CheckSummary {
    pub counts: Vec<TableCounts>,
    pub top_reasons: Vec<(String, &'static str, usize)>,
    pub flags_by_rule: BTreeMap<&'static str, usize>,
    pub outputs: Vec<PathBuf>,
}

/// Reads the inputs and runs the data-quality rules; writes the tables when `out` is set.
pub fn check(s: &CheckSettings) -> Result<CheckSummary> {
    let ds = load(&s.inputs, &s.calendar, &s.quality)?;
    let mut summary =
        CheckSummary { counts: ds.counts.clone(), top_reasons: top_reasons(&ds.rejects, 10), ..Default::default() };
    for f in &ds.flags {
        *summary.flags_by_rule.entry(f.rule.as_str()).or_default() += 1;
    }
    if let Some(out) = &s.out {
        let meta = vec![
            ("hazardline.version".to_string(), env!("CARGO_PKG_VERSION").to_string()),
            ("hazardline.stage".to_string(), "check".to_string()),
            ("hazardline.quality".to_string(), format!("{:?}", s.quality)),
        ];
        let paths = [
            out.join("rejects.parquet"),
            out.join("data_quality.parquet"),
            out.join(format!("{QUALITY_FLAGS}.parquet")),
        ];
        tables::write_to(&ds.rejects, &paths[0], &meta)?;
        tables::write_to(&ds.data_quality, &paths[1], &meta)?;
        let flags: Vec<FlagRecord> = ds.flags.iter().map(FlagRecord::quality).collect();
        tables::write_to(&flags, &paths[2], &meta)?;
        summary.outputs = paths.to_vec();
    }
    Ok(summary)
}

/// Runs the command and prints what it found.
pub fn run(s: &CheckSettings) -> Result<u8> {
    let s = check(s)?;
    super::print_counts(&s.counts);
    super::print_reasons(&s.top_reasons);
    if !s.flags_by_rule.is_empty() {
        say!("quality flags (rows kept):");
        for (rule, n) in &s.flags_by_rule {
            say!("  {rule:<24} {n:>10}");
        }
    }
    for p in &s.outputs {
        say!("wrote {}", p.display());
    }
    Ok(0)
}
