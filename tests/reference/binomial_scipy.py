#!/usr/bin/env python3
"""Reference values for the backtest statistics (src/stats/), computed with scipy and statsmodels.

Why this exists: hazardline's binomial intervals, binomial tails, Jeffreys test, Hosmer-Lemeshow
p-values and exact Poisson intervals must agree with independent, widely used implementations.
This script writes `tests/reference/binomial_scipy.json`, which tests/all/stats_reference.rs
compares against value by value.

Functions used (the name of the function that produced a value is written beside it in the JSON):

* Clopper-Pearson: statsmodels.stats.proportion.proportion_confint(d, n, alpha, method="beta"),
  which is scipy.stats.beta.ppf(alpha/2, d, n-d+1) and beta.isf(alpha/2, d+1, n-d), with lo = 0
  at d = 0 and hi = 1 at d = n (statsmodels applies that convention itself).
* Jeffreys: proportion_confint(..., method="jeffreys") = beta.ppf / beta.isf of
  Beta(d+1/2, n-d+1/2) at alpha/2. statsmodels does NOT apply the boundary convention of Brown,
  Cai and DasGupta (2001, Statistical Science), lower bound 0 at d = 0 and upper bound 1 at
  d = n. This script applies it explicitly (`lo`, `hi`) and keeps statsmodels' raw values in
  `statsmodels_lo`, `statsmodels_hi`.
* Wilson: proportion_confint(..., method="wilson"). The statsmodels formula is
  center -/+ half-width, which cancels for small d (at d = 0 its lower bound is rounding noise
  around 0, clipped to [0, 1]). So the expected value `lo`/`hi` is computed here in 60-digit
  decimal arithmetic from the same z = scipy.stats.norm.isf(alpha/2) (as a double), and the
  statsmodels value is kept beside it and asserted close.
* Binomial tails: scipy.stats.binom.sf(d-1, n, p) = P[D >= d], binom.cdf(d, n, p) = P[D <= d];
  for n <= 1000 both are also summed exactly in rational arithmetic (fractions.Fraction of the
  double p) and asserted to agree with scipy to 1e-12 relative, so the tiny tails are checked
  by an independent method too (`exact_upper`, `exact_lower`).
* Jeffreys test p-value: scipy.stats.beta.cdf(p, d+1/2, n-d+1/2).
* Hosmer-Lemeshow: statistic sum (d_i - n_i p_i)^2 / (n_i p_i (1 - p_i)) summed here in plain
  Python; p-value scipy.stats.chi2.sf(stat, k) with k = number of buckets (forecasts given, not
  fitted).
* Garwood (1936) exact Poisson interval for d events over exposure E:
  lo = scipy.stats.chi2.ppf(alpha/2, 2d) / (2E) (0 at d = 0), hi = chi2.ppf(1-alpha/2, 2d+2)/(2E).
* scipy.stats.binomtest(d, n, p, alternative="greater"/"less").pvalue is asserted equal to the
  tails where it applies.

Rerun:  tests/reference/.venv/bin/pip install scipy statsmodels
        tests/reference/.venv/bin/python tests/reference/binomial_scipy.py
The output is deterministic.
"""

import json
import math
import os
import platform
from decimal import Decimal, getcontext
from fractions import Fraction

import numpy
import scipy
import statsmodels
from scipy import stats
from statsmodels.stats.proportion import proportion_confint

HERE = os.path.dirname(os.path.abspath(__file__))
OUT_PATH = os.path.join(HERE, "binomial_scipy.json")

getcontext().prec = 60


def rel(a, b):
    if a == b:
        return 0.0
    return abs(a - b) / max(abs(a), abs(b))


# ---------------------------------------------------------------------------------------------
# Intervals.
# ---------------------------------------------------------------------------------------------

INTERVAL_N = [1, 5, 20, 100, 1000, 100000]
LEVELS = [0.90, 0.95, 0.99]


