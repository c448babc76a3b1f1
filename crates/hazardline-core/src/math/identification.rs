//! How well a least-squares fit pins its parameters down: the condition number of the
//! Jacobian with its columns scaled to unit length, and the parameters' standard errors from
//! the Gauss-Newton covariance.
//!
//! With J the m x n Jacobian of the residuals at the optimum (m residuals, n parameters) and
//! r the residuals:
//! - condition number: sqrt(l_max / l_min) of the eigenvalues of D J'J D, D scaling each column
//!   of J to unit Euclidean norm (Belsley, Kuh and Welsch, Regression Diagnostics, 1980: the
//!   scaled condition number; it is the same in any parametrization that rescales a parameter,
//!   so the solver's coordinates and the natural ones give one value). Infinite when a column is
//!   zero or the columns are linearly dependent (a parameter the quotes do not move).
//! - standard errors: s^2 = sum r^2 / (m - n), covariance s^2 (J'J)^-1, the square roots of its
//!   diagonal (the usual nonlinear least-squares covariance; in a linear model it is the OLS
//!   covariance, which is how the tests check it against statsmodels). None when m <= n (no
//!   degree of freedom left for s^2) or J'J is singular.
//!
//! Plain numerics, no finance; the eigenvalues by the cyclic Jacobi method (n is 2 to a few
//! dozen here).

/// The identification summary of one fit.
#[derive(Debug, Clone, PartialEq)]
pub struct Identification {
    /// Scaled condition number of the Jacobian (>= 1; infinite when singular).
    pub condition_number: f64,
    /// Standard error of each parameter, in the Jacobian's coordinates.
    pub standard_errors: Vec<Option<f64>>,
}

/// Eigenvalues and eigenvectors of the symmetric n x n matrix `a` (row-major) by cyclic Jacobi
/// rotations: (values, vectors column-major in a row-major n x n array: `v[i * n + k]` is
/// component i of eigenvector k).
pub fn symmetric_eigen(a: &[f64], n: usize) -> (Vec<f64>, Vec<f64>) {
    let mut a = a.to_vec();
    let mut v = vec![0.0; n * n];
    for i in 0..n {
        v[i * n + i] = 1.0;
    }
    for _sweep in 0..100 {
        let off: f64 = (0..n)
            .flat_map(|i| (0..n).filter(move |&j| j != i).map(move |j| (i, j)))
            .map(|(i, j)| a[i * n + j] * a[i * n + j])
            .sum();
        let diag: f64 = (0..n).map(|i| a[i * n + i] * a[i * n + i]).sum();
        if off <= 1e-30 * diag || off == 0.0 {
            break;
        }
        for p in 0..n {
            for q in p + 1..n {
                let apq = a[p * n + q];
                if apq == 0.0 {
                    continue;
                }
                let theta = (a[q * n + q] - a[p * n + p]) / (2.0 * apq);
                let t = theta.signum() / (theta.abs() + (theta * theta + 1.0).sqrt());
                let t = if theta == 0.0 { 1.0 } else { t };
                let c = 1.0 / (t * t + 1.0).sqrt();
                let s = t * c;
                for k in 0..n {
                    let akp = a[k * n + p];
                    let akq = a[k * n + q];
                    a[k * n + p] = c * akp - s * akq;
                    a[k * n + q] = s * akp + c * akq;
                }
                for k in 0..n {
                    let apk = a[p * n + k];
                    let aqk = a[q * n + k];
                    a[p * n + k] = c * apk - s * aqk;
                    a[q * n + k] = s * apk + c * aqk;
                }
                for k in 0..n {
                    let vkp = v[k * n + p];
                    let vkq = v[k * n + q];
                    v[k * n + p] = c * vkp - s * vkq;
                    v[k * n + q] = s * vkp + c * vkq;
                }
            }
        }
    }
    ((0..n).map(|i| a[i * n + i]).collect(), v)
}

