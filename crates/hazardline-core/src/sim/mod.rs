//! Simulation of invented credit universes with a known truth: the demo scenario and the
//! planted-truth universes the self-check and the coverage tests use. Plain values only; the
//! `demo` command writes them as tables.

pub mod credit;
pub mod names;
pub mod rates;
pub mod rng;
pub mod scenario;

pub use rng::Rng;
pub use scenario::{generate, Instability, Scenario, ScenarioSpec};
