"""The CIR intensity model: survival, forward hazards, par spreads, and the fit to one name's
quotes on one day."""

from __future__ import annotations

from typing import Any, Dict, Iterable, List, Optional, Sequence, Tuple

from . import _core
from ._dates import DateLike, to_day
from .curves import WEEKENDS_ONLY, Calendar, DiscountCurve


def cir_survival(kappa: float, theta: float, sigma: float, lambda0: float, times: Iterable[float]) -> List[float]:
    """CIR survival S(t) = A(t) exp(-B(t) lambda0) at Act/365F times.

    >>> [round(s, 12) for s in cir_survival(0.5, 0.03, 0.1, 0.01, [1.0])]
    [0.98585423138]
    """
    return _core.cir_survival(kappa, theta, sigma, lambda0, [float(t) for t in times])


def cir_forward_hazard(kappa: float, theta: float, sigma: float, lambda0: float, times: Iterable[float]) -> List[float]:
    """CIR forward hazards -d ln S / dt at Act/365F times (lambda0 at t = 0).

    >>> cir_forward_hazard(0.5, 0.03, 0.1, 0.01, [0.0])
    [0.01]
    """
    return _core.cir_forward_hazard(kappa, theta, sigma, lambda0, [float(t) for t in times])


def cir_par_spreads(
    trade_date: DateLike,
    tenors: Sequence[str],
    recovery: float,
    discount: DiscountCurve,
    kappa: float,
    theta: float,
    sigma: float,
    lambda0: float,
    calendar: Calendar = WEEKENDS_ONLY,
    accrual: str = "published",
) -> List[float]:
    """Par spreads (decimal) of the standard contracts of ``tenors`` under CIR parameters.

    >>> d = DiscountCurve.flat("2024-03-19", 0.04)
    >>> [round(s * 1e4, 3) for s in cir_par_spreads("2024-03-19", ["1Y", "5Y"], 0.4, d, 0.5, 0.03, 0.1, 0.01)]
    [79.209, 129.652]
    """
    return _core.cir_spreads(
        to_day(trade_date), list(tenors), float(recovery), discount._inner, calendar._inner, kappa, theta, sigma, lambda0, accrual
    )


def fit_cir(
    trade_date: DateLike,
    tenors: Sequence[str],
    par_spreads_bp: Sequence[float],
    discount: DiscountCurve,
    recovery: float = 0.40,
    calendar: Calendar = WEEKENDS_ONLY,
    kappa: Optional[float] = None,
    sigma: Optional[float] = None,
    starts: Sequence[Tuple[float, float, float, float]] = (),
    accrual: str = "published",
) -> Dict[str, Any]:
    """Fits CIR to one name's par spreads on one day by Levenberg-Marquardt: all four parameters,
    or theta and lambda0 with ``kappa`` and ``sigma`` held (the window mode). Returns the
    parameters, ``rmse_bp``, ``status``, ``feller``, the condition number and standard errors
    (the ``intensity_params`` columns), and each quote's model par spread and residual (bp).
    Without ``starts`` (tuples kappa, theta, sigma, lambda0) it starts from the day's
    bootstrapped curve.

    >>> d = DiscountCurve.flat("2024-03-19", 0.04)
    >>> tenors = ["1Y", "2Y", "3Y", "5Y", "7Y", "10Y"]
    >>> spreads = [s * 1e4 for s in cir_par_spreads("2024-03-19", tenors, 0.4, d, 0.5, 0.03, 0.1, 0.01)]
    >>> fit = fit_cir("2024-03-19", tenors, spreads, d)
    >>> fit["status"], round(fit["theta"], 6), fit["rmse_bp"] < 1e-6
    ('ok', 0.03, True)
    """
    n = len(tenors)
    return _core.fit_cir_day(
        to_day(trade_date), list(tenors), [0] * n, [float(s) / 1e4 for s in par_spreads_bp], [0.0] * n,
        [float(recovery)] * n, discount._inner, calendar._inner, kappa, sigma, [(float(k), float(t), float(s), float(l)) for k, t, s, l in starts], accrual,
    )
