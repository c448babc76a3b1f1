//! General numerical tools with no finance in them: forward-mode dual numbers and a
//! safeguarded one-dimensional Newton solver.

pub mod dual;
pub mod root;

pub use dual::{Dual, Scalar};
pub use root::{newton_bracketed, RootError, RootOutcome};
