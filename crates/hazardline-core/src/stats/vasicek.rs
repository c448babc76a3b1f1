//! Default counts under correlated defaults: the one-factor Gaussian model of Vasicek (1987,
//! 2002, "The distribution of loan portfolio value", Risk 15(12)).
//!
//! Obligor i defaults when sqrt(rho) Z + sqrt(1 - rho) e_i < Phi^-1(PD), with Z, e_i
//! independent standard normals. Given the systematic factor Z = z every obligor defaults
//! independently with p(z) = Phi((Phi^-1(PD) - sqrt(rho) z) / sqrt(1 - rho)), so
//! P[D >= d] = integral of P[Binomial(n, p(z)) >= d] phi(z) dz (and likewise P[D <= d]).
//! The integral is taken by adaptive Gauss-Legendre quadrature (10 nodes per panel, a panel
//! halved until its two halves agree with it to 1e-13 of the integrand's largest grid value
//! times the 0.25 panel width, the tolerance halving with each level) over the range
//! of z where the integrand is above 1e-22 of its largest value on a 0.25 grid over
//! [-38.5, 38.5] (beyond which phi underflows). Checked against scipy's `quad` in
//! tests/reference/backtest_scipy.json.
//!
//! With rho = 0 the model is the binomial; rho = 1 is refused (every obligor is the factor).

use super::special::{normal_cdf, normal_density, normal_quantile};
use super::{binomial_lower_tail, binomial_upper_tail, check_counts, check_probability, half_alpha, StatsError};
use std::sync::OnceLock;

/// The asset correlation of the supervisory formula for corporate exposures, from the
/// one-year PD: rho = 0.12 w + 0.24 (1 - w), w = (1 - e^(-50 PD)) / (1 - e^(-50)).
/// Source: Basel Committee on Banking Supervision, "International Convergence of Capital
/// Measurement and Capital Standards" (June 2006), paragraph 272, and the same formula in the
/// EU Capital Requirements Regulation 575/2013, Article 153; its end points 0.24 at PD = 0
/// and 0.12 for large PD are checked in a test.
pub fn supervisory_corporate_correlation(pd_one_year: f64) -> f64 {
    let w = (-(-50.0 * pd_one_year).exp_m1()) / (-(-50.0f64).exp_m1());
    0.12 * w + 0.24 * (1.0 - w)
}

/// Which tail of D.
#[derive(Clone, Copy)]
enum Tail {
    /// P[D >= d]
    Upper,
    /// P[D <= d]
    Lower,
}

fn check(n: u64, d: u64, pd: f64, rho: f64) -> Result<(), StatsError> {
    check_counts(d, n)?;
    check_probability("pd", pd)?;
    if !(0.0..1.0).contains(&rho) {
        return Err(StatsError::ProbabilityOutOfRange { name: "asset correlation (must be < 1)", value: rho });
    }
    Ok(())
}

/// P[D >= d] for n obligors of probability `pd` and asset correlation `rho` (in [0, 1)).
pub fn vasicek_upper_tail(d: u64, n: u64, pd: f64, rho: f64) -> Result<f64, StatsError> {
    check(n, d, pd, rho)?;
    tail(d, n, pd, rho, Tail::Upper)
}

/// P[D <= d] for n obligors of probability `pd` and asset correlation `rho` (in [0, 1)).
pub fn vasicek_lower_tail(d: u64, n: u64, pd: f64, rho: f64) -> Result<f64, StatsError> {
    check(n, d, pd, rho)?;
    tail(d, n, pd, rho, Tail::Lower)
}

/// The default counts the model makes plausible at the two-sided `level`: the smallest k with
/// P[D <= k] >= alpha / 2, and the smallest k with P[D <= k] >= 1 - alpha / 2.
pub fn vasicek_count_interval(n: u64, pd: f64, rho: f64, level: f64) -> Result<(u64, u64), StatsError> {
    check(n.max(1), 0, pd, rho)?;
    let ha = half_alpha(level)?;
    let smallest = |target: f64| -> Result<u64, StatsError> {
        first_holding(n, approximate_count(n, pd, rho, target), |k| Ok(tail(k, n, pd, rho, Tail::Lower)? >= target))
    };
    Ok((smallest(ha)?, smallest(1.0 - ha)?))
}

