//! `manifest.json`: what a run read and did, enough to reproduce and audit it. Deterministic:
//! no timestamps, paths relative to the pipeline file's folder.

use crate::error::{Error, Result};
use serde::{Deserialize, Serialize};
use std::path::Path;

#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
pub struct Manifest {
    pub tool: String,
    pub version: String,
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
