//! `hazardline flag-rates`: each stability rule's false-alarm rate on an invented universe
//! without instabilities and its detection rate on planted ones (see
//! [`crate::run::flag_rates`]); exit code 1 when a rule misses its false-alarm target.

use crate::error::{Error, Result};
use crate::run::flag_rates::flag_rates;
use crate::sim::ScenarioSpec;
use std::path::Path;

/// Runs the measurement in `keep` (kept) or in a temporary folder (removed afterwards).
pub fn run(spec: &ScenarioSpec, keep: Option<&Path>) -> Result<u8> {
    if spec.entities < 10 || spec.entities > super::demo::MAX_ENTITIES || spec.years == 0 || spec.years > 40 {
        return Err(Error::Usage(format!(
            "--entities must be from 10 to {} and --years from 1 to 40",
            super::demo::MAX_ENTITIES
        )));
    }
    if spec.instabilities > spec.entities / 2 {
        return Err(Error::Usage("--instabilities must be at most half of --entities".into()));
    }
    let dir = match keep {
        Some(d) => d.to_path_buf(),
        None => std::env::temp_dir().join(format!("hazardline-flag-rates-{}", std::process::id())),
    };
    let result = flag_rates(&dir, spec);
    if keep.is_none() {
        let _ = std::fs::remove_dir_all(&dir);
    }
    let r = result?;
    say_text!("{}", r.table);
    Ok(u8::from(!r.met))
}
