//! `hazardline selfcheck`: generates a planted-truth universe, runs the whole pipeline on it and
//! prints planted against recovered; exit code 1 when the recovery fails its criteria.

use crate::error::Result;
use crate::run::selfcheck::{selfcheck, Size};
use std::path::Path;

/// Runs the check in `keep` (kept) or in a temporary folder (removed afterwards).
pub fn run(size: Size, seed: u64, keep: Option<&Path>) -> Result<u8> {
    let dir = match keep {
        Some(d) => d.to_path_buf(),
        None => std::env::temp_dir().join(format!("hazardline-selfcheck-{}", std::process::id())),
    };
    let result = selfcheck(&dir, &size.spec(seed));
    if keep.is_none() {
        let _ = std::fs::remove_dir_all(&dir);
    }
    let c = result?;
    say_text!("{}", c.table);
    Ok(u8::from(!c.passed))
}
