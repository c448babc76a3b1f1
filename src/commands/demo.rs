//! `hazardline demo OUT_DIR`: writes an invented universe (every input table, the planted truth
//! under truth/, and a pipeline.toml that runs the whole pipeline on it).

use crate::error::{Error, Result};
use crate::sim::ScenarioSpec;
use std::path::Path;

pub fn run(out_dir: &Path, spec: &ScenarioSpec) -> Result<u8> {
    if spec.entities == 0 || spec.years == 0 || spec.years > 40 {
        return Err(Error::Usage("--entities must be at least 1 and --years between 1 and 40".into()));
    }
    let s = crate::stages::universe::write_demo(out_dir, spec)?;
    println!(
        "wrote an invented universe to {}: {} entities, {} CDS quote rows, {} defaults, {} planted faults, {} files",
        s.out.display(),
        s.entities,
        s.quotes,
        s.defaults,
        s.faults,
        s.files.len()
    );
    println!("run it with: hazardline run {}", s.out.join("pipeline.toml").display());
    Ok(0)
}
