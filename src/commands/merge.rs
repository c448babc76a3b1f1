//! `hazardline merge PIPELINE.toml`: finishes a run from the parts its shards and date ranges
//! wrote, into the same run folder a single run writes.

use crate::config::load_pipeline;
use crate::error::Result;
use crate::run::RunOptions;
use std::path::Path;

/// Merges the parts and prints what the run did.
pub fn run(pipeline: &Path, opts: &RunOptions) -> Result<u8> {
    let cfg = load_pipeline(pipeline)?;
    let summary = crate::run::merge(&cfg, opts)?;
    Ok(super::run::print_run(&summary, cfg.fail_on_red_flags))
}