/// A default count near the `q` quantile of D, where [`vasicek_count_interval`] starts its
/// search: the large-portfolio quantile of the default rate, Phi((Phi^-1(PD) + sqrt(rho)
/// Phi^-1(q)) / sqrt(1 - rho)) (Vasicek 2002), times n, its move from n PD widened by the
/// binomial spread given the factor (all there is at rho = 0). Only a starting point: the
/// search finds the same count from any start.
fn approximate_count(n: u64, pd: f64, rho: f64, q: f64) -> u64 {
    let (Ok(c), Ok(z)) = (normal_quantile(pd), normal_quantile(q)) else {
        return if pd >= 1.0 { n } else { 0 };
    };
    let nf = n as f64;
    // The systematic move from the mean count, as if normal (its spread), widened by the
    // binomial spread of a given factor: both spreads added in squares.
    let systematic = nf * (normal_cdf((c + rho.sqrt() * z) / (1.0 - rho).sqrt()) - pd);
    let binomial = nf * pd * (1.0 - pd);
    let k = if rho == 0.0 || systematic == 0.0 || z == 0.0 {
        nf * pd + z * binomial.sqrt()
    } else {
        let spread = systematic / z;
        nf * pd + systematic * (1.0 + binomial / (spread * spread)).sqrt()
    };
    if k.is_finite() {
        k.clamp(0.0, nf) as u64
    } else {
        0
    }
}

/// The smallest k in [0, n) for which `holds(k)`, or n when it holds for none of them, for a
/// predicate that is false up to some k and true from there on: from `guess`, steps of 1, 2,
/// 4, ... away from it until the answer is bracketed, then halving. The answer of halving
/// [0, n] from the start (k = n is never asked, taken as holding), in a few calls when the
/// guess is close rather than about 2 log2(n).
fn first_holding<E>(n: u64, guess: u64, mut holds: impl FnMut(u64) -> Result<bool, E>) -> Result<u64, E> {
    let g = guess.min(n);
    // The answer is in [lo, hi]: every k below lo fails, and hi holds (or is n).
    let (mut lo, mut hi);
    if g < n && !holds(g)? {
        let (mut failed, mut step) = (g, 1u64);
        hi = loop {
            let probe = failed.saturating_add(step).min(n);
            if probe == n || holds(probe)? {
                break probe;
            }
            failed = probe;
            step = step.saturating_mul(2);
        };
        lo = failed + 1;
    } else {
        hi = g;
        let mut step = 1u64;
        lo = loop {
            if hi == 0 {
                break 0;
            }
            let probe = hi.saturating_sub(step);
            if !holds(probe)? {
                break probe + 1;
            }
            hi = probe;
            step = step.saturating_mul(2);
        };
    }
    while lo < hi {
        let mid = lo + (hi - lo) / 2;
        if holds(mid)? {
            hi = mid;
        } else {
            lo = mid + 1;
        }
    }
    Ok(lo)
}

fn tail(d: u64, n: u64, pd: f64, rho: f64, side: Tail) -> Result<f64, StatsError> {
    let binom = |p: f64| match side {
        Tail::Upper => binomial_upper_tail(d, n, p),
        Tail::Lower => binomial_lower_tail(d, n, p),
    };
    if rho == 0.0 || pd == 0.0 || pd == 1.0 {
        return binom(pd);
    }
    match side {
        Tail::Upper if d == 0 => return Ok(1.0),
        Tail::Lower if d == n => return Ok(1.0),
        _ => {}
    }
    let c = normal_quantile(pd)?;
    let (a, b) = (rho.sqrt(), (1.0 - rho).sqrt());
    let f = |z: f64| -> Result<f64, StatsError> {
        Ok(binom(normal_cdf((c - a * z) / b).clamp(0.0, 1.0))? * normal_density(z))
    };
    // Where the integrand lives.
    const STEP: f64 = 0.25;
    let grid: Vec<f64> = (0..=308).map(|i| -38.5 + STEP * f64::from(i)).collect();
    let values = grid.iter().map(|&z| f(z)).collect::<Result<Vec<f64>, _>>()?;
    let top = values.iter().copied().fold(0.0f64, f64::max);
    if top == 0.0 {
        return Ok(0.0);
    }
    let keep = |i: usize| values[i] > top * 1e-22;
    let first = (0..grid.len()).find(|&i| keep(i)).unwrap_or(0).saturating_sub(1);
    let last = (0..grid.len()).rev().find(|&i| keep(i)).map_or(grid.len() - 1, |i| (i + 1).min(grid.len() - 1));
    let mut total = 0.0;
    for i in first..last {
        total += adaptive(&f, grid[i], grid[i + 1], top * STEP * 1e-13, 0)?;
    }
    Ok(total.clamp(0.0, 1.0))
}

