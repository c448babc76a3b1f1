#!/usr/bin/env python3
"""Reference values for the structural-break test and the fit-identification summary.

Why this exists: hazardline's break test (crates/hazardline-core/src/stability/cusum.rs) scales
the CUSUM of deviations from the mean by a Newey-West long-run variance and decides between
levels and changes with an augmented Dickey-Fuller regression; its CIR and bond fits report a
scaled condition number and standard errors (crates/hazardline-core/src/math/identification.rs).
Each must agree with widely used implementations. This script writes
`tests/reference/stability_statsmodels.json`; tests/all/stats_reference.rs compares value by value.

Functions used:

* Long-run variance: statsmodels OLS of the series on a constant with
  cov_type='HAC', cov_kwds={'maxlags': L, 'use_correction': False} (Bartlett weights
  1 - j/(L+1)); the variance of the mean is LRV / n, so LRV = bse^2 n. The bandwidth L is
  passed in (hazardline's Andrews rule is a transcription of the formula; its value is stored
  here as computed by the same formula in numpy, and the test checks both).
* CUSUM statistic max |cumsum(x - mean)| / sqrt(n LRV) in numpy; its p-value
  scipy.stats.kstwobign.sf (the Kolmogorov distribution).
* Augmented Dickey-Fuller: statsmodels.tsa.stattools.adfuller(x, maxlag=p, regression='c',
  autolag=None): the t-statistic, the number of regression rows and the 5% critical value
  (MacKinnon 2010).
* Identification: statsmodels OLS bse of a linear model y = X b (in a linear model the
  Gauss-Newton covariance s^2 (J'J)^-1 with J = X is the OLS covariance), and
  numpy.linalg.cond of X with each column divided by its Euclidean norm.

The series are invented with numpy's default_rng and stored in the JSON, so the Rust test
uses the same numbers.

Run: python3 tests/reference/stability_statsmodels.py (statsmodels, scipy, numpy from PyPI).
"""

import json
import math
import pathlib

import numpy as np
import scipy
import scipy.stats
import statsmodels
import statsmodels.api as sm
from statsmodels.tsa.stattools import adfuller

OUT = pathlib.Path(__file__).with_name("stability_statsmodels.json")


def andrews_bandwidth(x):
    e = x - x.mean()
    rho = float(np.sum(e[1:] * e[:-1]) / np.sum(e[:-1] ** 2))
    rho = max(-0.97, min(0.97, rho))
    alpha = 4 * rho**2 / ((1 - rho) ** 2 * (1 + rho) ** 2)
    return min(int(math.floor(1.1447 * (alpha * len(x)) ** (1 / 3))), len(x) - 1)


def series_cases():
    rng = np.random.default_rng(20261204)
    cases = []
    # AR(1), phi = 0.6, 120 values.
    x = np.zeros(120)
    for t in range(1, 120):
        x[t] = 0.6 * x[t - 1] + rng.normal()
    cases.append(("ar1_0.6", 0.02 + 0.001 * x))
    # iid with a level shift of 3 sd after value 31 of 64.
    x = rng.normal(size=64)
    x[31:] += 3.0
    cases.append(("iid_shift", 0.02 + 0.001 * x))
    # Random walk, 90 values.
    cases.append(("random_walk", 0.02 + 0.001 * np.cumsum(rng.normal(size=90))))
    # A short iid window, 20 values (the fewest the stage tests by default).
    cases.append(("iid_20", 0.02 + 0.001 * rng.normal(size=20)))
    out = []
    for name, x in cases:
        n = len(x)
        lags = andrews_bandwidth(x)
        fit = sm.OLS(x, np.ones(n)).fit(cov_type="HAC", cov_kwds={"maxlags": lags, "use_correction": False})
        lrv = float(fit.bse[0] ** 2 * n)
        s = np.cumsum(x - x.mean())
        stat = float(np.max(np.abs(s)) / math.sqrt(n * lrv))
        p_lags = int(math.floor(4 * (n / 100) ** 0.25))
        adf = adfuller(x, maxlag=p_lags, regression="c", autolag=None, result_object=False)
        d = np.diff(x)
        dm = d - d.mean()
        r1 = float(np.sum(dm[1:] * dm[:-1]) / np.sum(dm**2))
        out.append(
            {
                "name": name,
                "x": [float(v) for v in x],
                "lags": lags,
                "long_run_variance": lrv,
                "statistic": stat,
                "p_value": float(scipy.stats.kstwobign.sf(stat)),
                "argmax": int(np.argmax(np.abs(s))),
                "adf_lags": p_lags,
                "adf_t": float(adf[0]),
                "adf_nobs": int(adf[3]),
                "adf_critical_5": float(adf[4]["5%"]),
                "changes_r1": r1,
            }
        )
    return out


def identification_cases():
    rng = np.random.default_rng(7)
    out = []
    for name, n, scale in [("well_conditioned", 40, 1.0), ("collinear", 30, 1e-3)]:
        x1 = rng.normal(size=n)
        x2 = x1 + scale * rng.normal(size=n)
        X = np.column_stack([np.ones(n), x1, 100.0 * x2])
        y = 1.0 + 0.5 * x1 - 0.01 * x2 + 0.1 * rng.normal(size=n)
        fit = sm.OLS(y, X).fit()
        Xs = X / np.linalg.norm(X, axis=0)
        out.append(
            {
                "name": name,
                "jacobian": [[float(v) for v in row] for row in X],
                "residuals": [float(v) for v in fit.resid],
                "standard_errors": [float(v) for v in fit.bse],
                "condition_number": float(np.linalg.cond(Xs)),
            }
        )
    return out


def main():
    doc = {
        "source": "statsmodels OLS (HAC and plain), statsmodels adfuller, scipy.stats.kstwobign, numpy.linalg.cond",
        "versions": {"statsmodels": statsmodels.__version__, "scipy": scipy.__version__, "numpy": np.__version__},
        "series": series_cases(),
        "identification": identification_cases(),
    }
    OUT.write_text(json.dumps(doc, indent=1) + "\n")
    print(f"wrote {OUT}")


if __name__ == "__main__":
    main()
