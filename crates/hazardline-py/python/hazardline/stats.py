"""The backtest statistics the command-line tool reports, from the same code."""

from __future__ import annotations

from typing import Any, Dict, Sequence, Tuple

from . import _core


def clopper_pearson(d: int, n: int, level: float = 0.95) -> Tuple[float, float]:
    """Clopper-Pearson (exact binomial) interval of the default rate d / n.

    >>> [round(x, 6) for x in clopper_pearson(3, 200, 0.95)]
    [0.003104, 0.043208]
    """
    return _core.clopper_pearson(int(d), int(n), float(level))


def jeffreys_interval(d: int, n: int, level: float = 0.95) -> Tuple[float, float]:
    """Jeffreys interval: Beta(d + 1/2, n - d + 1/2) quantiles, lo = 0 at d = 0, hi = 1 at d = n.

    >>> jeffreys_interval(0, 10, 0.9)[0]
    0.0
    """
    return _core.jeffreys_interval(int(d), int(n), float(level))


def wilson_interval(d: int, n: int, level: float = 0.95) -> Tuple[float, float]:
    """Wilson score interval.

    >>> [round(x, 6) for x in wilson_interval(5, 100, 0.95)]
    [0.021544, 0.11175]
    """
    return _core.wilson_interval(int(d), int(n), float(level))


def binomial_upper_tail(d: int, n: int, p: float) -> float:
    """P[D >= d] for D ~ Binomial(n, p): the binomial test that the PD is not too low.

    >>> round(binomial_upper_tail(5, 100, 0.02), 6)
    0.05083
    """
    return _core.binomial_upper_tail(int(d), int(n), float(p))


def binomial_lower_tail(d: int, n: int, p: float) -> float:
    """P[D <= d] for D ~ Binomial(n, p).

    >>> abs(binomial_lower_tail(0, 100, 0.02) - 0.98**100) < 1e-15
    True
    """
    return _core.binomial_lower_tail(int(d), int(n), float(p))


def jeffreys_p_value(d: int, n: int, p: float) -> float:
    """The Jeffreys test's p-value: the Beta(d + 1/2, n - d + 1/2) probability below the PD p
    (small when more defaults came than p makes likely).

    >>> round(jeffreys_p_value(5, 100, 0.02), 6)
    0.028614
    """
    return _core.jeffreys_p_value(int(d), int(n), float(p))


def vasicek_upper_tail(d: int, n: int, pd: float, rho: float) -> float:
    """P[D >= d] for n obligors of PD ``pd`` whose defaults are correlated through one factor
    with asset correlation ``rho`` (the Vasicek model): the binomial test allowing for
    correlated defaults.

    >>> vasicek_upper_tail(5, 100, 0.02, 0.12) > binomial_upper_tail(5, 100, 0.02)
    True
    """
    return _core.vasicek_upper_tail(int(d), int(n), float(pd), float(rho))


def vasicek_lower_tail(d: int, n: int, pd: float, rho: float) -> float:
    """P[D <= d] in the same model.

    >>> round(vasicek_lower_tail(0, 100, 0.02, 0.0), 6) == round(binomial_lower_tail(0, 100, 0.02), 6)
    True
    """
    return _core.vasicek_lower_tail(int(d), int(n), float(pd), float(rho))


def vasicek_count_interval(n: int, pd: float, rho: float, level: float = 0.95) -> Tuple[int, int]:
    """The default counts (lo, hi) the correlated model makes plausible at the two-sided level.

    >>> lo, hi = vasicek_count_interval(1000, 0.02, 0.12)
    >>> lo <= 20 <= hi
    True
    """
    return _core.vasicek_count_interval(int(n), float(pd), float(rho), float(level))


def supervisory_corporate_correlation(pd_one_year: float) -> float:
    """The supervisory asset correlation for corporate exposures: 0.24 at PD 0 down to 0.12.

    >>> round(supervisory_corporate_correlation(0.0), 12)
    0.24
    """
    return _core.supervisory_corporate_correlation(float(pd_one_year))


def hosmer_lemeshow(n: Sequence[int], d: Sequence[int], p: Sequence[float]) -> Tuple[float, int, float]:
    """Hosmer-Lemeshow over buckets of n obligors, d defaults and forecast PD p:
    (statistic, degrees of freedom = number of buckets, p-value).

    >>> stat, dof, pv = hosmer_lemeshow([200, 350], [1, 3], [0.004, 0.008])
    >>> dof
    2
    """
    return _core.hosmer_lemeshow([int(x) for x in n], [int(x) for x in d], [float(x) for x in p])


def auc_delong(scores: Sequence[float], defaulted: Sequence[bool], level: float = 0.95) -> Dict[str, Any]:
    """AUC of a score (higher = riskier) with its DeLong variance, standard error, Gini and the
    normal interval (``lo``, ``hi``) at ``level``.

    >>> a = auc_delong([0.1, 0.4, 0.35, 0.8], [False, False, True, True])
    >>> a["auc"]
    0.75
    """
    return _core.auc_delong([float(s) for s in scores], [bool(x) for x in defaulted], float(level))


def auc_paired(a: Sequence[float], b: Sequence[float], defaulted: Sequence[bool], level: float = 0.95) -> Dict[str, Any]:
    """The paired DeLong test of two scores on the same obligors (``z``, ``p_value``).

    >>> r = auc_paired([0.1, 0.4, 0.35, 0.8], [0.1, 0.2, 0.3, 0.4], [False, False, True, True])
    >>> r["b"]["auc"]
    1.0
    """
    return _core.auc_paired([float(s) for s in a], [float(s) for s in b], [bool(x) for x in defaulted], float(level))


def traffic_light(p_value: float, yellow: float = 0.05, red: float = 0.001) -> str:
    """``green``, ``yellow`` (p below ``yellow``) or ``red`` (p below ``red``).

    >>> traffic_light(0.02)
    'yellow'
    """
    return _core.traffic_light(float(p_value), float(yellow), float(red))
