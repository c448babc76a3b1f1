//! All integration tests build into this one binary (one link step instead of many).

mod architecture;
mod backtest_coverage;
mod backtest_reference;
mod bonds;
mod cir;
mod cli;
mod closed_forms;
mod demo;
mod folders;
mod intensity_pipeline;
mod pipeline;
mod properties;
mod quality;
mod reference_quantlib;
mod report_html;
mod shards;
mod stability;
mod stats_reference;
mod support;
