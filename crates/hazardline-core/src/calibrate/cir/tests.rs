//! Unit tests of the CIR fit's internals: the exact gradient against finite differences, the
//! starting values.

use super::daily::*;
use crate::math::grad::Grad4;
use crate::models::cir::CirCoefficients;

#[test]
fn gradient_matches_finite_differences() {
    let p = [0.4, 0.03, 0.12, 0.015];
    let f = |k: f64, th: f64, s: f64, l: f64, t: f64| {
        let (a, b) = CirCoefficients::new(k, s).at(t);
        th * a - l * b
    };
    for t in [0.3, 4.0, 12.0] {
        let (a, b) = CirCoefficients::new(Grad4::var(p[0], 0), Grad4::var(p[2], 2)).at(t);
        let g = Grad4::var(p[1], 1) * a - Grad4::var(p[3], 3) * b;
        for i in 0..4 {
            let h = 1e-6 * p[i];
            let mut up = p;
            let mut dn = p;
            up[i] += h;
            dn[i] -= h;
            let fd = (f(up[0], up[1], up[2], up[3], t) - f(dn[0], dn[1], dn[2], dn[3], t)) / (2.0 * h);
            assert!((fd - g.d[i]).abs() < 1e-7 * (1.0 + fd.abs()), "t={t} i={i}: {fd} vs {}", g.d[i]);
        }
    }
}

#[test]
fn start_recovers_a_deterministic_curve() {
    // Integrated hazards of sigma = 0 parameters are matched exactly at a grid kappa.
    let (k, th, l0) = (0.5, 0.03, 0.01);
    let times: Vec<f64> = [0.5, 1.0, 2.0, 3.0, 5.0, 7.0, 10.0].to_vec();
    let h: Vec<f64> = times
        .iter()
        .map(|&t| {
            let b = (1.0 - (-k * t).exp()) / k;
            l0 * b + th * (t - b)
        })
        .collect();
    let p = start_from_points(&times, &h);
    assert_eq!(p.kappa, 0.5);
    assert!((p.theta - th).abs() < 1e-12 && (p.lambda0 - l0).abs() < 1e-12);
}
