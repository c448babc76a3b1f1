//! Unit tests of the CIR fit's internals: the exact gradient against finite differences, the
//! starting values.

use super::daily::*;
use crate::math::grad::Grad4;
use crate::math::Scalar;
use crate::models::cir::{CirCoefficients, CirParams};

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

/// Twenty consecutive business days of five quotes each (par spreads and upfronts), on the
/// module's two test discount curves, for the window's evaluations.
fn window_pricers() -> Vec<super::pricer::CirPricer> {
    use crate::calibrate::bootstrap::BootstrapQuote;
    use crate::instruments::cds::{AccrualIntegration, CdsQuote};
    use crate::time::{Calendar, Tenor};
    let cal = Calendar::weekends_only();
    let mut day = chrono::NaiveDate::from_ymd_opt(2024, 3, 14).unwrap();
    let mut out = Vec::new();
    while out.len() < 20 {
        day = day.succ_opt().unwrap();
        if !cal.is_business_day(day) {
            continue;
        }
        let k = out.len() as f64;
        let quotes: Vec<BootstrapQuote> = [(6, 0.004), (12, 0.006), (36, 0.011), (60, 0.015), (120, 0.019)]
            .iter()
            .enumerate()
            .map(|(i, &(m, s))| BootstrapQuote {
                tenor: Tenor::from_months(m).unwrap(),
                quote: if i % 2 == 0 {
                    CdsQuote::ParSpread(s * (1.0 + 0.01 * k))
                } else {
                    CdsQuote::Upfront { upfront: (s - 0.01) * 4.0 + 1e-4 * k, coupon: 0.01 }
                },
                recovery: 0.4,
                maturity: None,
            })
            .collect();
        let curves = crate::curves::discount::test_curves(day);
        let accrual =
            [AccrualIntegration::Standard, AccrualIntegration::Exact, AccrualIntegration::Published][out.len() % 3];
        let d = &curves[out.len() % curves.len()];
        out.push(super::pricer::CirPricer::new(day, &quotes, d, &cal, 1.0 / 12.0, accrual).unwrap());
    }
    out
}

/// The pricer's own residuals with their gradients in (kappa, theta, sigma, lambda0).
fn gradients(pr: &super::pricer::CirPricer, [kappa, theta, sigma, lambda0]: [f64; 4]) -> Vec<Grad4> {
    let mut out = vec![Grad4::constant(0.0); pr.len()];
    assert!(pr.evaluate(
        Grad4::var(kappa, 0),
        Grad4::var(theta, 1),
        Grad4::var(sigma, 2),
        Grad4::var(lambda0, 3),
        &mut super::pricer::Buffers::default(),
        &mut out,
        None
    ));
    out
}

const PARAMS: [[f64; 4]; 5] = [
    [0.4, 0.03, 0.12, 0.015],
    [0.05, 0.2, 0.9, 0.0],
    [2.5, 0.002, 0.0, 0.04],
    [1e-3, 0.05, 1e-6, 0.2],
    [0.8, 0.01, 0.3, 1e-4],
];

/// The held kappa and sigma's coefficients, computed once, give the fixed mode's cost, residuals
/// and Jacobian with the bits the pricer's own evaluation gives at every call: the f64 and the
/// gradient coefficients are the same values, and the derivatives the fixed mode reads (theta,
/// lambda0) are those of the full four-variable evaluation.
#[test]
fn held_coefficients_are_the_evaluations_own() {
    use super::pricer::Buffers;
    use crate::math::least_squares::LeastSquares;
    let pricers = window_pricers();
    let mut checked = 0;
    for pr in &pricers {
        for &[kappa, theta, sigma, lambda0] in &PARAMS {
            let grad: Vec<(f64, f64)> = pr
                .coefficients(Grad4::var(kappa, 0), Grad4::var(sigma, 2))
                .into_iter()
                .map(|(a, b)| (a.v, b.v))
                .collect();
            let plain = pr.coefficients(kappa, sigma);
            assert_eq!(
                grad.iter().map(|(a, b)| (a.to_bits(), b.to_bits())).collect::<Vec<_>>(),
                plain.iter().map(|(a, b)| (a.to_bits(), b.to_bits())).collect::<Vec<_>>()
            );
            let n = pr.len();
            let mut problem = DayProblem::new(pr, Some((kappa, sigma)));
            let p = CirParams { kappa, theta, sigma, lambda0 };
            // The cost against the pricer's own f64 evaluation.
            let mut r = vec![0.0; n];
            assert!(pr.evaluate(kappa, theta, sigma, lambda0, &mut Buffers::default(), &mut r, None));
            assert_eq!(problem.cost_of(&p).to_bits(), (0.5 * r.iter().map(|v| v * v).sum::<f64>()).to_bits());
            // Residuals and Jacobian against the four-variable gradient evaluation, at the
            // problem's own theta (to_x and back may move it by an ulp).
            let (mut r, mut jac) = (vec![0.0; n], vec![0.0; 2 * n]);
            assert!(problem.eval(&to_x(&p, true), &mut r, Some(&mut jac)));
            let theta_x = to_params(&to_x(&p, true), Some((kappa, sigma))).theta;
            let full_x = gradients(pr, [kappa, theta_x, sigma, lambda0]);
            let mut values = vec![0.0; n];
            assert!(problem.eval(&to_x(&p, true), &mut values, None));
            for k in 0..n {
                assert_eq!(r[k].to_bits(), full_x[k].v.to_bits(), "residual {k} at {p:?}");
                assert_eq!(values[k].to_bits(), full_x[k].v.to_bits(), "value {k} at {p:?}");
                assert_eq!(jac[2 * k].to_bits(), (full_x[k].d[1] * theta_x).to_bits(), "d theta {k} at {p:?}");
                assert_eq!(jac[2 * k + 1].to_bits(), full_x[k].d[3].to_bits(), "d lambda0 {k} at {p:?}");
                checked += 1;
            }
        }
    }
    assert!(checked >= 20 * 5 * 5, "{checked}");
}

