//! Calibration of hazard curves to market quotes, and the residuals of the repricing.

pub mod bond_fit;
pub mod bootstrap;
pub mod cir;
pub mod residuals;
pub mod sensitivity;

pub use bootstrap::{
    bootstrap, BootstrapError, BootstrapQuote, BootstrapSettings, CurveFit, InfeasiblePolicy, NodeFit, NodeStatus,
};
