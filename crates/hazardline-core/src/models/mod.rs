//! Intensity models.

pub mod cir;
