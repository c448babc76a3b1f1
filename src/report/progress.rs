//! Progress bars for long stages: shown only when stderr is a terminal, silent in CI, when
//! output is redirected and when the log lines are JSON (`--log-format json`).

use indicatif::{ProgressBar, ProgressDrawTarget, ProgressStyle};
use std::io::IsTerminal;

/// Set once by the command line when the log lines are JSON: bars would break the lines.
pub static HIDDEN: std::sync::atomic::AtomicBool = std::sync::atomic::AtomicBool::new(false);

/// A bar of `len` steps, hidden off a terminal.
pub fn bar(len: u64, what: &str) -> ProgressBar {
    if !std::io::stderr().is_terminal()
        || std::env::var_os("CI").is_some()
        || HIDDEN.load(std::sync::atomic::Ordering::Relaxed)
    {
        return ProgressBar::with_draw_target(Some(len), ProgressDrawTarget::hidden());
    }
    let pb = ProgressBar::new(len);
    if let Ok(style) = ProgressStyle::with_template("{msg:>20} [{bar:40}] {pos}/{len} ({eta})") {
        pb.set_style(style.progress_chars("=> "));
    }
    pb.set_message(what.to_string());
    pb
}
