//! A value with its gradient in four variables, for exact Jacobians by forward-mode
//! differentiation (the CIR fit differentiates its residuals in kappa, theta, sigma and
//! lambda0 through the survival formula and the leg code). No finance here.

use crate::math::Scalar;
use std::ops::{Add, Div, Mul, Neg, Sub};

/// A value and its gradient with respect to (kappa, theta, sigma, lambda0).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Grad4 {
    pub v: f64,
    pub d: [f64; 4],
}

impl Grad4 {
    #[inline]
    pub fn var(v: f64, i: usize) -> Grad4 {
        let mut d = [0.0; 4];
        d[i] = 1.0;
        Grad4 { v, d }
    }
    #[inline]
    pub(crate) fn chain(self, v: f64, dv: f64) -> Grad4 {
        Grad4 { v, d: [self.d[0] * dv, self.d[1] * dv, self.d[2] * dv, self.d[3] * dv] }
    }
}

impl Scalar for Grad4 {
    #[inline]
    fn constant(v: f64) -> Grad4 {
        Grad4 { v, d: [0.0; 4] }
    }
    #[inline]
    fn value(self) -> f64 {
        self.v
    }
    #[inline]
    fn exp(self) -> Grad4 {
        let e = super::exp::exp(self.v);
        self.chain(e, e)
    }
}

macro_rules! grad_binop {
    ($tr:ident, $f:ident, |$a:ident, $b:ident| $v:expr, $da:expr, $db:expr) => {
        impl $tr for Grad4 {
            type Output = Grad4;
            #[inline]
            fn $f(self, o: Grad4) -> Grad4 {
                let ($a, $b) = (self.v, o.v);
                let (ca, cb) = ($da, $db);
                Grad4 {
                    v: $v,
                    d: [
                        self.d[0] * ca + o.d[0] * cb,
                        self.d[1] * ca + o.d[1] * cb,
                        self.d[2] * ca + o.d[2] * cb,
                        self.d[3] * ca + o.d[3] * cb,
                    ],
                }
            }
        }
    };
}
grad_binop!(Add, add, |a, b| a + b, 1.0, 1.0);
grad_binop!(Sub, sub, |a, b| a - b, 1.0, -1.0);
grad_binop!(Mul, mul, |a, b| a * b, b, a);
grad_binop!(Div, div, |a, b| a / b, 1.0 / b, -a / (b * b));

impl Neg for Grad4 {
    type Output = Grad4;
    #[inline]
    fn neg(self) -> Grad4 {
        self.chain(-self.v, -1.0)
    }
}
impl Add<f64> for Grad4 {
    type Output = Grad4;
    #[inline]
    fn add(self, o: f64) -> Grad4 {
        Grad4 { v: self.v + o, d: self.d }
    }
}
impl Sub<f64> for Grad4 {
    type Output = Grad4;
    #[inline]
    fn sub(self, o: f64) -> Grad4 {
        Grad4 { v: self.v - o, d: self.d }
    }
}
impl Mul<f64> for Grad4 {
    type Output = Grad4;
    #[inline]
    fn mul(self, o: f64) -> Grad4 {
        self.chain(self.v * o, o)
    }
}
