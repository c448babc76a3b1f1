#!/usr/bin/env python3
"""Reference values for the discrimination, survival, portfolio-tail and calibration statistics.

Why this exists: hazardline's AUC with its DeLong variance, the paired DeLong test, the
Kaplan-Meier estimator with Greenwood standard errors, the Vasicek one-factor default-count tail
and the Spiegelhalter calibration test must agree with independent, widely used implementations
or, where no library offers the quantity, with a plain transcription of the published formula
checked against the library where the two overlap. This script writes
`tests/reference/backtest_scipy.json`; the Rust tests compare against it value by value.

Functions used (the `source` field or the notes in the JSON say the same):

* AUC: sklearn.metrics.roc_auc_score(labels, scores); a higher score means label 1 is more likely
  and a tie between a positive and a negative counts one half.
* DeLong variance (DeLong, DeLong and Clarke-Pearson 1988, Biometrics 44:837-845), written here
  from the paper in numpy: with m positives x_i and n negatives y_j and psi(x, y) = 1 if x > y,
  1/2 if x = y, 0 otherwise, the structural components are V10(x_i) = mean_j psi(x_i, y_j) and
  V01(y_j) = mean_i psi(x_i, y_j); var = S10/m + S01/n with S10, S01 the sample variances
  (divisors m-1 and n-1). The components are computed from the full m x n comparison matrix
  and asserted equal (1e-12) to the same components from midranks (scipy.stats.rankdata). The
  mean of V10 (and of V01) is asserted equal to sklearn's AUC to 1e-12. For two scores on the
  same labels the covariance is Cov(V10_a, V10_b)/m + Cov(V01_a, V01_b)/n with the same
  divisors; z = (auc_a - auc_b)/sqrt(var_a + var_b - 2 cov_ab)
  and the two-sided p-value is 2 scipy.stats.norm.sf(|z|).
* Kaplan-Meier: statsmodels.duration.survfunc.SurvfuncRight(times, events); survival at t is
  surv_prob at the last event time <= t (1 before the first event), its Greenwood standard error
  is surv_prob_se at the same index (0 before the first event). Both are asserted equal to a
  plain-Python product-limit estimate and Greenwood sum to 1e-12.
  statsmodels (0.15.0, and the earlier releases whose documentation was checked) has no pointwise
  interval method (`simple_ci` does not exist; SurvfuncRight offers quantile_ci and the
  Hall-Wellner simultaneous_cb only). The pointwise 95% interval written here uses the transform
  that statsmodels' quantile_ci uses by default, method="cloglog", g(S) = log(-log S),
  g'(S) = -1/(S log S): the set of S with |g(S_hat) - g(S)| <= z g'(S_hat) se, z =
  norm.ppf(0.975), which is lo = S_hat ** exp(w), hi = S_hat ** exp(-w), w = z se /
  (S_hat |log S_hat|). It is asserted consistent with statsmodels' own quantile_ci: for every
  probability p on a grid, quantile_ci(p) starts at the first event time whose interval holds
  1 - p, and ends after the last one. Where the interval is undefined (S_hat = 1 before the first
  event, S_hat = 0 after the last subject fails) lo = hi = survival. The log-transform interval,
  lo_log = S_hat exp(-z se/S_hat), hi_log = S_hat exp(z se/S_hat) clipped to [0, 1], is written
  beside it and checked the same way against quantile_ci(p, method="log").
* Vasicek one-factor model: p(z) = Phi((Phi^-1(pd) - sqrt(rho) z) / sqrt(1 - rho)), z ~ N(0, 1),
  D | z ~ Binomial(n, p(z)). p_upper = P[D >= d] = integral of scipy.stats.binom.sf(d-1, n, p(z))
  phi(z) dz and p_lower = P[D <= d] = integral of binom.cdf(d, n, p(z)) phi(z) dz, by
  scipy.integrate.quad over (-inf, -10), (-10, 10) and (10, inf) (epsabs 1e-20, epsrel 1e-13,
  limit 500); each piece's error estimate is asserted below 1e-12 absolute and 1e-11 relative to
  the total. Cross-checks: Gauss-Hermite with 300 nodes (numpy hermegauss; 200 nodes reach only
  5e-10 relative on the n = 500 case) and quad split instead at z_c, the factor value where
  p(z_c) = (k + 1/2)/n for the count k in question (clipped to [-10, 10]), and at z_c -/+ 8;
  both asserted within 1e-10 relative; the largest differences, 8.8e-14 (Gauss-Hermite) and
  1.3e-15 (split quad), are in the notes. For d = 0, p_upper is written as exactly 1. cdf[k] = P[D <= k] for k = 0..n (n <= 200), by the same quad.
* Spiegelhalter (1986, Statistics in Medicine 5:421-433): z = sum((y - p)(1 - 2p)) /
  sqrt(sum((1 - 2p)^2 p (1 - p))), p-value 2 scipy.stats.norm.sf(|z|); brier = mean((y - p)^2),
  asserted equal to sklearn.metrics.brier_score_loss(y, p) to 1e-15.

All data is invented test data: small hand-made arrays and numpy.random.default_rng draws with
fixed seeds (the seed of each case is written beside it).

Versions used: Python 3.11.7, numpy 2.4.6, scipy 1.17.1, statsmodels 0.15.0,
scikit-learn 1.9.1, pandas 3.1.1.

Rerun:  python3 -m venv tests/reference/.venv      # git-ignored
        tests/reference/.venv/bin/pip install scipy statsmodels scikit-learn pandas numpy
        tests/reference/.venv/bin/python tests/reference/backtest_scipy.py
The output is deterministic (about 75 seconds on the 2-core box, nearly all of it the Vasicek
integrals).
"""

