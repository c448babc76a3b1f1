//! All integration tests build into this one binary (one link step instead of many).

mod architecture;
mod cli;
mod closed_forms;
mod pipeline;
mod properties;
mod quality;
mod reference_quantlib;
mod stability;
mod stats_reference;
mod support;
mod bonds;
mod cir;
mod intensity_pipeline;
mod backtest_coverage;
mod demo;
mod shards;
