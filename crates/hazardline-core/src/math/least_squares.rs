//! A small projected Levenberg-Marquardt for box-bounded least squares, with a Cholesky solve
//! of the damped normal equations. It serves the CIR fit (exact Jacobian from forward-mode
//! gradients) and the bond fit (forward differences). No finance here.

/// A least-squares problem: residuals and (optionally) their Jacobian.
pub trait LeastSquares {
    /// (number of parameters, number of residuals).
    fn dims(&self) -> (usize, usize);
    /// Residuals at `x` into `r`; with `jac`, also the Jacobian, row-major (residual by
    /// parameter). Returns false when a value is not finite.
    fn eval(&mut self, x: &[f64], r: &mut [f64], jac: Option<&mut [f64]>) -> bool;
}

/// Stopping rules of [`levenberg_marquardt`].
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct LmSettings {
    pub max_iterations: u32,
    /// Stop when an accepted step lowers the cost by less than this fraction.
    pub f_tol: f64,
    /// Stop when a step moves no parameter by more than this (in the solver's coordinates).
    pub x_tol: f64,
    /// Stop when the cost (half the sum of squares, bp^2) is below this.
    pub cost_floor: f64,
}

impl Default for LmSettings {
    fn default() -> Self {
        LmSettings { max_iterations: 200, f_tol: 1e-9, x_tol: 1e-11, cost_floor: 1e-24 }
    }
}

#[derive(Debug, Clone, PartialEq)]
pub struct LmOutcome {
    pub x: Vec<f64>,
    /// Half the sum of squared residuals.
    pub cost: f64,
    pub iterations: u32,
    pub evaluations: u32,
    pub converged: bool,
    pub failed: bool,
}

/// Cholesky solve of the n x n system a x = b (a symmetric); false if not positive definite.
fn cholesky_solve(a: &mut [f64], b: &mut [f64], n: usize) -> bool {
    for j in 0..n {
        let mut s = a[j * n + j];
        for k in 0..j {
            s -= a[j * n + k] * a[j * n + k];
        }
        if !(s > 0.0) || !s.is_finite() {
            return false;
        }
        let l = s.sqrt();
        a[j * n + j] = l;
        for i in j + 1..n {
            let mut s = a[i * n + j];
            for k in 0..j {
                s -= a[i * n + k] * a[j * n + k];
            }
            a[i * n + j] = s / l;
        }
    }
    for i in 0..n {
        let mut s = b[i];
        for k in 0..i {
            s -= a[i * n + k] * b[k];
        }
        b[i] = s / a[i * n + i];
    }
    for i in (0..n).rev() {
        let mut s = b[i];
        for k in i + 1..n {
            s -= a[k * n + i] * b[k];
        }
        b[i] = s / a[i * n + i];
    }
    true
}