def interval_ds(n):
    ds = {0, n, 1, n // 2, min(n, 3), n - 1}
    if n >= 100:
        ds |= {n // 100, n // 20}
    if n >= 1000:
        ds |= {7, n // 1000}
    return sorted(d for d in ds if 0 <= d <= n)


def wilson_decimal(d, n, z):
    """Wilson score bounds in 60-digit decimals, from a double z, in the cancellation-free form."""
    zd = Decimal(z)
    z2 = zd * zd
    D, N = Decimal(d), Decimal(n)
    root = (z2 + 4 * D * (N - D) / N).sqrt()
    lo = 2 * D * D * (1 + z2 / N) / ((N + z2) * (2 * D + z2 + zd * root))
    E = N - D
    hi = 1 - 2 * E * E * (1 + z2 / N) / ((N + z2) * (2 * E + z2 + zd * root))
    # The textbook form, as a check of the algebra.
    lo2 = (2 * D + z2 - zd * root) / (2 * (N + z2))
    hi2 = (2 * D + z2 + zd * root) / (2 * (N + z2))
    assert abs(lo - lo2) < Decimal(10) ** -50 and abs(hi - hi2) < Decimal(10) ** -50
    return float(lo), float(hi)


def interval_cases():
    out = []
    for n in INTERVAL_N:
        for d in interval_ds(n):
            for level in LEVELS:
                alpha = 1.0 - level
                cp = proportion_confint(d, n, alpha=alpha, method="beta")
                if 0 < d < n:
                    assert cp[0] == stats.beta.ppf(alpha / 2, d, n - d + 1)
                    assert cp[1] == stats.beta.isf(alpha / 2, d + 1, n - d)
                jr = proportion_confint(d, n, alpha=alpha, method="jeffreys")
                j_lo = 0.0 if d == 0 else jr[0]
                j_hi = 1.0 if d == n else jr[1]
                wr = proportion_confint(d, n, alpha=alpha, method="wilson")
                z = stats.norm.isf(alpha / 2)
                w_lo, w_hi = wilson_decimal(d, n, z)
                assert abs(w_lo - wr[0]) <= 1e-12 * max(w_lo, 1e-4), (n, d, level, w_lo, wr)
                assert abs(w_hi - wr[1]) <= 1e-12, (n, d, level, w_hi, wr)
                out.append(
                    {
                        "n": n,
                        "d": d,
                        "level": level,
                        "clopper_pearson": {
                            "lo": cp[0],
                            "hi": cp[1],
                            "source": "statsmodels proportion_confint method='beta'",
                        },
                        "jeffreys": {
                            "lo": j_lo,
                            "hi": j_hi,
                            "statsmodels_lo": jr[0],
                            "statsmodels_hi": jr[1],
                            "source": "statsmodels proportion_confint method='jeffreys', then lo=0 at d=0 and hi=1 at d=n (Brown, Cai and DasGupta 2001)",
                        },
                        "wilson": {
                            "lo": w_lo,
                            "hi": w_hi,
                            "z": z,
                            "statsmodels_lo": wr[0],
                            "statsmodels_hi": wr[1],
                            "source": "60-digit decimal Wilson score formula with z = scipy norm.isf(alpha/2); statsmodels method='wilson' asserted within 1e-12",
                        },
                    }
                )
    return out


# ---------------------------------------------------------------------------------------------
# Binomial tails and the Jeffreys test.
# ---------------------------------------------------------------------------------------------

PDS = [1e-5, 1e-4, 1e-3, 0.003, 0.01, 0.02, 0.05, 0.1, 0.2, 0.5]


def tail_points():
    pts = set()
    for n in [1, 5, 20, 100, 1000, 100000]:
        for p in PDS:
            mean = n * p
            ds = {0, 1, n, int(mean), int(mean) + 1, min(n, 2 * int(mean) + 2), min(n, 5)}
            if n >= 20:
                ds |= {n // 10, n // 4}
            for d in ds:
                if 0 <= d <= n:
                    pts.add((n, d, p))
    # Far tails, 1e-70 and below (upper tails from well above the mean, lower from below).
    pts |= {
        (100, 50, 0.01),  # upper ~1e-71
        (100, 60, 0.01),
        (1000, 20, 1e-5),  # upper ~1e-59
        (1000, 40, 1e-5),  # upper ~1e-133
        (1000, 10, 0.5),  # lower ~1e-278
        (1000, 200, 0.5),  # lower ~1e-86
        (100000, 100, 1e-4),  # upper ~1e-63
        (100000, 200, 1e-4),  # upper ~1e-150
        (100000, 50, 0.002),  # lower
        (100000, 20, 0.002),  # lower ~1e-70
        (100000, 1000, 0.002),  # upper
        (20, 20, 0.01),  # upper = p^n = 1e-40
        (5, 5, 1e-5),  # 1e-25
        (20, 0, 0.5),  # lower = 2^-20
        (100000, 0, 1e-5),
        (100000, 1, 0.001),
    }
    return sorted(pts)


_EXACT = {}


def exact_tails(n, d, p):
    """Exact tails of the binomial with the double p, from cumulative sums kept per (n, p)."""
    if (n, p) not in _EXACT:
        q = Fraction(p)
        r = 1 - q
        terms = [math.comb(n, k) * q**k * r ** (n - k) for k in range(n + 1)]
        below = [Fraction(0)] * (n + 2)  # below[k] = P[D < k]
        for k, t in enumerate(terms):
            below[k + 1] = below[k] + t
        _EXACT[(n, p)] = below
    below = _EXACT[(n, p)]
    return float(1 - below[d]), float(below[d + 1])


def tail_cases():
    out = []
    for n, d, p in tail_points():
        upper = float(stats.binom.sf(d - 1, n, p))
        lower = float(stats.binom.cdf(d, n, p))
        jeff = float(stats.beta.cdf(p, d + 0.5, n - d + 0.5))
        case = {
            "n": n,
            "d": d,
            "p": p,
            "p_upper": upper,
            "p_lower": lower,
            "p_jeffreys": jeff,
            "source": "scipy.stats.binom.sf(d-1,n,p), binom.cdf(d,n,p), beta.cdf(p,d+0.5,n-d+0.5)",
        }
        bt_g = stats.binomtest(d, n, p, alternative="greater").pvalue
        bt_l = stats.binomtest(d, n, p, alternative="less").pvalue
        assert rel(bt_g, upper) < 1e-12 or (bt_g == 0 and upper < 1e-300), (n, d, p, bt_g, upper)
        assert rel(bt_l, lower) < 1e-12 or (bt_l == 0 and lower < 1e-300), (n, d, p, bt_l, lower)
        if n <= 1000:
            eu, el = exact_tails(n, d, p)
            case["exact_upper"] = eu
            case["exact_lower"] = el
            for a, b in ((eu, upper), (el, lower)):
                if a > 1e-300:
                    assert rel(a, b) < 1e-12, (n, d, p, a, b)
        out.append(case)
    return out


# ---------------------------------------------------------------------------------------------
# Hosmer-Lemeshow over buckets with given forecasts.
# ---------------------------------------------------------------------------------------------

HL_SETS = [
    # id, [(n, d, p)]
    ("well_calibrated_5", [(200, 1, 0.004), (350, 3, 0.008), (400, 7, 0.015), (250, 9, 0.03), (120, 8, 0.07)]),
    ("under_forecast_4", [(500, 6, 0.002), (600, 15, 0.01), (300, 25, 0.03), (100, 20, 0.08)]),
    ("zero_defaults_3", [(1000, 0, 0.0005), (800, 0, 0.001), (300, 0, 0.004)]),
    ("single_bucket", [(1000, 12, 0.01)]),
    ("extreme_misfit_3", [(1000, 60, 0.001), (1000, 90, 0.005), (500, 100, 0.02)]),
    ("large_n_7", [(100000, 9, 1e-4), (80000, 30, 3e-4), (60000, 70, 1e-3), (40000, 130, 3e-3),
                   (20000, 190, 1e-2), (8000, 250, 3e-2), (2000, 210, 0.1)]),
    ("severe_misfit_3", [(1000, 35, 0.005), (1000, 50, 0.01), (500, 40, 0.02)]),  # p ~ 1e-93
    ("one_obligor_buckets", [(1, 0, 0.01), (1, 1, 0.2), (1, 0, 0.5)]),
]


def hl_cases():
    out = []
    for hid, buckets in HL_SETS:
        stat = sum((d - n * p) ** 2 / (n * p * (1 - p)) for n, d, p in buckets)
        k = len(buckets)
        out.append(
            {
                "id": hid,
                "buckets": [{"n": n, "d": d, "p": p} for n, d, p in buckets],
                "statistic": stat,
                "dof": k,
                "p_value": float(stats.chi2.sf(stat, k)),
                "source": "statistic summed in Python; scipy.stats.chi2.sf(statistic, k)",
            }
        )
    return out


# ---------------------------------------------------------------------------------------------
# Garwood exact Poisson interval.
# ---------------------------------------------------------------------------------------------


def garwood_cases():
    out = []
    for d in [0, 1, 2, 5, 17, 50, 400, 10000]:
        for exposure in [0.5, 10.0, 1234.5, 1e5]:
            for level in [0.90, 0.95, 0.99]:
                alpha = 1 - level
                lo = 0.0 if d == 0 else float(stats.chi2.ppf(alpha / 2, 2 * d)) / (2 * exposure)
                hi = float(stats.chi2.ppf(1 - alpha / 2, 2 * d + 2)) / (2 * exposure)
                out.append(
                    {
                        "d": d,
                        "exposure": exposure,
                        "level": level,
                        "lo": lo,
                        "hi": hi,
                        "source": "scipy.stats.chi2.ppf(alpha/2, 2d)/(2E) (0 at d=0), chi2.ppf(1-alpha/2, 2d+2)/(2E)",
                    }
                )
    return out


# ---------------------------------------------------------------------------------------------
# Chi-square upper tails on their own (far tails included).
# ---------------------------------------------------------------------------------------------


def chi2_cases():
    out = []
    for k in [1, 2, 3, 5, 10, 30]:
        for x in [0.01, 0.5, 1.0, 3.84, 10.0, 50.0, 200.0, 500.0]:
            out.append({"x": x, "dof": k, "sf": float(stats.chi2.sf(x, k)), "source": "scipy.stats.chi2.sf(x, dof)"})
    return out


def main():
    doc = {
        "generator": "tests/reference/binomial_scipy.py",
        "versions": {
            "python": platform.python_version(),
            "scipy": scipy.__version__,
            "statsmodels": statsmodels.__version__,
            "numpy": numpy.__version__,
        },
        "notes": [
            "level is the two-sided confidence level; alpha = 1 - level split equally between the tails.",
            "statsmodels' jeffreys method does not set lo = 0 at d = 0 or hi = 1 at d = n; lo/hi here do (Brown, Cai and DasGupta 2001), the raw values are statsmodels_lo/statsmodels_hi.",
            "Wilson lo/hi are 60-digit decimal values from scipy's z; statsmodels' values (cancellation-prone near 0) are kept beside them.",
            "exact_upper/exact_lower: exact rational sums of binomial probabilities of the double p, for n <= 1000.",
        ],
        "intervals": interval_cases(),
        "tails": tail_cases(),
        "hosmer_lemeshow": hl_cases(),
        "garwood": garwood_cases(),
        "chi2_sf": chi2_cases(),
    }
    with open(OUT_PATH, "w") as f:
        json.dump(doc, f, indent=1)
        f.write("\n")
    print(f"wrote {OUT_PATH}: {len(doc['intervals'])} interval, {len(doc['tails'])} tail, "
          f"{len(doc['hosmer_lemeshow'])} HL, {len(doc['garwood'])} Garwood, {len(doc['chi2_sf'])} chi2 cases")


if __name__ == "__main__":
    main()