import json
import math
import os
import platform

import numpy
import pandas
import scipy
import sklearn
import statsmodels
from numpy.polynomial.hermite_e import hermegauss
from scipy import stats
from scipy.integrate import quad
from sklearn.metrics import brier_score_loss, roc_auc_score
from statsmodels.duration.survfunc import SurvfuncRight

HERE = os.path.dirname(os.path.abspath(__file__))
OUT_PATH = os.path.join(HERE, "backtest_scipy.json")


def rel(a, b):
    if a == b:
        return 0.0
    return abs(a - b) / max(abs(a), abs(b))


def floats(xs):
    return [float(x) for x in xs]


def ints(xs):
    return [int(x) for x in xs]


# ---------------------------------------------------------------------------------------------
# AUC and the DeLong variance.
# ---------------------------------------------------------------------------------------------


def components(scores, labels):
    """DeLong structural components V10 (one per positive) and V01 (one per negative)."""
    s = numpy.asarray(scores, dtype=float)
    lab = numpy.asarray(labels)
    x = s[lab == 1]
    y = s[lab == 0]
    psi = (x[:, None] > y[None, :]).astype(float) + 0.5 * (x[:, None] == y[None, :])
    v10, v01 = psi.mean(axis=1), psi.mean(axis=0)
    # The same components from midranks (scipy.stats.rankdata): V10_i = (rank of x_i among all -
    # rank among the positives) / n, V01_j = 1 - (rank of y_j among all - rank among the
    # negatives) / m.
    m, n = len(x), len(y)
    r_all = stats.rankdata(s)
    r10 = (r_all[lab == 1] - stats.rankdata(x)) / n
    r01 = 1.0 - (r_all[lab == 0] - stats.rankdata(y)) / m
    assert numpy.max(numpy.abs(r10 - v10)) <= 1e-12 and numpy.max(numpy.abs(r01 - v01)) <= 1e-12
    return v10, v01


def delong(scores, labels):
    v10, v01 = components(scores, labels)
    m, n = len(v10), len(v01)
    assert m >= 2 and n >= 2
    auc = float(roc_auc_score(labels, scores))
    assert abs(v10.mean() - auc) <= 1e-12, (v10.mean(), auc)
    assert abs(v01.mean() - auc) <= 1e-12, (v01.mean(), auc)
    var = float(numpy.var(v10, ddof=1) / m + numpy.var(v01, ddof=1) / n)
    return auc, var, v10, v01


def random_pd_case(seed, n, sig_digits=None):
    """Scores are PDs 10**U(-4,-1); labels are Bernoulli(min(1, 3 score)). The seed is raised
    until there are at least two positives (and two negatives)."""
    while True:
        rng = numpy.random.default_rng(seed)
        scores = 10.0 ** rng.uniform(-4.0, -1.0, size=n)
        if sig_digits is not None:
            scores = numpy.array([float(f"{v:.{sig_digits}g}") for v in scores])
        labels = (rng.uniform(size=n) < numpy.minimum(1.0, 3.0 * scores)).astype(int)
        if 2 <= labels.sum() <= n - 2:
            return seed, scores, labels
        seed += 1


AUC_HAND = [
    # id, scores, labels
    ("hand_ties_across_classes", [0.1, 0.4, 0.35, 0.8, 0.4, 0.2, 0.8, 0.5, 0.35, 0.05],
     [0, 0, 1, 1, 1, 0, 0, 1, 0, 0]),
    ("all_tied", [0.05] * 7, [1, 0, 0, 1, 0, 1, 0]),
    ("perfect_separation", [0.01, 0.02, 0.03, 0.2, 0.3, 0.04, 0.25], [0, 0, 0, 1, 1, 0, 1]),
    ("reversed", [0.9, 0.8, 0.1, 0.2, 0.7, 0.05], [0, 0, 1, 1, 0, 1]),
    ("two_positives_two_negatives", [0.3, 0.1, 0.2, 0.4], [1, 0, 1, 0]),
    ("two_positives_many_negatives", [0.02, 0.5, 0.01, 0.03, 0.2, 0.02, 0.6, 0.04, 0.02, 0.1],
     [1, 0, 0, 0, 1, 0, 0, 0, 0, 0]),
]

