//! `manifest.json`: what a run read and did, enough to reproduce and audit it. Deterministic:
//! no timestamps, paths relative to the pipeline file's folder.

use crate::calibrate::cir::CirFitMode;
use crate::calibrate::InfeasiblePolicy;
use crate::error::{Error, Result};
use crate::instruments::bond::RecoveryConvention;
use crate::instruments::AccrualIntegration;
use serde::{Deserialize, Serialize};
use serde_json::Number;
use std::collections::BTreeMap;
use std::path::Path;

#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
pub struct Manifest {
    pub tool: String,
    pub version: String,
    /// The source revision of the build ([`SOURCE_REVISION`]).
    #[serde(default = "unknown_revision")]
    pub source_revision: String,
    pub pipeline: FileRecord,
    pub name: String,
    pub label: String,
    /// First and last quote date of the CDS panel.
    pub period: Option<(String, String)>,
    pub inputs: Vec<InputRecord>,
    pub counts: Vec<CountRecord>,
    /// The settings in force after defaults.
    pub settings: serde_json::Value,
    /// Tables written, relative to the run folder.
    pub tables: Vec<String>,
}

/// The source revision this binary was built from (see build.rs): a full commit hash, with
/// `-modified` when the build's sources differed from it, or `unknown`.
pub const SOURCE_REVISION: &str = env!("HAZARDLINE_SOURCE_REVISION");

fn unknown_revision() -> String {
    "unknown".into()
}

impl Manifest {
    /// The recorded settings, typed: a manifest that lacks one or holds a value of the wrong
    /// type is refused with the key's name.
    pub fn recorded_settings(&self, path: &Path) -> Result<RecordedSettings> {
        serde_json::from_value(self.settings.clone()).map_err(|e| Error::Read {
            path: path.to_path_buf(),
            format: "JSON",
            message: format!("settings: {e}"),
        })
    }
}

/// The run settings as the manifest records them (the checked run configuration, serialized):
/// the one typed view the report reads, so it never looks a setting up by name or falls back
/// to a default of its own. Numbers the report prints as recorded stay JSON numbers.
#[derive(Debug, Clone, Deserialize)]
pub struct RecordedSettings {
    pub recovery: f64,
    pub recovery_by_seniority: BTreeMap<String, f64>,
    #[serde(default)]
    pub seniority_order: Vec<String>,
    pub infeasible: InfeasiblePolicy,
    pub accrual_on_default: AccrualIntegration,
    #[serde(default)]
    pub zero_rate_compounding: crate::curves::Compounding,
    #[serde(default)]
    pub zero_rate_day_count: crate::curves::RateDayCount,
    pub bond_fit: bool,
    pub cir: bool,
    pub cir_mode: CirFitMode,
    pub cir_window: usize,
    pub bond_recovery_convention: RecoveryConvention,
    pub quality: RecordedQuality,
    pub charted_entities: Option<Vec<String>>,
    /// ISO dates.
    pub term_structure_dates: Option<Vec<String>>,
    /// The backtest settings as (name, value) pairs.
    pub backtest_settings: Vec<(String, String)>,
    /// The stability settings as (name, value) pairs.
    pub stability_settings: Vec<(String, String)>,
}

impl RecordedSettings {
    /// Whether the backtest ran (`enabled` of the backtest settings).
    pub fn backtest_enabled(&self, path: &Path) -> Result<bool> {
        match self.backtest_settings.iter().find(|(k, _)| k == "enabled").map(|(_, v)| v.as_str()) {
            Some("true") => Ok(true),
            Some("false") => Ok(false),
            other => Err(Error::Read {
                path: path.to_path_buf(),
                format: "JSON",
                message: format!("settings: backtest_settings records `enabled` as {other:?}, not true or false"),
            }),
        }
    }

    /// The tolerance (bp) within which a calibrated quote counts as repriced
    /// (`stability.reprice_tolerance_bp`).
    pub fn reprice_tolerance_bp(&self, path: &Path) -> Result<f64> {
        self.stability_settings
            .iter()
            .find(|(k, _)| k == "reprice_tolerance_bp")
            .and_then(|(_, v)| v.parse::<f64>().ok())
            .ok_or_else(|| Error::Read {
                path: path.to_path_buf(),
                format: "JSON",
                message: "settings: stability_settings records no reprice_tolerance_bp".into(),
            })
    }
}

/// The data-quality thresholds as recorded.
#[derive(Debug, Clone, Deserialize)]
pub struct RecordedQuality {
    pub max_spread_bp: Number,
    /// Absent in runs written before the floor existed.
    #[serde(default)]
    pub min_spread_bp: Option<Number>,
    pub zero_rate_band: [Number; 2],
    pub bond_price_band: [Number; 2],
    pub stale_days: Number,
    pub spike_z: Number,
    pub spike_min_log_move: Number,
    pub spike_revert_share: Number,
    pub unit_slip_ratio: Number,
    pub unit_slip_min_run: Number,
    pub min_tenors: Number,
}

#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
pub struct FileRecord {
    pub path: String,
    pub bytes: u64,
    pub sha256: String,
}

#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
pub struct InputRecord {
    pub table: String,
    pub path: String,
    pub bytes: u64,
    pub sha256: String,
}

/// Row counts of one table after one stage: rows_in = used + rejected.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
pub struct CountRecord {
    pub stage: String,
    pub table: String,
    pub rows_in: u64,
    pub used: u64,
    pub rejected: u64,
    pub flagged: u64,
}

pub use crate::ingest::files::{hash_file, relative};

pub fn read(path: &Path) -> Result<Manifest> {
    let text = std::fs::read_to_string(path).map_err(|_| Error::NotFound { path: path.to_path_buf() })?;
    serde_json::from_str(&text).map_err(|e| Error::Read {
        path: path.to_path_buf(),
        format: "JSON",
        message: e.to_string(),
    })
}

/// Writes text atomically (temporary name in the same folder, then rename).
pub fn write_text(path: &Path, text: &str) -> Result<()> {
    let dir = path.parent().unwrap_or(Path::new("."));
    std::fs::create_dir_all(dir).map_err(|e| Error::Write { path: dir.to_path_buf(), message: e.to_string() })?;
    let name = path.file_name().and_then(|n| n.to_str()).unwrap_or("file");
    let tmp = dir.join(format!(".{name}.{}.tmp", std::process::id()));
    std::fs::write(&tmp, text).map_err(|e| Error::Write { path: tmp.clone(), message: e.to_string() })?;
    std::fs::rename(&tmp, path).map_err(|e| Error::Write { path: path.to_path_buf(), message: e.to_string() })
}