/// Minimises half the sum of squared residuals over the box [lo, hi] from `x0`.
///
/// Marquardt's scaling (damping proportional to diag J'J), Nielsen's update of the damping,
/// steps projected on the box, and parameters at a bound whose gradient points outwards held
/// at the bound for the step (Nielsen 1999, IMM-REP-1999-05; Kanzow, Yamashita and Fukushima
/// 2004 for the projection).
pub fn levenberg_marquardt<P: LeastSquares>(
    p: &mut P,
    x0: &[f64],
    lo: &[f64],
    hi: &[f64],
    max_step: &[f64],
    s: &LmSettings,
) -> LmOutcome {
    let (n, m) = p.dims();
    let mut x: Vec<f64> = x0.iter().zip(lo.iter().zip(hi)).map(|(&v, (&l, &h))| v.clamp(l, h)).collect();
    let mut r = vec![0.0; m];
    let mut jac = vec![0.0; m * n];
    let mut evaluations = 1;
    if !p.eval(&x, &mut r, Some(&mut jac)) {
        return LmOutcome { x, cost: f64::INFINITY, iterations: 0, evaluations, converged: false, failed: true };
    }
    let mut cost = 0.5 * r.iter().map(|v| v * v).sum::<f64>();
    let mut a = vec![0.0; n * n];
    let mut g = vec![0.0; n];
    let normal = |jac: &[f64], r: &[f64], a: &mut [f64], g: &mut [f64]| {
        a.iter_mut().for_each(|v| *v = 0.0);
        g.iter_mut().for_each(|v| *v = 0.0);
        for k in 0..m {
            let row = &jac[k * n..(k + 1) * n];
            for i in 0..n {
                if row[i] == 0.0 {
                    continue;
                }
                g[i] += row[i] * r[k];
                for j in 0..=i {
                    a[i * n + j] += row[i] * row[j];
                }
            }
        }
        for i in 0..n {
            for j in 0..i {
                a[j * n + i] = a[i * n + j];
            }
        }
    };
    normal(&jac, &r, &mut a, &mut g);
    let mut mu = 1e-3;
    let mut nu = 2.0;
    let mut x_new = vec![0.0; n];
    let mut r_new = vec![0.0; m];
    let mut jac_new = vec![0.0; m * n];
    let mut sys = vec![0.0; n * n];
    let mut step = vec![0.0; n];
    let mut free = vec![true; n];
    let mut iterations = 0;
    if cost <= s.cost_floor {
        return LmOutcome { x, cost, iterations, evaluations, converged: true, failed: false };
    }
    while iterations < s.max_iterations {
        iterations += 1;
        for i in 0..n {
            free[i] = !((x[i] <= lo[i] && g[i] > 0.0) || (x[i] >= hi[i] && g[i] < 0.0));
        }
        // (A + mu diag A) step = -g on the free parameters.
        let mut ok = false;
        for _ in 0..60 {
            for i in 0..n {
                for j in 0..n {
                    sys[i * n + j] = if free[i] && free[j] { a[i * n + j] } else { 0.0 };
                }
                let dii = a[i * n + i].max(1e-12 * (1.0 + a[i * n + i]));
                if free[i] {
                    sys[i * n + i] += mu * dii + 1e-300;
                } else {
                    sys[i * n + i] = 1.0;
                }
                step[i] = if free[i] { -g[i] } else { 0.0 };
            }
            if cholesky_solve(&mut sys, &mut step, n) {
                ok = true;
                break;
            }
            mu *= nu;
            nu *= 2.0;
        }
        if !ok {
            return LmOutcome { x, cost, iterations, evaluations, converged: false, failed: true };
        }
        // A step longer than its cap in any coordinate is shortened as a whole (a crude trust
        // region: the damping alone lets the first steps of a poor start jump across the box).
        let scale = (0..n)
            .map(|i| if step[i].abs() > max_step[i] { max_step[i] / step[i].abs() } else { 1.0 })
            .fold(1.0, f64::min);
        let mut max_move: f64 = 0.0;
        for i in 0..n {
            x_new[i] = (x[i] + scale * step[i]).clamp(lo[i], hi[i]);
            step[i] = x_new[i] - x[i];
            max_move = max_move.max(step[i].abs());
        }
        if max_move <= s.x_tol {
            return LmOutcome { x, cost, iterations, evaluations, converged: true, failed: false };
        }
        // Predicted reduction of the quadratic model for the projected step.
        let mut pred = 0.0;
        for i in 0..n {
            let mut ai = 0.0;
            for j in 0..n {
                ai += a[i * n + j] * step[j];
            }
            pred -= g[i] * step[i] + 0.5 * step[i] * ai;
        }
        evaluations += 1;
        let finite = p.eval(&x_new, &mut r_new, Some(&mut jac_new));
        let cost_new = if finite { 0.5 * r_new.iter().map(|v| v * v).sum::<f64>() } else { f64::INFINITY };
        let ratio = if pred > 0.0 { (cost - cost_new) / pred } else { -1.0 };
        if cost_new < cost && ratio > 0.0 {
            let drop = cost - cost_new;
            std::mem::swap(&mut x, &mut x_new);
            std::mem::swap(&mut r, &mut r_new);
            std::mem::swap(&mut jac, &mut jac_new);
            cost = cost_new;
            normal(&jac, &r, &mut a, &mut g);
            mu *= (1.0f64 / 3.0).max(1.0 - (2.0 * ratio - 1.0).powi(3));
            nu = 2.0;
            if cost <= s.cost_floor || drop <= s.f_tol * cost {
                return LmOutcome { x, cost, iterations, evaluations, converged: true, failed: false };
            }
        } else {
            mu *= nu;
            nu *= 2.0;
            if mu > 1e20 {
                // No descent left at machine precision: the point is a (local) minimum.
                return LmOutcome { x, cost, iterations, evaluations, converged: true, failed: false };
            }
        }
    }
    LmOutcome { x, cost, iterations, evaluations, converged: false, failed: false }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn lm_solves_a_bounded_rosenbrock() {
        struct Rb;
        impl LeastSquares for Rb {
            fn dims(&self) -> (usize, usize) {
                (2, 2)
            }
            fn eval(&mut self, x: &[f64], r: &mut [f64], jac: Option<&mut [f64]>) -> bool {
                r[0] = 10.0 * (x[1] - x[0] * x[0]);
                r[1] = 1.0 - x[0];
                if let Some(j) = jac {
                    j.copy_from_slice(&[-20.0 * x[0], 10.0, -1.0, 0.0]);
                }
                true
            }
        }
        let out = levenberg_marquardt(
            &mut Rb,
            &[-1.2, 1.0],
            &[-2.0, -2.0],
            &[2.0, 2.0],
            &[f64::INFINITY; 2],
            &LmSettings::default(),
        );
        assert!(out.converged && (out.x[0] - 1.0).abs() < 1e-8 && (out.x[1] - 1.0).abs() < 1e-8, "{out:?}");
        // With the optimum outside the box the solution sits on the bound x0 <= 0.5.
        let out = levenberg_marquardt(
            &mut Rb,
            &[-1.2, 1.0],
            &[-2.0, -2.0],
            &[0.5, 2.0],
            &[f64::INFINITY; 2],
            &LmSettings::default(),
        );
        assert!((out.x[0] - 0.5).abs() < 1e-12 && (out.x[1] - 0.25).abs() < 1e-6, "{out:?}");
    }
}
