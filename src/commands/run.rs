//! `hazardline run PIPELINE.toml`: the whole pipeline into the run folder, or with `--shard`
//! / `--dates` the per-entity half of one part into the run's `.shards` folder.

use crate::config::load_pipeline;
use crate::error::Result;
use crate::parts::{DateRange, Shard};
use crate::run::{RunOptions, RunSummary};
use std::path::Path;

/// Runs the pipeline file (or one part of it) and prints what it did.
pub fn run(pipeline: &Path, opts: &RunOptions, shard: Option<Shard>, dates: Option<DateRange>) -> Result<u8> {
    let cfg = load_pipeline(pipeline)?;
    if shard.is_none() && dates.is_none() {
        let summary = crate::run::run(&cfg, opts)?;
        return Ok(print_run(&summary, cfg.fail_on_red_flags));
    }
    let (shard, dates) = (shard.unwrap_or(Shard::ALL), dates.unwrap_or_default());
    let s = crate::run::run_shard(&cfg, opts, shard, dates)?;
    let range = if dates.is_all() { String::new() } else { format!(", dates {dates}") };
    say!("shard {shard}{range}: {} entities, {} curves", s.entities, s.curves);
    for (stage, secs, _, _) in &s.timings {
        tracing::info!(stage = stage.as_str(), seconds = secs, "stage finished");
    }
    say!("part: {}", s.part_dir.display());
    Ok(0)
}

/// Prints what a whole run (or a merge) did; exit code 1 when it has red flags and the
/// pipeline file asks to fail on them.
pub fn print_run(s: &RunSummary, fail_on_red_flags: bool) -> u8 {
    super::print_counts(&s.counts);
    say!(
        "curves: {} ({} with every node ok); largest |residual| on ok nodes {:.3e} bp",
        s.curves,
        s.curves_complete,
        s.max_abs_residual_bp
    );
    say!("rejected rows: {}; flags: {} ({} red)", s.rejected, s.flags, s.red_flags);
    for (stage, secs) in &s.timings {
        tracing::info!(stage = stage.as_str(), seconds = secs, "stage finished");
    }
    say!("report: {}", s.run_dir.join("report.md").display());
    u8::from(fail_on_red_flags && s.red_flags > 0)
}