AUC_RANDOM = [
    # id, seed, n, significant digits kept (None: full double)
    ("random_pd_n50", 101, 50, None),
    ("random_pd_n500", 202, 500, None),
    ("random_pd_n3000", 303, 3000, None),
    ("random_pd_n3000_rounded_3_sig", 404, 3000, 3),
    ("random_pd_n500_rounded_1_sig", 505, 500, 1),
]


def auc_cases():
    out = []
    for cid, scores, labels in AUC_HAND:
        auc, var, _, _ = delong(scores, labels)
        out.append({"id": cid, "scores": floats(scores), "labels": ints(labels), "auc": auc,
                    "auc_var": var, "auc_se": math.sqrt(var),
                    "source": "sklearn.metrics.roc_auc_score; DeLong variance from the structural components in numpy"})
    expected = {"all_tied": (0.5, 0.0), "perfect_separation": (1.0, 0.0), "reversed": (0.0, 0.0)}
    for c in out:
        if c["id"] in expected:
            assert (c["auc"], c["auc_var"]) == expected[c["id"]], c
    for cid, seed, n, sig in AUC_RANDOM:
        used, scores, labels = random_pd_case(seed, n, sig)
        auc, var, _, _ = delong(scores, labels)
        out.append({"id": cid, "seed": used, "positives": int(labels.sum()),
                    "distinct_scores": int(len(numpy.unique(scores))),
                    "scores": floats(scores), "labels": ints(labels), "auc": auc,
                    "auc_var": var, "auc_se": math.sqrt(var),
                    "source": "numpy default_rng(seed): scores 10**uniform(-4,-1)"
                              + (f" rounded to {sig} significant digits" if sig else "")
                              + ", labels uniform < min(1, 3 score); sklearn.metrics.roc_auc_score; DeLong variance in numpy"})
    return out


def paired(cid, scores_a, scores_b, labels, source):
    auc_a, var_a, a10, a01 = delong(scores_a, labels)
    auc_b, var_b, b10, b01 = delong(scores_b, labels)
    m, n = len(a10), len(a01)
    cov = float(numpy.cov(a10, b10, ddof=1)[0, 1] / m + numpy.cov(a01, b01, ddof=1)[0, 1] / n)
    denom = var_a + var_b - 2.0 * cov
    assert denom > 0, (cid, denom)
    z = (auc_a - auc_b) / math.sqrt(denom)
    return {"id": cid, "scores_a": floats(scores_a), "scores_b": floats(scores_b),
            "labels": ints(labels), "auc_a": auc_a, "auc_b": auc_b, "var_a": var_a, "var_b": var_b,
            "cov_ab": cov, "z": z, "p_value": float(2.0 * stats.norm.sf(abs(z))), "source": source}


def auc_paired_cases():
    out = []
    out.append(paired("hand_paired",
                      [0.1, 0.4, 0.35, 0.8, 0.4, 0.2, 0.8, 0.5, 0.35, 0.05],
                      [0.2, 0.3, 0.5, 0.6, 0.3, 0.3, 0.4, 0.9, 0.1, 0.1],
                      [0, 0, 1, 1, 1, 0, 0, 1, 0, 0],
                      "hand-made; sklearn roc_auc_score; DeLong covariance in numpy"))
    seed, sa, lab = random_pd_case(606, 800)
    rng = numpy.random.default_rng(seed + 1000)
    sb = sa * numpy.exp(rng.normal(0.0, 1.0, size=len(sa)))
    out.append(paired("random_pd_n800_noisy_second_score", sa, sb, lab,
                      f"scores_a as random_pd cases (seed {seed}); scores_b = scores_a exp(N(0,1)) "
                      f"with default_rng({seed + 1000}); sklearn roc_auc_score; DeLong covariance in numpy"))
    out[-1]["seed"] = seed
    seed, sa, lab = random_pd_case(707, 1500)
    rng = numpy.random.default_rng(seed + 1000)
    grade = numpy.ceil((numpy.log10(sa) + 4.0) / 3.0 * 7.0 + rng.normal(0.0, 0.8, size=len(sa)))
    grade = numpy.clip(grade, 1, 7)
    out.append(paired("random_pd_n1500_vs_grade_1_to_7", sa, grade, lab,
                      f"scores_a as random_pd cases (seed {seed}); scores_b = clip(ceil((log10 scores_a + 4)/3*7 "
                      f"+ N(0, 0.8)), 1, 7) with default_rng({seed + 1000}), a coarse grade with many ties; "
                      "sklearn roc_auc_score; DeLong covariance in numpy"))
    out[-1]["seed"] = seed
    return out


