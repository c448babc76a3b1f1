//! `manifest.json`: what a run read and did, enough to reproduce and audit it. Deterministic:
//! no timestamps, paths relative to the pipeline file's folder.

use crate::error::{Error, Result};
use serde::{Deserialize, Serialize};
use sha2::{Digest, Sha256};
use std::io::Read;
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

/// SHA-256 and size of a file, streamed.
pub fn hash_file(path: &Path) -> Result<(u64, String)> {
    let mut f = std::fs::File::open(path).map_err(|e| Error::Read { path: path.to_path_buf(), format: "file", message: e.to_string() })?;
    let mut h = Sha256::new();
    let mut buf = vec![0u8; 1 << 20];
    let mut n = 0u64;
    loop {
        let k = f.read(&mut buf).map_err(|e| Error::Read { path: path.to_path_buf(), format: "file", message: e.to_string() })?;
        if k == 0 {
            break;
        }
        n += k as u64;
        h.update(&buf[..k]);
    }
    let hex: String = h.finalize().iter().map(|b| format!("{b:02x}")).collect();
    Ok((n, hex))
}

/// `path` relative to `base` when it lies under it, with `/` separators.
pub fn relative(path: &Path, base: &Path) -> String {
    let p = path.strip_prefix(base).unwrap_or(path);
    p.components().map(|c| c.as_os_str().to_string_lossy().to_string()).collect::<Vec<_>>().join("/")
}

pub fn read(path: &Path) -> Result<Manifest> {
    let text = std::fs::read_to_string(path).map_err(|_| Error::NotFound { path: path.to_path_buf() })?;
    serde_json::from_str(&text).map_err(|e| Error::Read { path: path.to_path_buf(), format: "JSON", message: e.to_string() })
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
