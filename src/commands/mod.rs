//! One module per command-line verb. Each takes the checked arguments, calls the layers
//! below (the run orchestration, the stages, the report), prints what the command did, and
//! returns its exit code when it ran to the end: 0, or 1 where the command's own verdict
//! failed (red flags with `fail_on_red_flags`, a failed self-check). An error comes back to
//! `main.rs`, the one place that prints it and turns it into exit code 2.
//!
//! Layer: the top of the application; nothing in the library imports it.

/// Prints a line to standard output. A closed output (`hazardline run ... | head -1`) ends the
/// printing quietly instead of panicking: a command prints after its files are written.
macro_rules! say {
    ($($arg:tt)*) => {{
        use std::io::Write as _;
        let _ = writeln!(std::io::stdout(), $($arg)*);
    }};
}

/// [`say!`] without the line end.
macro_rules! say_text {
    ($($arg:tt)*) => {{
        use std::io::Write as _;
        let _ = write!(std::io::stdout(), $($arg)*);
    }};
}

pub mod calibrate;
pub mod check;
pub mod compare;
pub mod demo;
pub mod flag_rates;
pub mod merge;
pub mod report;
pub mod run;
pub mod selfcheck;

use crate::ingest::TableCounts;

/// Prints the row accounting of each table: rows in = used + rejected, and the flagged rows.
pub fn print_counts(counts: &[TableCounts]) {
    say!("{:<16} {:>12} {:>12} {:>12} {:>12}", "table", "rows in", "used", "rejected", "flagged");
    for c in counts {
        say!("{:<16} {:>12} {:>12} {:>12} {:>12}", c.table, c.rows_in, c.used, c.rejected, c.flagged);
    }
}

/// Prints the most frequent reject reasons per table.
pub fn print_reasons(reasons: &[(String, &'static str, usize)]) {
    if !reasons.is_empty() {
        say!("top reject reasons:");
        for (table, reason, n) in reasons {
            say!("  {table:<16} {reason:<24} {n:>10}");
        }
    }
}
