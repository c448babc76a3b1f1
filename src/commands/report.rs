//! `hazardline report RUN_DIR`: re-renders report.md and its figures from a run folder's
//! tables and manifest.

use crate::error::Result;
use std::path::Path;

pub fn run(run_dir: &Path) -> Result<u8> {
    crate::report::markdown::render(run_dir)?;
    say!("report: {}", run_dir.join("report.md").display());
    Ok(0)
}
