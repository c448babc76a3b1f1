//! The review report: `report.md`, its SVG figures and `report.html` (the same document with the
//! figures inline, for a browser and for print), rendered from a run folder's tables and
//! manifest only (so `hazardline report RUN_DIR` re-renders exactly what `run` wrote), and the
//! comparison of two runs.
//!
//! Layer: below the stages and the configuration, above the tables. Must not: compute a
//! statistic the tables do not hold, or read the inputs.

pub mod charts;
pub mod compare;
mod findings;
mod fits_section;
pub mod flag_notes;
mod folds;
pub mod html;
pub mod markdown;
pub mod progress;
pub mod sections;
mod verdicts_section;
