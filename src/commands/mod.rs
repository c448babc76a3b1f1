//! Stage entry points used by the command line. Each takes checked settings and returns a
//! summary; `main.rs` only parses flags and prints.

pub mod backtest;
pub mod calibrate;
pub mod check;
pub mod compare;
pub mod demo;
pub mod intensity;
pub mod review;
pub mod selfcheck;
