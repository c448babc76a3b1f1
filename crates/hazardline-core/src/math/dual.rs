//! Forward-mode dual numbers, so the CDS leg formulas are written once and give both the
//! value and the exact derivative with respect to one hazard rate.

use std::ops::{Add, Div, Mul, Neg, Sub};

/// The arithmetic the leg formulas need: `f64` for plain pricing, [`Dual`] for Newton steps.
pub trait Scalar:
    Copy
    + Add<Output = Self>
    + Sub<Output = Self>
    + Mul<Output = Self>
    + Div<Output = Self>
    + Neg<Output = Self>
    + Add<f64, Output = Self>
    + Sub<f64, Output = Self>
    + Mul<f64, Output = Self>
{
    fn constant(v: f64) -> Self;
    fn value(self) -> f64;
    fn exp(self) -> Self;
}

impl Scalar for f64 {
    #[inline]
    fn constant(v: f64) -> f64 {
        v
    }
    #[inline]
    fn value(self) -> f64 {
        self
    }
    #[inline]
    fn exp(self) -> f64 {
        super::exp::exp(self)
    }
}

/// A value and its derivative with respect to one variable. Laid out as two consecutive
/// f64, value first (`repr(C)`), so that a vector load reads both.
#[derive(Debug, Clone, Copy, PartialEq)]
#[repr(C)]
pub struct Dual {
    pub v: f64,
    pub d: f64,
}

impl Dual {
    #[inline]
    pub fn new(v: f64, d: f64) -> Dual {
        Dual { v, d }
    }
}

impl Scalar for Dual {
    #[inline]
    fn constant(v: f64) -> Dual {
        Dual { v, d: 0.0 }
    }
    #[inline]
    fn value(self) -> f64 {
        self.v
    }
    #[inline]
    fn exp(self) -> Dual {
        let e = super::exp::exp(self.v);
        Dual { v: e, d: e * self.d }
    }
}

impl Add for Dual {
    type Output = Dual;
    #[inline]
    fn add(self, o: Dual) -> Dual {
        Dual { v: self.v + o.v, d: self.d + o.d }
    }
}
impl Sub for Dual {
    type Output = Dual;
    #[inline]
    fn sub(self, o: Dual) -> Dual {
        Dual { v: self.v - o.v, d: self.d - o.d }
    }
}
impl Mul for Dual {
    type Output = Dual;
    #[inline]
    fn mul(self, o: Dual) -> Dual {
        Dual { v: self.v * o.v, d: self.d * o.v + self.v * o.d }
    }
}
impl Div for Dual {
    type Output = Dual;
    #[inline]
    fn div(self, o: Dual) -> Dual {
        let inv = 1.0 / o.v;
        let q = self.v * inv;
        Dual { v: q, d: (self.d - q * o.d) * inv }
    }
}
impl Neg for Dual {
    type Output = Dual;
    #[inline]
    fn neg(self) -> Dual {
        Dual { v: -self.v, d: -self.d }
    }
}
impl Add<f64> for Dual {
    type Output = Dual;
    #[inline]
    fn add(self, o: f64) -> Dual {
        Dual { v: self.v + o, d: self.d }
    }
}
impl Sub<f64> for Dual {
    type Output = Dual;
    #[inline]
    fn sub(self, o: f64) -> Dual {
        Dual { v: self.v - o, d: self.d }
    }
}
impl Mul<f64> for Dual {
    type Output = Dual;
    #[inline]
    fn mul(self, o: f64) -> Dual {
        Dual { v: self.v * o, d: self.d * o }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn derivative_of_a_composite_matches_the_analytic_one() {
        // f(x) = x exp(-2x) / (1 + x), f'(x) by hand.
        let x = 0.7;
        let xd = Dual::new(x, 1.0);
        let f = xd * (xd * -2.0).exp() / (xd + 1.0);
        let e = (-2.0 * x).exp();
        let analytic = (e * (1.0 - 2.0 * x) * (1.0 + x) - x * e) / ((1.0 + x) * (1.0 + x));
        assert!((f.v - x * e / (1.0 + x)).abs() < 1e-16);
        assert!((f.d - analytic).abs() < 1e-15);
    }
}
