//! `hazardline compare RUN_A RUN_B`: a Markdown comparison of two runs, to standard output or
//! to a file.

use crate::error::Result;
use std::path::Path;

pub fn run(run_a: &Path, run_b: &Path, out: Option<&Path>) -> Result<u8> {
    let text = crate::report::compare::compare(run_a, run_b)?;
    match out {
        Some(p) => {
            crate::tables::manifest::write_text(p, &text)?;
            say!("wrote {}", p.display());
        }
        None => say_text!("{text}"),
    }
    Ok(0)
}
