//! argmin's Nelder-Mead on the CIR objective: a comparison for the tests and the benchmark
//! (the `nelder-mead` feature), not part of the tool's default build.

use super::daily::to_params;
use super::pricer::{Buffers, CirPricer};
use super::*;

/// argmin's Nelder-Mead on the solver coordinates, with the parameters projected on the box.
pub(crate) fn nelder_mead(
    pricer: &CirPricer,
    fixed: Option<(f64, f64)>,
    x0: &[f64],
    lo: &[f64],
    hi: &[f64],
    settings: &CirFitSettings,
) -> Option<(f64, CirParams, u32, u32, bool)> {
    use argmin::core::{CostFunction, Error, Executor, State, TerminationReason, TerminationStatus};
    use argmin::solver::neldermead::NelderMead;
    struct Cost<'a> {
        pricer: &'a CirPricer,
        fixed: Option<(f64, f64)>,
        lo: &'a [f64],
        hi: &'a [f64],
    }
    impl CostFunction for Cost<'_> {
        type Param = Vec<f64>;
        type Output = f64;
        fn cost(&self, x: &Vec<f64>) -> Result<f64, Error> {
            let xc: Vec<f64> = x.iter().zip(self.lo.iter().zip(self.hi)).map(|(&v, (&l, &h))| v.clamp(l, h)).collect();
            // Outside the box the cost grows with the distance, so the simplex comes back.
            let out: f64 = x.iter().zip(&xc).map(|(a, b)| (a - b) * (a - b)).sum();
            let p = to_params(&xc, self.fixed);
            let mut buf = Buffers::default();
            let mut r = vec![0.0; self.pricer.len()];
            if !self.pricer.evaluate(p.kappa, p.theta, p.sigma, p.lambda0, &mut buf, &mut r, None) {
                return Ok(f64::MAX);
            }
            Ok(0.5 * r.iter().map(|v| v * v).sum::<f64>() * (1.0 + 1e6 * out) + 1e6 * out)
        }
    }
    let n = x0.len();
    let mut simplex = vec![x0.to_vec()];
    for i in 0..n {
        let mut v = x0.to_vec();
        // 0.2 in the log coordinates; 20% (or 10 bp) in lambda0; half (or 1e-3) in sigma^2.
        let lambda0 = (fixed.is_none() && i == 3) || (fixed.is_some() && i == 1);
        v[i] += if lambda0 {
            (0.2 * x0[i]).max(1e-3)
        } else if fixed.is_none() && i == 2 {
            (0.5 * x0[i]).max(1e-3)
        } else {
            0.2
        };
        simplex.push(v);
    }
    let solver = NelderMead::new(simplex).with_sd_tolerance(settings.nm_sd_tolerance).ok()?;
    let cost = Cost { pricer, fixed, lo, hi };
    let res =
        Executor::new(cost, solver).configure(|s| s.max_iters(settings.nm_max_iterations).counting(true)).run().ok()?;
    let st = res.state();
    let x = st.get_best_param()?.clone();
    let xc: Vec<f64> = x.iter().zip(lo.iter().zip(hi)).map(|(&v, (&l, &h))| v.clamp(l, h)).collect();
    let converged =
        matches!(st.get_termination_status(), TerminationStatus::Terminated(TerminationReason::SolverConverged));
    let evals = st.get_func_counts().get("cost_count").copied().unwrap_or(0) as u32;
    Some((st.get_best_cost(), to_params(&xc, fixed), st.get_iter() as u32, evals, converged))
}
