//! Calibration of hazard curves to market quotes, and the residuals of the repricing.

pub mod bond_fit;
pub mod bootstrap;
pub mod intensity_fit;
pub mod residuals;

pub use bootstrap::{
    bootstrap, BootstrapError, BootstrapQuote, BootstrapSettings, CurveFit, InfeasiblePolicy, NodeFit, NodeStatus,
};