/// 10-point Gauss-Legendre nodes and weights on [-1, 1] (Newton on the Legendre polynomial).
fn gauss_legendre() -> &'static [(f64, f64)] {
    static NODES: OnceLock<Vec<(f64, f64)>> = OnceLock::new();
    NODES.get_or_init(|| {
        const N: usize = 10;
        let mut out = Vec::with_capacity(N);
        for i in 0..N {
            let mut x = (std::f64::consts::PI * (i as f64 + 0.75) / (N as f64 + 0.5)).cos();
            let mut dp = 1.0;
            for _ in 0..100 {
                let (mut p0, mut p1) = (1.0, x);
                for k in 2..=N {
                    let k = k as f64;
                    let p2 = ((2.0 * k - 1.0) * x * p1 - (k - 1.0) * p0) / k;
                    p0 = p1;
                    p1 = p2;
                }
                dp = N as f64 * (x * p1 - p0) / (x * x - 1.0);
                let dx = p1 / dp;
                x -= dx;
                if dx.abs() < 1e-16 {
                    break;
                }
            }
            out.push((x, 2.0 / ((1.0 - x * x) * dp * dp)));
        }
        out
    })
}

fn gl(f: &impl Fn(f64) -> Result<f64, StatsError>, a: f64, b: f64) -> Result<f64, StatsError> {
    let (m, h) = (0.5 * (a + b), 0.5 * (b - a));
    let mut s = 0.0;
    for &(x, w) in gauss_legendre() {
        s += w * f(m + h * x)?;
    }
    Ok(s * h)
}

fn adaptive(
    f: &impl Fn(f64) -> Result<f64, StatsError>,
    a: f64,
    b: f64,
    tol: f64,
    depth: u32,
) -> Result<f64, StatsError> {
    adaptive_on(f, a, b, gl(f, a, b)?, tol, depth)
}