# ---------------------------------------------------------------------------------------------
# Kaplan-Meier with Greenwood standard errors.
# ---------------------------------------------------------------------------------------------

Z975 = float(stats.norm.ppf(0.975))


def plain_km(times, events, t):
    """Product-limit estimate and Greenwood standard error at t, in plain Python."""
    s, gw = 1.0, 0.0
    for u in sorted(set(times)):
        if u > t:
            break
        d = sum(1 for a, e in zip(times, events) if a == u and e == 1)
        r = sum(1 for a in times if a >= u)  # at risk: censored at u count as still at risk
        if d == 0:
            continue
        s *= 1.0 - d / r
        gw = math.inf if d == r else gw + d / (r * (r - d))
    return s, gw


def cloglog_interval(s, se):
    if not (0.0 < s < 1.0) or not se > 0.0:
        return s, s, False
    w = Z975 * se / (s * abs(math.log(s)))
    return s ** math.exp(w), s ** math.exp(-w), True


def log_interval(s, se):
    """Log transform: exp(ln S -/+ z se / S), clipped to [0, 1]; undefined at S = 0."""
    if not s > 0.0:
        return s, s, False
    w = Z975 * se / s
    return max(0.0, s * math.exp(-w)), min(1.0, s * math.exp(w)), True


def check_against_quantile_ci(sf, cid, interval, method):
    """An interval at each event time must match statsmodels' quantile_ci(p, method=method):
    quantile_ci inverts the same pointwise z-test on the g-transformed survival."""
    ivs = [interval(float(s), float(e)) for s, e in zip(sf.surv_prob, sf.surv_prob_se)]
    checked = 0
    for p in numpy.linspace(0.01, 0.99, 99):
        target = 1.0 - p
        if any(d and (abs(lo - target) < 1e-9 or abs(hi - target) < 1e-9) for lo, hi, d in ivs):
            continue
        inside = [i for i, (lo, hi, d) in enumerate(ivs) if d and lo <= target <= hi]
        with numpy.errstate(divide="ignore", invalid="ignore"):
            lb, ub = sf.quantile_ci(p, alpha=0.05, method=method)
        if not inside:
            assert math.isnan(lb), (cid, method, p, lb)
            continue
        assert lb == sf.surv_times[inside[0]], (cid, method, p, lb, inside)
        if inside[-1] == len(sf.surv_times) - 1:
            assert ub == math.inf, (cid, method, p, ub)
        else:
            assert ub == sf.surv_times[inside[-1] + 1], (cid, method, p, ub)
        checked += 1
    return checked


def km_case(cid, times, events, at, source):
    times = [float(t) for t in times]
    events = [int(e) for e in events]
    sf = SurvfuncRight(numpy.array(times), numpy.array(events))
    quantile_checks = check_against_quantile_ci(sf, cid, cloglog_interval, "cloglog")
    quantile_checks_log = check_against_quantile_ci(sf, cid, log_interval, "log")
    rows = []
    for t in at:
        idx = int(numpy.searchsorted(sf.surv_times, t, side="right")) - 1
        if idx < 0:
            s, se = 1.0, 0.0
        else:
            s, se = float(sf.surv_prob[idx]), float(sf.surv_prob_se[idx])
        ps, pgw = plain_km(times, events, t)
        assert abs(ps - s) <= 1e-12, (cid, t, ps, s)
        row = {"t": float(t), "survival": s}
        if s == 0.0:
            # statsmodels' Greenwood sum is infinite once the risk set is exhausted and it
            # reports NaN; the JSON cannot hold NaN, and S = 0 is known exactly.
            assert math.isnan(se), (cid, t, se)
            se = 0.0
            row["statsmodels_se_nan"] = True
        else:
            assert abs(math.sqrt(pgw) * ps - se) <= 1e-12, (cid, t, math.sqrt(pgw) * ps, se)
        lo, hi, defined = cloglog_interval(s, se)
        lo_log, hi_log, _ = log_interval(s, se)
        row.update({"se": se, "lo": lo, "hi": hi, "lo_log": lo_log, "hi_log": hi_log})
        if not defined:
            row["interval_undefined"] = True
        rows.append(row)
    return {"id": cid, "times": times, "events": events, "level": 0.95, "at": rows,
            "event_times": floats(sf.surv_times), "n_risk": ints(sf.n_risk), "n_events": ints(sf.n_events),
            "quantile_ci_checks": quantile_checks,
            "quantile_ci_checks_log": quantile_checks_log, "source": source}