/// The window's pooled evaluation, which computes each distinct grid time's coefficients once
/// for all its days, gives every day's residuals and Jacobian entries with the bits of that
/// day's own four-variable evaluation.
#[test]
fn pooled_coefficients_are_each_days_own() {
    use super::window::PooledProblem;
    use crate::math::least_squares::LeastSquares;
    let pricers = window_pricers();
    let mut offsets = Vec::new();
    let mut m = 0;
    let mut days = Vec::new();
    for pr in &pricers {
        offsets.push(m);
        m += pr.len();
        days.push(DayProblem::new(pr, None));
    }
    let mut problem = PooledProblem::new(days, offsets.clone(), m);
    let n = 2 + 2 * pricers.len();
    // sigma = 0 has no finite derivative in sigma^2 (the solver's coordinate): not a point the
    // pooled problem evaluates.
    for &[kappa, theta, sigma, lambda0] in PARAMS.iter().filter(|p| p[2] > 0.0) {
        let mut x = vec![kappa.ln(), sigma * sigma];
        for d in 0..pricers.len() {
            x.extend([(theta * (1.0 + 0.01 * d as f64)).ln(), lambda0 + 1e-4 * d as f64]);
        }
        let (mut r, mut jac) = (vec![0.0; m], vec![0.0; m * n]);
        assert!(problem.eval(&x, &mut r, Some(&mut jac)));
        let (kappa, sigma) = (x[0].exp(), x[1].max(0.0).sqrt());
        for (d, pr) in pricers.iter().enumerate() {
            let (theta, lambda0) = (x[2 + 2 * d].exp(), x[3 + 2 * d]);
            let own = gradients(pr, [kappa, theta, sigma, lambda0]);
            for (k, g) in own.iter().enumerate() {
                let row = &jac[(offsets[d] + k) * n..(offsets[d] + k + 1) * n];
                assert_eq!(r[offsets[d] + k].to_bits(), g.v.to_bits(), "day {d} quote {k}");
                assert_eq!(row[0].to_bits(), (g.d[0] * kappa).to_bits(), "day {d} quote {k}");
                assert_eq!(row[1].to_bits(), (g.d[2] * 0.5 / sigma).to_bits(), "day {d} quote {k}");
                assert_eq!(row[2 + 2 * d].to_bits(), (g.d[1] * theta).to_bits(), "day {d} quote {k}");
                assert_eq!(row[3 + 2 * d].to_bits(), g.d[3].to_bits(), "day {d} quote {k}");
            }
        }
    }
}

/// The premium and accrual-on-default sums shared along the longest contract's coupons give
/// every contract's residuals, legs and gradients with the bits of its own coupon pass
/// (`evaluate_terms` over its coupons), on par and upfront quotes, both test discount curves
/// and the three accrual variants; the standard contracts of a day do share their coupons.
#[test]
fn shared_coupon_sums_are_each_contracts_own() {
    use super::pricer::Buffers;
    let pricers = window_pricers();
    let mut checked = 0;
    for pr in &pricers {
        assert!(pr.shared_coupons && pr.shared_protection);
        // The same pricer with each contract's coupons summed on their own.
        let own = super::pricer::CirPricer { shared_coupons: false, ..pr.clone() };
        for &[kappa, theta, sigma, lambda0] in &PARAMS {
            let n = pr.len();
            let (mut a, mut b) = (vec![0.0; n], vec![0.0; n]);
            let (mut legs_a, mut legs_b) = (Vec::new(), Vec::new());
            assert!(pr.evaluate(kappa, theta, sigma, lambda0, &mut Buffers::default(), &mut a, Some(&mut legs_a)));
            assert!(own.evaluate(kappa, theta, sigma, lambda0, &mut Buffers::default(), &mut b, Some(&mut legs_b)));
            let bits = |v: &[f64]| v.iter().map(|x| x.to_bits()).collect::<Vec<_>>();
            assert_eq!(bits(&a), bits(&b));
            let flat = |l: &[(f64, f64)]| l.iter().flat_map(|&(p, q)| [p.to_bits(), q.to_bits()]).collect::<Vec<_>>();
            assert_eq!(flat(&legs_a), flat(&legs_b));
            let (ga, gb) =
                (gradients(pr, [kappa, theta, sigma, lambda0]), gradients(&own, [kappa, theta, sigma, lambda0]));
            for (x, y) in ga.iter().zip(&gb) {
                assert_eq!(x.v.to_bits(), y.v.to_bits());
                assert_eq!(bits(&x.d), bits(&y.d));
                checked += 1;
            }
        }
    }
    assert!(checked >= 20 * 5 * 5, "{checked}");
}
