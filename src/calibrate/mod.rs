//! Calibration of hazard curves to market quotes, and the residuals of the repricing.

pub mod bootstrap;
pub mod residuals;

pub use bootstrap::{
    bootstrap, BootstrapError, BootstrapQuote, BootstrapSettings, CurveFit, InfeasiblePolicy, NodeFit, NodeStatus,
};