def km_cases():
    out = []
    # Ties: at t = 3 two events and one censoring, at t = 5 one event and one censoring,
    # at t = 8 a censoring alone, at t = 9 two events.
    times = [1, 3, 3, 3, 4, 5, 5, 6, 8, 9, 9, 10, 12]
    events = [0, 1, 1, 0, 1, 1, 0, 0, 0, 1, 1, 0, 1]
    out.append(km_case("hand_ties_events_and_censorings", times, events,
                       [0.0, 0.5, 1.0, 2.99, 3.0, 3.5, 4.0, 5.0, 7.0, 8.0, 9.0, 11.0, 12.0, 20.0],
                       "hand-made; statsmodels SurvfuncRight"))
    times = [2, 4, 4, 7, 9, 11, 11, 11, 15, 20]
    events = [1] * len(times)
    case = km_case("no_censoring", times, events,
                   [0.0, 1.9, 2.0, 4.0, 5.0, 11.0, 14.0, 15.0, 19.999, 20.0, 25.0],
                   "hand-made; statsmodels SurvfuncRight")
    for row in case["at"]:
        emp = sum(1 for a in times if a > row["t"]) / len(times)
        assert abs(row["survival"] - emp) <= 1e-15, (row, emp)
    out.append(case)
    times = [0.5, 1.25, 1.25, 2.0, 3.5, 3.5, 4.0, 6.0, 7.5, 9.0]
    events = [1, 1, 0, 1, 0, 1, 1, 0, 1, 0]
    out.append(km_case("last_observation_censored", times, events,
                       [0.25, 0.5, 1.0, 1.25, 3.0, 3.5, 5.0, 7.5, 8.0, 9.0, 30.0],
                       "hand-made; statsmodels SurvfuncRight"))
    seed = 808
    rng = numpy.random.default_rng(seed)
    default = rng.exponential(1.0 / 0.03, size=400)
    censor = rng.uniform(0.0, 6.0, size=400)
    dr = numpy.maximum(numpy.round(default * 365.0), 1.0) / 365.0
    cr = numpy.maximum(numpy.round(censor * 365.0), 1.0) / 365.0
    times = numpy.minimum(dr, cr)
    events = (dr <= cr).astype(int)
    ev = sorted(set(float(t) for t, e in zip(times, events) if e == 1))
    at = sorted(set([0.0, ev[0] / 2, ev[0], ev[1], (ev[4] + ev[5]) / 2, ev[len(ev) // 2], ev[-2], ev[-1],
                     0.5, 1.0, 2.0, 3.0, 4.0, 5.0, float(times.max()), 7.0]))
    case = km_case("random_n400_exp_default_uniform_censoring", times, events, at,
                   f"numpy default_rng({seed}): default ~ exponential(rate 0.03), censoring ~ uniform(0, 6), "
                   "each rounded to whole days /365 (at least 1/365), time = min, event = default <= censoring; "
                   "statsmodels SurvfuncRight")
    case["seed"] = seed
    out.append(case)
    return out


# ---------------------------------------------------------------------------------------------
# Vasicek one-factor default-count distribution.
# ---------------------------------------------------------------------------------------------

VASICEK = [
    # id, n, d, pd, rho
    ("n100_d3_pd1pct_rho12", 100, 3, 0.01, 0.12),
    ("n100_d0_pd2pct_rho20", 100, 0, 0.02, 0.2),
    ("n500_d25_pd2pct_rho15", 500, 25, 0.02, 0.15),
    ("n50_d10_pd5pct_rho24", 50, 10, 0.05, 0.24),
    ("n1000_d1_pd5bp_rho2386", 1000, 1, 0.0005, 0.2386),
    ("n163_d5_pd5.4pct_rho13", 163, 5, 0.054, 0.13),
    ("n65_d18_pd46pct_rho12", 65, 18, 0.46, 0.12),
    ("n200_d10_pd3pct_rho1e-6", 200, 10, 0.03, 1e-6),
]

GH_Z, GH_W = hermegauss(300)
GH_W = GH_W / math.sqrt(2.0 * math.pi)


def cond_pd(pd, rho):
    c = stats.norm.ppf(pd)
    a, b = math.sqrt(rho), math.sqrt(1.0 - rho)
    return lambda z: stats.norm.cdf((c - a * z) / b)


def integrate_z(f):
    """integral of f(z) phi(z) dz by quad over three pieces; returns value and worst error."""
    g = lambda z: f(z) * stats.norm.pdf(z)
    total, errs = 0.0, []
    for lo, hi in ((-math.inf, -10.0), (-10.0, 10.0), (10.0, math.inf)):
        v, e = quad(g, lo, hi, epsabs=1e-20, epsrel=1e-13, limit=500)
        total += v
        errs.append(e)
    assert max(errs) < 1e-12, errs
    assert sum(errs) <= 1e-11 * total or total == 0.0, (errs, total)
    return total, max(errs)


def integrate_split(f, zc):
    """Second method: quad of f(z) phi(z) split at the factor value zc where the conditional
    default probability crosses the count's level, and 8 either side of it."""
    g = lambda z: f(z) * stats.norm.pdf(z)
    edges = [-math.inf, zc - 8.0, zc, zc + 8.0, math.inf]
    return sum(quad(g, a, b, epsabs=1e-20, epsrel=1e-13, limit=500)[0] for a, b in zip(edges, edges[1:]))


def crossing(pd, rho, n, k):
    """z at which p(z) = (k + 1/2)/n (clipped to (1e-300, 1 - 1e-16)), clipped to [-10, 10]."""
    q = min(max((k + 0.5) / n, 1e-300), 1.0 - 1e-16)
    zc = (stats.norm.ppf(pd) - math.sqrt(1.0 - rho) * stats.norm.ppf(q)) / math.sqrt(rho)
    return min(max(zc, -10.0), 10.0)


def integrate_gh(f):
    return float(sum(w * f(z) for z, w in zip(GH_Z, GH_W)))


def vasicek_cases():
    out = []
    worst = {"gauss_hermite": 0.0, "quad_split": 0.0, "quad_error_estimate": 0.0}
    for cid, n, d, pd, rho in VASICEK:
        p = cond_pd(pd, rho)
        up = lambda z: float(stats.binom.sf(d - 1, n, p(z)))
        low = lambda z: float(stats.binom.cdf(d, n, p(z)))
        p_upper, e1 = integrate_z(up)
        p_lower, e2 = integrate_z(low)
        worst["quad_error_estimate"] = max(worst["quad_error_estimate"], e1, e2)
        for val, f, zc in ((p_upper, up, crossing(pd, rho, n, d - 1)), (p_lower, low, crossing(pd, rho, n, d))):
            for key, other in (("gauss_hermite", integrate_gh(f)), ("quad_split", integrate_split(f, zc))):
                r = rel(val, other)
                assert r < 1e-10, (cid, key, val, other)
                worst[key] = max(worst[key], r)
        case = {"id": cid, "n": n, "d": d, "pd": pd, "rho": rho, "p_upper": p_upper, "p_lower": p_lower,
                "source": "scipy.integrate.quad of scipy.stats.binom.sf(d-1,n,p(z)) / binom.cdf(d,n,p(z)) times norm.pdf(z)"}
        if d == 0:
            # P[D >= 0] = 1 exactly; quad returns the integral of phi, 1 within rounding.
            assert abs(p_upper - 1.0) < 1e-14, p_upper
            p_upper = case["p_upper"] = 1.0
        if n <= 200:
            cdf = []
            for k in range(n + 1):
                fk = lambda z, k=k: float(stats.binom.cdf(k, n, p(z)))
                v, e = integrate_z(fk)
                worst["quad_error_estimate"] = max(worst["quad_error_estimate"], e)
                for key, other in (("gauss_hermite", integrate_gh(fk)), ("quad_split", integrate_split(fk, crossing(pd, rho, n, k)))):
                    r = rel(v, other)
                    assert r < 1e-10, (cid, k, key, v, other)
                    worst[key] = max(worst[key], r)
                cdf.append(v)
            assert all(b >= a - 1e-15 for a, b in zip(cdf, cdf[1:])), cid
            assert abs(cdf[-1] - 1.0) < 1e-13, cdf[-1]
            assert rel(cdf[d], p_lower) < 1e-12, (cid, cdf[d], p_lower)
            if d >= 1:
                assert abs(p_upper - (1.0 - cdf[d - 1])) < 1e-13, (cid, p_upper, cdf[d - 1])
            case["cdf"] = cdf
        if rho < 1e-4:
            case["binomial_upper"] = float(stats.binom.sf(d - 1, n, pd))
            case["binomial_lower"] = float(stats.binom.cdf(d, n, pd))
            assert rel(case["binomial_upper"], p_upper) < 1e-4 and rel(case["binomial_lower"], p_lower) < 1e-4
        out.append(case)
    return out, worst


# ---------------------------------------------------------------------------------------------
# Spiegelhalter calibration test and the Brier score.
# ---------------------------------------------------------------------------------------------


def spiegelhalter(cid, p, y, source):
    p = numpy.asarray(p, dtype=float)
    y = numpy.asarray(y, dtype=int)
    brier = float(numpy.mean((y - p) ** 2))
    assert abs(brier - brier_score_loss(y, p)) <= 1e-15, (brier, brier_score_loss(y, p))
    num = float(numpy.sum((y - p) * (1.0 - 2.0 * p)))
    den = float(numpy.sum((1.0 - 2.0 * p) ** 2 * p * (1.0 - p)))
    z = num / math.sqrt(den)
    return {"id": cid, "p": floats(p), "y": ints(y), "brier": brier, "z": z,
            "p_value": float(2.0 * stats.norm.sf(abs(z))), "source": source}


def spiegelhalter_cases():
    out = [spiegelhalter("hand_small",
                         [0.01, 0.05, 0.2, 0.1, 0.02, 0.3, 0.6, 0.15, 0.04, 0.08],
                         [0, 0, 1, 0, 0, 1, 1, 0, 0, 1],
                         "hand-made; numpy sums, scipy.stats.norm.sf, sklearn brier_score_loss")]
    for n, seed in ((200, 909), (2000, 910)):
        for factor, name in ((1.0, "calibrated"), (2.0, "twice_the_forecast")):
            rng = numpy.random.default_rng(seed)
            p = 10.0 ** rng.uniform(-3.0, -0.7, size=n)
            y = (rng.uniform(size=n) < factor * p).astype(int)
            case = spiegelhalter(f"random_n{n}_{name}", p, y,
                                 f"numpy default_rng({seed}): p = 10**uniform(-3,-0.7), y = uniform < {factor:g} p; "
                                 "numpy sums, scipy.stats.norm.sf, sklearn brier_score_loss")
            case["seed"] = seed
            out.append(case)
    return out


def poisson_cases():
    """Poisson tails for the one-sample (observed against expected) term-structure test:
    upper = P[X >= k] = scipy.stats.poisson.sf(k - 1, mean) (1 at k = 0), lower = P[X <= k] =
    scipy.stats.poisson.cdf(k, mean); the case list spans the demo's counts and far tails."""
    out = []
    for k, mean in ((0, 1.26), (0, 9.63), (2, 8.65), (1, 13.45), (2, 36.24), (9, 16.79), (19, 21.56),
                    (40, 51.81), (71, 169.93), (31, 65.47), (5, 0.2), (12, 3.0), (300, 250.0), (1, 1e-6)):
        upper = 1.0 if k == 0 else float(stats.poisson.sf(k - 1, mean))
        lower = float(stats.poisson.cdf(k, mean))
        out.append({"k": k, "mean": mean, "upper": upper, "lower": lower,
                    "source": "scipy.stats.poisson.sf(k - 1, mean) and .cdf(k, mean)"})
    return out


def with_no_power_p(cases):
    """Adds `p_no_power` to each AUC case: scipy.stats.mannwhitneyu(scores of label 1, scores of
    label 0, alternative="greater", method="asymptotic", use_continuity=False).pvalue, the normal
    approximation with the tie-corrected variance (None where every score is tied: scipy's NaN)."""
    for c in cases:
        x = [s for s, l in zip(c["scores"], c["labels"]) if l == 1]
        y = [s for s, l in zip(c["scores"], c["labels"]) if l == 0]
        p = float(stats.mannwhitneyu(x, y, alternative="greater", method="asymptotic",
                                     use_continuity=False).pvalue)
        c["p_no_power"] = None if math.isnan(p) else p
    return cases


def main():
    vas, worst = vasicek_cases()
    km = km_cases()
    doc = {
        "generator": "tests/reference/backtest_scipy.py",
        "versions": {
            "python": platform.python_version(),
            "numpy": numpy.__version__,
            "scipy": scipy.__version__,
            "statsmodels": statsmodels.__version__,
            "scikit-learn": sklearn.__version__,
            "pandas": pandas.__version__,
        },
        "notes": [
            "auc: sklearn.metrics.roc_auc_score; higher score = more likely label 1; a positive-negative tie counts 1/2.",
            "auc_var: DeLong, DeLong and Clarke-Pearson (1988) from the structural components V10 (per positive) and V01 (per negative), var = S10/m + S01/n with sample variances (divisors m-1, n-1); mean(V10) = mean(V01) = sklearn AUC asserted to 1e-12. auc_se = sqrt(auc_var).",
            "auc p_no_power: scipy.stats.mannwhitneyu(x1, x0, alternative='greater', method='asymptotic', use_continuity=False).pvalue (normal approximation, tie-corrected variance under no power); null where every score is tied.",
            "auc_paired: cov_ab = Cov(V10_a, V10_b)/m + Cov(V01_a, V01_b)/n (divisors m-1, n-1); z = (auc_a - auc_b)/sqrt(var_a + var_b - 2 cov_ab); p_value = 2 norm.sf(|z|).",
            "Random AUC cases raise the seed until there are at least 2 positives and 2 negatives; `seed` is the one used.",
            "kaplan_meier: statsmodels SurvfuncRight; survival at t = surv_prob at the last event time <= t (1 before the first event); se = surv_prob_se at that index (Greenwood; 0 before the first event). Asserted equal to a plain-Python product-limit estimate and Greenwood sum to 1e-12.",
            "kaplan_meier ties: statsmodels' risk set at time t counts every subject with time >= t, so a censoring at the same time as an event is still at risk for that event (censorings are taken to follow events at a tied time); d = events at t.",
            "kaplan_meier interval: statsmodels has no pointwise interval method (there is no SurvfuncRight.simple_ci; quantile_ci and the Hall-Wellner simultaneous_cb are all it offers). lo/hi use the transform of statsmodels' quantile_ci default, method='cloglog': g(S) = log(-log S), g'(S) = -1/(S log S), interval {S : |g(S_hat) - g(S)| <= z g'(S_hat) se}, z = norm.ppf(0.975), i.e. lo = S_hat**exp(w), hi = S_hat**exp(-w), w = z se/(S_hat |log S_hat|). Asserted consistent with statsmodels' quantile_ci(p) for p = 0.01..0.99 (quantile_ci_checks counts the p checked).",
            "kaplan_meier lo_log/hi_log: the log transform, g(S) = log S, lo_log = S_hat exp(-z se/S_hat), hi_log = S_hat exp(z se/S_hat), clipped to [0, 1]; asserted consistent with statsmodels' quantile_ci(p, method='log') the same way (quantile_ci_checks_log). At S_hat = 1 (se = 0) it is [1, 1]; at S_hat = 0 it is undefined and written lo_log = hi_log = 0.",
            "kaplan_meier undefined interval: where S_hat = 1 (before the first event, se = 0) or S_hat = 0 (every subject at risk failed) the cloglog interval is undefined; lo = hi = survival there and the row carries interval_undefined: true.",
            "kaplan_meier S_hat = 0: statsmodels reports se = NaN (Greenwood's sum is infinite); the JSON writes se = 0 and the row carries statsmodels_se_nan: true.",
            "kaplan_meier random case: times are whole days /365, at least 1/365; event = default day <= censoring day.",
            "vasicek: p(z) = Phi((Phi^-1(pd) - sqrt(rho) z)/sqrt(1-rho)), z ~ N(0,1); p_upper = P[D >= d], p_lower = P[D <= d], cdf[k] = P[D <= k] (n <= 200), each by scipy.integrate.quad over (-inf,-10), (-10,10), (10,inf), epsabs 1e-20, epsrel 1e-13, limit 500.",
            f"vasicek cross-checks (every p_upper, p_lower and cdf value): Gauss-Hermite with 300 nodes (200 nodes reach only 5e-10 relative on n500_d25), largest relative difference {worst['gauss_hermite']!r}; quad split instead at the factor value z_c where p(z_c) = (k + 1/2)/n for the count k in question (clipped to [-10, 10]) and at z_c -/+ 8, largest relative difference {worst['quad_split']!r}; largest quad error estimate of a piece {worst['quad_error_estimate']!r}. Asserted below 1e-10 relative and 1e-12 absolute.",
            "vasicek d = 0: p_upper = P[D >= 0] is written as exactly 1 (quad's value, the integral of phi, is asserted within 1e-14 of it).",
            "vasicek rho = 1e-6: binomial_upper = scipy.stats.binom.sf(d-1, n, pd), binomial_lower = binom.cdf(d, n, pd), the plain binomial it approaches (asserted within 1e-4 relative).",
            "poisson: upper = P[X >= k] = scipy.stats.poisson.sf(k - 1, mean) (exactly 1 at k = 0), lower = P[X <= k] = scipy.stats.poisson.cdf(k, mean).",
            "spiegelhalter: Spiegelhalter (1986): z = sum((y-p)(1-2p))/sqrt(sum((1-2p)^2 p (1-p))), p_value = 2 norm.sf(|z|); brier = mean((y-p)^2) = sklearn brier_score_loss (asserted to 1e-15).",
        ],
        "auc": with_no_power_p(auc_cases()),
        "auc_paired": auc_paired_cases(),
        "kaplan_meier": km,
        "vasicek": vas,
        "spiegelhalter": spiegelhalter_cases(),
        "poisson": poisson_cases(),
    }
    with open(OUT_PATH, "w") as f:
        json.dump(doc, f, indent=1, sort_keys=True, allow_nan=False)
        f.write("\n")
    print(f"wrote {OUT_PATH}: {len(doc['auc'])} AUC, {len(doc['auc_paired'])} paired, "
          f"{len(doc['kaplan_meier'])} Kaplan-Meier, {len(doc['vasicek'])} Vasicek, "
          f"{len(doc['spiegelhalter'])} Spiegelhalter cases; Vasicek cross-check {worst}")


if __name__ == "__main__":
    main()
