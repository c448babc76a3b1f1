//! One module per command-line verb. Each takes the checked arguments, calls the layers
//! below (the run orchestration, the stages, the report), prints what the command did, and
//! returns its exit code when it ran to the end: 0, or 1 where the command's own verdict
//! failed (red flags with `fail_on_red_flags`, a failed self-check). An error comes back to
//! `main.rs`, the one place that prints it and turns it into exit code 2.
//!
//! Layer: the top of the application; nothing in the library imports it.

pub mod calibrate;
pub mod check;
pub mod compare;
pub mod demo;
pub mod merge;
pub mod report;
pub mod run;
pub mod selfcheck;

use crate::ingest::TableCounts;

/// Prints the row accounting of each table: rows in = used + rejected, and the flagged rows.
pub fn print_counts(counts: &[TableCounts]) {
    println!("{:<16} {:>12} {:>12} {:>12} {:>12}", "table", "rows in", "used", "rejected", "flagged");
    for c in counts {
        println!("{:<16} {:>12} {:>12} {:>12} {:>12}", c.table, c.rows_in, c.used, c.rejected, c.flagged);
    }
}

/// Prints the most frequent reject reasons per table.
pub fn print_reasons(reasons: &[(String, &'static str, usize)]) {
    if !reasons.is_empty() {
        println!("top reject reasons:");
        for (table, reason, n) in reasons {
            println!("  {table:<16} {reason:<24} {n:>10}");
        }
    }
}
