//! `hazardline demo OUT_DIR`: writes an invented universe (every input table, the planted truth
//! under truth/, and a pipeline.toml that runs the whole pipeline on it).

use crate::error::{Error, Result};
use crate::sim::ScenarioSpec;
use std::path::Path;

/// The largest invented universe, in entities (ten times the full-history benchmark's).
pub const MAX_ENTITIES: usize = 20_000;

pub fn run(out_dir: &Path, spec: &ScenarioSpec) -> Result<u8> {
    // Sizes are checked before anything is allocated: the universe's quote panel grows with
    // entities x years.
    if spec.entities == 0 || spec.entities > MAX_ENTITIES || spec.years == 0 || spec.years > 40 {
        return Err(Error::Usage(format!("--entities must be from 1 to {MAX_ENTITIES} and --years from 1 to 40")));
    }
    let s = crate::stages::universe::write_demo(out_dir, spec)?;
    say!(
        "wrote an invented universe to {}: {} entities, {} CDS quote rows, {} defaults, {} planted faults, {} files",
        s.out.display(),
        s.entities,
        s.quotes,
        s.defaults,
        s.faults,
        s.files.len()
    );
    say!("run it with: hazardline run {}", s.out.join("pipeline.toml").display());
    Ok(0)
}
