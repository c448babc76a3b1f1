//! A safeguarded Newton solver for increasing functions of one variable on [lo, infinity):
//! Newton steps while they stay inside the current bracket, bisection (or expansion while no
//! upper bound is known) otherwise. Plain code, no allocation: the bootstrap calls it once
//! per curve segment, millions of times per review.

/// A converged root.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct RootOutcome {
    pub x: f64,
    pub iterations: u32,
}

/// Why no root was found.
#[derive(Debug, Clone, Copy, PartialEq, thiserror::Error)]
pub enum RootError {
    /// f(lo) > 0 for an increasing f: the root lies below the lower bound.
    #[error("the root lies below the lower bound {lo} (f(lo) = {f_lo:e})")]
    BelowLowerBound { lo: f64, f_lo: f64 },
    /// f stayed negative up to the upper search limit.
    #[error("no root up to {limit} (f = {f_at_limit:e} there)")]
    AboveUpperLimit { limit: f64, f_at_limit: f64 },
    #[error("no convergence after {iterations} iterations; last bracket [{lo}, {hi}], last f = {f:e}")]
    NoConvergence { iterations: u32, lo: f64, hi: f64, f: f64 },
    #[error("the function returned a non-finite value at x = {x}")]
    NotFinite { x: f64 },
}

/// Solves f(x) = 0 for an increasing f on [lo, upper_limit], starting at `guess`.
///
/// `f` returns (value, derivative). Stops when a Newton step is below `x_tol` in absolute
/// size, or the value is exactly zero.
pub fn newton_bracketed<F>(
    mut f: F,
    guess: f64,
    lo: f64,
    upper_limit: f64,
    x_tol: f64,
    max_iter: u32,
) -> Result<RootOutcome, RootError>
where
    F: FnMut(f64) -> (f64, f64),
{
    let mut a = lo; // f(a) <= 0 once checked
    let mut b = f64::INFINITY; // f(b) > 0
    let mut lo_checked = false;
    let mut x = guess.max(lo);
    for it in 1..=max_iter {
        let (fx, dfx) = f(x);
        if !fx.is_finite() || !dfx.is_finite() {
            return Err(RootError::NotFinite { x });
        }
        if fx == 0.0 {
            return Ok(RootOutcome { x, iterations: it });
        }
        if fx > 0.0 {
            b = x;
            if x == lo {
                return Err(RootError::BelowLowerBound { lo, f_lo: fx });
            }
        } else {
            a = x;
            if x == lo {
                lo_checked = true;
            }
            if x >= upper_limit {
                return Err(RootError::AboveUpperLimit { limit: upper_limit, f_at_limit: fx });
            }
        }
        let newton = if dfx > 0.0 { x - fx / dfx } else { f64::NAN };
        let step_ok = newton.is_finite() && newton > a && newton < b && newton <= upper_limit;
        let next = if step_ok {
            newton
        } else if newton.is_finite() && newton > upper_limit && !b.is_finite() {
            upper_limit
        } else if newton.is_finite() && newton <= a && a == lo && !lo_checked {
            // The step wants to go below the bound: test the bound itself next.
            lo
        } else if b.is_finite() {
            0.5 * (a + b)
        } else {
            (2.0 * x.max(1e-4)).min(upper_limit)
        };
        if (next - x).abs() <= x_tol && step_ok {
            return Ok(RootOutcome { x: next, iterations: it });
        }
        if b.is_finite() && (b - a) <= x_tol {
            return Ok(RootOutcome { x: 0.5 * (a + b), iterations: it });
        }
        x = next;
    }
    Err(RootError::NoConvergence { iterations: max_iter, lo: a, hi: b, f: f(x).0 })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn finds_a_square_root() {
        let r = newton_bracketed(|x| (x * x - 2.0, 2.0 * x), 1.0, 0.0, 1e6, 1e-15, 50).unwrap();
        assert!((r.x - 2f64.sqrt()).abs() < 1e-15);
        assert!(r.iterations < 10);
    }

    #[test]
    fn reports_a_root_below_the_bound() {
        let e = newton_bracketed(|x| (x + 1.0, 1.0), 0.5, 0.0, 1e6, 1e-15, 50).unwrap_err();
        assert!(matches!(e, RootError::BelowLowerBound { .. }));
    }

    #[test]
    fn reports_no_root_below_the_limit() {
        // Increasing but bounded above by -1.
        let e = newton_bracketed(|x| (-1.0 - (-x).exp(), (-x).exp()), 0.5, 0.0, 100.0, 1e-15, 200).unwrap_err();
        assert!(matches!(e, RootError::AboveUpperLimit { .. }), "{e:?}");
    }

    #[test]
    fn flat_derivative_falls_back_to_bisection() {
        // A kinked increasing function with zero slope on part of the range.
        let f = |x: f64| if x < 1.0 { (-1.0, 0.0) } else { (x - 1.5, 1.0) };
        let r = newton_bracketed(f, 0.1, 0.0, 1e3, 1e-14, 200).unwrap();
        assert!((r.x - 1.5).abs() < 1e-12);
    }
}
