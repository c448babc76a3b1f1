//! General numerical tools with no finance in them: an inlined exponential, forward-mode dual numbers, a value with
//! its gradient in four variables, a safeguarded one-dimensional Newton solver, and a
//! projected Levenberg-Marquardt for box-bounded least squares.

pub mod dual;
pub mod exp;
pub mod grad;
pub mod identification;
pub mod least_squares;
pub mod root;

pub use dual::{Dual, Scalar};
pub use root::{newton_bracketed, RootError, RootOutcome};
