//! Facts about input files that the manifest records and the messages show: a file's size and
//! SHA-256, and a path shown relative to the pipeline file's folder.

use crate::error::{Error, Result};
use sha2::{Digest, Sha256};
use std::io::Read;
use std::path::Path;

/// SHA-256 and size of a file, streamed.
pub fn hash_file(path: &Path) -> Result<(u64, String)> {
    let mut f = std::fs::File::open(path).map_err(|e| Error::Read {
        path: path.to_path_buf(),
        format: "file",
        message: e.to_string(),
    })?;
    let mut h = Sha256::new();
    let mut buf = vec![0u8; 1 << 20];
    let mut n = 0u64;
    loop {
        let k = f.read(&mut buf).map_err(|e| Error::Read {
            path: path.to_path_buf(),
            format: "file",
            message: e.to_string(),
        })?;
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
