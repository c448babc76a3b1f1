//! Progress bars for long stages: shown only when stderr is a terminal, silent in CI and
//! when output is redirected.

use indicatif::{ProgressBar, ProgressDrawTarget, ProgressStyle};
use std::io::IsTerminal;

/// A bar of `len` steps, hidden off a terminal.
pub fn bar(len: u64, what: &str) -> ProgressBar {
    if !std::io::stderr().is_terminal() || std::env::var_os("CI").is_some() {
        return ProgressBar::with_draw_target(Some(len), ProgressDrawTarget::hidden());
    }
    let pb = ProgressBar::new(len);
    if let Ok(style) = ProgressStyle::with_template("{msg:>20} [{bar:40}] {pos}/{len} ({eta})") {
        pb.set_style(style.progress_chars("=> "));
    }
    pb.set_message(what.to_string());
    pb
}