/// [`adaptive`] on [a, b] with the panel's rule `whole` already computed: a half's rule,
/// computed to test its parent, is that half's own whole rule (the same sum of the same
/// values), so no panel is summed twice.
fn adaptive_on(
    f: &impl Fn(f64) -> Result<f64, StatsError>,
    a: f64,
    b: f64,
    whole: f64,
    tol: f64,
    depth: u32,
) -> Result<f64, StatsError> {
    let m = 0.5 * (a + b);
    let (l, r) = (gl(f, a, m)?, gl(f, m, b)?);
    if (l + r - whole).abs() <= tol || depth >= 20 {
        return Ok(l + r);
    }
    Ok(adaptive_on(f, a, m, l, tol / 2.0, depth + 1)? + adaptive_on(f, m, b, r, tol / 2.0, depth + 1)?)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn supervisory_correlation_end_points() {
        assert!((supervisory_corporate_correlation(0.0) - 0.24).abs() < 1e-15);
        assert!((supervisory_corporate_correlation(1.0) - 0.12).abs() < 1e-15);
        let mid = supervisory_corporate_correlation(0.01);
        assert!(mid > 0.12 && mid < 0.24);
    }

    #[test]
    fn tails_add_up_and_tiny_correlation_is_binomial() {
        for &(d, n, pd, rho) in &[(3u64, 100u64, 0.01, 0.12), (25, 500, 0.02, 0.15), (0, 80, 0.03, 0.2)] {
            let up = vasicek_upper_tail(d + 1, n, pd, rho).unwrap();
            let lo = vasicek_lower_tail(d, n, pd, rho).unwrap();
            assert!((up + lo - 1.0).abs() < 1e-12, "{d} {n}: {up} + {lo}");
        }
        let v = vasicek_upper_tail(5, 200, 0.01, 1e-12).unwrap();
        let b = binomial_upper_tail(5, 200, 0.01).unwrap();
        assert!((v / b - 1.0).abs() < 1e-5, "{v} {b}");
    }

    /// Passing each half's rule down gives the sums of the form that computes every panel's
    /// whole rule afresh, bit for bit: smooth, peaked (many levels of halving) and the
    /// one-factor integrand itself.
    #[test]
    fn halves_passed_down_are_the_recomputed_rules() {
        fn afresh(f: &impl Fn(f64) -> Result<f64, StatsError>, a: f64, b: f64, tol: f64, depth: u32) -> f64 {
            let whole = gl(f, a, b).unwrap();
            let m = 0.5 * (a + b);
            let (l, r) = (gl(f, a, m).unwrap(), gl(f, m, b).unwrap());
            if (l + r - whole).abs() <= tol || depth >= 20 {
                return l + r;
            }
            afresh(f, a, m, tol / 2.0, depth + 1) + afresh(f, m, b, tol / 2.0, depth + 1)
        }
        let (c, rho) = (normal_quantile(0.02).unwrap(), 0.15f64);
        let one_factor = |z: f64| -> Result<f64, StatsError> {
            let p = normal_cdf((c - rho.sqrt() * z) / (1.0 - rho).sqrt()).clamp(0.0, 1.0);
            Ok(binomial_lower_tail(7, 400, p)? * normal_density(z))
        };
        let cases: [(&dyn Fn(f64) -> Result<f64, StatsError>, f64, f64, f64); 4] = [
            (&|x: f64| Ok((-x * x).exp()), -3.0, 3.0, 1e-14),
            (&|x: f64| Ok(1.0 / (1e-4 + (x - 0.3).powi(2))), 0.0, 1.0, 1e-10),
            (&|x: f64| Ok(x.abs().sqrt()), -1.0, 2.0, 1e-13),
            (&one_factor, -4.0, 4.0, 1e-16),
        ];
        for (k, (f, a, b, tol)) in cases.into_iter().enumerate() {
            let got = adaptive(&f, a, b, tol, 0).unwrap();
            assert_eq!(got.to_bits(), afresh(&f, a, b, tol, 0).to_bits(), "case {k}");
        }
    }

    /// The search from a guess finds the count that halving [0, n] finds, bit for bit the
    /// same interval, over portfolio sizes, PDs, correlations and levels (and from guesses
    /// far off, both ways); and it asks for under a third of the tails halving asks for.
    #[test]
    fn search_from_the_guess_is_the_halving() {
        fn halving(n: u64, holds: &mut impl FnMut(u64) -> bool) -> u64 {
            let (mut lo, mut hi) = (0u64, n);
            while lo < hi {
                let mid = lo + (hi - lo) / 2;
                if holds(mid) {
                    hi = mid;
                } else {
                    lo = mid + 1;
                }
            }
            lo
        }
        // Every threshold of a step predicate, from every guess, on small n.
        for n in 0..40u64 {
            for t in 0..=n {
                for guess in 0..=n + 2 {
                    let mut asked = Vec::new();
                    let got = first_holding::<()>(n, guess, |k| {
                        asked.push(k);
                        Ok(k >= t)
                    })
                    .unwrap();
                    assert_eq!(got, halving(n, &mut |k| k >= t), "n {n} threshold {t} guess {guess}");
                    assert!(asked.iter().all(|&k| k < n), "n {n} asked {asked:?}");
                }
            }
        }
        let (mut ours, mut theirs) = (0usize, 0usize);
        for n in [1u64, 7, 60, 333, 2_500] {
            for pd in [1e-4, 0.004, 0.03, 0.2, 0.7] {
                for rho in [0.0, 0.04, 0.15, 0.3] {
                    for level in [0.9, 0.99] {
                        let got = vasicek_count_interval(n, pd, rho, level).unwrap();
                        let ha = half_alpha(level).unwrap();
                        let mut side = |target: f64| {
                            halving(n, &mut |k| {
                                theirs += 1;
                                tail(k, n, pd, rho, Tail::Lower).unwrap() >= target
                            })
                        };
                        let want = (side(ha), side(1.0 - ha));
                        assert_eq!(got, want, "n {n} pd {pd} rho {rho} level {level}");
                        for target in [ha, 1.0 - ha] {
                            first_holding::<StatsError>(n, approximate_count(n, pd, rho, target), |k| {
                                ours += 1;
                                Ok(tail(k, n, pd, rho, Tail::Lower)? >= target)
                            })
                            .unwrap();
                        }
                    }
                }
            }
        }
        // 650 against 2,415 when written.
        assert!(3 * ours < theirs, "{ours} tails from the guess, {theirs} halving");
    }

    #[test]
    fn correlation_fattens_the_upper_tail() {
        let b = binomial_upper_tail(10, 300, 0.01).unwrap();
        let v = vasicek_upper_tail(10, 300, 0.01, 0.2).unwrap();
        assert!(v > 10.0 * b, "{v} vs {b}");
        let (lo, hi) = vasicek_count_interval(300, 0.01, 0.2, 0.95).unwrap();
        assert!(lo == 0 && hi > 8, "{lo} {hi}");
        assert!(vasicek_lower_tail(hi, 300, 0.01, 0.2).unwrap() >= 0.975);
        assert!(vasicek_lower_tail(hi - 1, 300, 0.01, 0.2).unwrap() < 0.975);
        assert!(vasicek_upper_tail(1, 10, 0.5, 1.0).is_err());
    }
}