/// The identification summary of a least-squares fit from its Jacobian `jac` (m x n,
/// row-major: residual by parameter) and residuals `r` (length m). None when n is 0, the
/// sizes disagree or a value is not finite.
pub fn identification(jac: &[f64], r: &[f64], n: usize) -> Option<Identification> {
    let m = r.len();
    if n == 0 || jac.len() != m * n || !jac.iter().chain(r).all(|v| v.is_finite()) {
        return None;
    }
    // J'J.
    let mut jtj = vec![0.0; n * n];
    for row in jac.chunks_exact(n) {
        for i in 0..n {
            for j in 0..n {
                jtj[i * n + j] += row[i] * row[j];
            }
        }
    }
    // Scaled: D J'J D with D = 1 / column norms.
    let norms: Vec<f64> = (0..n).map(|i| jtj[i * n + i].sqrt()).collect();
    let condition_number = if norms.iter().any(|&c| !(c > 0.0)) {
        f64::INFINITY
    } else {
        let scaled: Vec<f64> = (0..n * n).map(|k| jtj[k] / (norms[k / n] * norms[k % n])).collect();
        let (values, _) = symmetric_eigen(&scaled, n);
        let max = values.iter().copied().fold(0.0, f64::max);
        let min = values.iter().copied().fold(f64::INFINITY, f64::min);
        if min > max * 1e-300 && min > 0.0 {
            (max / min).sqrt()
        } else {
            f64::INFINITY
        }
    };
    let standard_errors = if m > n && condition_number.is_finite() && condition_number < 1e15 {
        let s2 = r.iter().map(|v| v * v).sum::<f64>() / (m - n) as f64;
        // (J'J)^-1 through the eigen decomposition of the scaled matrix: (J'J)^-1 = D (DJ'JD)^-1 D.
        let scaled: Vec<f64> = (0..n * n).map(|k| jtj[k] / (norms[k / n] * norms[k % n])).collect();
        let (values, vectors) = symmetric_eigen(&scaled, n);
        (0..n)
            .map(|i| {
                let inv_ii: f64 = (0..n).map(|k| vectors[i * n + k] * vectors[i * n + k] / values[k]).sum::<f64>()
                    / (norms[i] * norms[i]);
                let var = s2 * inv_ii;
                (var >= 0.0 && var.is_finite()).then(|| var.sqrt())
            })
            .collect()
    } else {
        vec![None; n]
    };
    Some(Identification { condition_number, standard_errors })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn eigen_of_a_hand_worked_matrix() {
        // [[2, 1], [1, 2]]: eigenvalues 1 and 3.
        let (mut v, _) = symmetric_eigen(&[2.0, 1.0, 1.0, 2.0], 2);
        v.sort_by(f64::total_cmp);
        assert!((v[0] - 1.0).abs() < 1e-14 && (v[1] - 3.0).abs() < 1e-14, "{v:?}");
        // A 3 x 3 with eigenvalues 2 - sqrt 2, 2, 2 + sqrt 2 (the tridiagonal [-1, 2, -1]).
        let a = [2.0, -1.0, 0.0, -1.0, 2.0, -1.0, 0.0, -1.0, 2.0];
        let (mut v, vec) = symmetric_eigen(&a, 3);
        // A v_k = l_k v_k for each pair, before sorting.
        for k in 0..3 {
            for i in 0..3 {
                let av: f64 = (0..3).map(|j| a[i * 3 + j] * vec[j * 3 + k]).sum();
                assert!((av - v[k] * vec[i * 3 + k]).abs() < 1e-12);
            }
        }
        v.sort_by(f64::total_cmp);
        let s = 2f64.sqrt();
        for (got, want) in v.iter().zip([2.0 - s, 2.0, 2.0 + s]) {
            assert!((got - want).abs() < 1e-13, "{v:?}");
        }
    }

    #[test]
    fn dependent_columns_are_not_identified() {
        // The second column is twice the first: J'J is singular.
        let jac = [1.0, 2.0, 2.0, 4.0, 3.0, 6.0];
        let id = identification(&jac, &[0.1, -0.2, 0.1], 2).unwrap();
        assert!(id.condition_number.is_infinite() || id.condition_number > 1e7, "{id:?}");
        assert!(id.standard_errors.iter().all(|s| s.is_none()));
        // A zero column: a parameter the residuals do not depend on.
        let id = identification(&[1.0, 0.0, 2.0, 0.0, 3.0, 0.0], &[0.1, -0.2, 0.1], 2).unwrap();
        assert!(id.condition_number.is_infinite());
        // No degree of freedom: a condition number, no standard errors.
        let id = identification(&[1.0, 0.0, 0.0, 1.0], &[0.0, 0.0], 2).unwrap();
        assert_eq!(id.condition_number, 1.0);
        assert!(id.standard_errors.iter().all(|s| s.is_none()));
        assert!(identification(&[1.0, f64::NAN], &[0.0, 0.0], 1).is_none());
        assert!(identification(&[1.0], &[0.0, 0.0], 1).is_none());
    }
}
