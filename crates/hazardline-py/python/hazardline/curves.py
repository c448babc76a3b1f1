"""Calendars, discount curves and hazard curves."""

from __future__ import annotations

import datetime as _dt
from typing import Dict, Iterable, List, Optional, Sequence, Tuple, Union

from . import _core
from ._dates import DateLike, from_day, to_day, to_days

Pillar = Union[str, DateLike]


def _pillars(pillars: Iterable[Pillar]) -> List[Union[str, int]]:
    out: List[Union[str, int]] = []
    for p in pillars:
        if isinstance(p, str) and p[-1:].upper() in ("M", "Y") and p[:-1].isdigit():
            out.append(p.upper())
        else:
            out.append(to_day(p))
    return out


class Calendar:
    """A business-day calendar: Saturdays, Sundays and the given holidays.

    >>> cal = Calendar(["2024-03-20"])
    >>> cal.is_business_day("2024-03-20"), cal.following("2024-03-20")
    (False, datetime.date(2024, 3, 21))
    """

    def __init__(self, holidays: Iterable[DateLike] = ()) -> None:
        self._inner = _core.Calendar(to_days(list(holidays)))

    @property
    def holidays(self) -> List[_dt.date]:
        return [from_day(d) for d in self._inner.holidays()]

    def is_business_day(self, date: DateLike) -> bool:
        return self._inner.is_business_day(to_day(date))

    def following(self, date: DateLike) -> _dt.date:
        """The date itself if a business day, else the next business day."""
        return from_day(self._inner.following(to_day(date)))

    def add_business_days(self, date: DateLike, n: int) -> _dt.date:
        return from_day(self._inner.add_business_days(to_day(date), n))

    def __repr__(self) -> str:
        return f"Calendar({len(self._inner.holidays())} holidays)"


WEEKENDS_ONLY = Calendar()
"""The calendar the command-line tool uses for a currency without its own holidays."""


class DiscountCurve:
    """A risk-free discount curve on the Act/365F axis, log-linear in the discount factor between
    pillars (flat forwards), the first zero rate before the first pillar, the last forward after
    the last one.

    >>> usd = DiscountCurve.from_zero_rates("2024-03-19", ["1Y", "5Y"], [0.05, 0.04])
    >>> round(usd.df("2025-03-19")[0], 12)
    0.951229424501
    """

    def __init__(self, inner: "_core.DiscountCurve") -> None:
        self._inner = inner

    @classmethod
    def from_zero_rates(
        cls,
        reference: DateLike,
        pillars: Sequence[Pillar],
        rates: Sequence[float],
        compounding: str = "continuous",
        day_count: str = "act365f",
    ) -> "DiscountCurve":
        """From zero rates at pillars given as tenors (``"5Y"``, calendar months from the
        reference, clipped to month end) or dates, with their compounding (``continuous``,
        ``annual``, ``semi_annual``, ``quarterly``, ``simple``) and day count (``act365f``,
        ``act360``): what the command-line tool builds from a discount table.

        >>> DiscountCurve.from_zero_rates("2024-01-31", ["1M"], [0.03]).pillar_dates
        [datetime.date(2024, 2, 29)]
        """
        n = len(rates)
        return cls(
            _core.DiscountCurve.from_pillar_values(
                to_day(reference), _pillars(pillars), [float(r) for r in rates], [None] * n, compounding, day_count
            )
        )

    @classmethod
    def from_discount_factors(
        cls, reference: DateLike, pillars: Sequence[Pillar], factors: Sequence[float]
    ) -> "DiscountCurve":
        """From discount factors at pillars (tenors or dates).

        >>> c = DiscountCurve.from_discount_factors("2024-03-19", ["2025-03-19"], [0.95])
        >>> round(c.zero_rate("2025-03-19")[0], 10)
        0.0512932944
        """
        return cls(_core.DiscountCurve.from_discount_factors(to_day(reference), _pillars(pillars), [float(f) for f in factors]))

    @classmethod
    def flat(cls, reference: DateLike, rate: float) -> "DiscountCurve":
        """A flat continuously compounded curve.

        >>> round(DiscountCurve.flat("2024-03-19", 0.03).df("2026-03-19")[0], 10)
        0.9417645336
        """
        return cls(_core.DiscountCurve.flat(to_day(reference), float(rate)))

    @property
    def reference(self) -> _dt.date:
        return from_day(self._inner.reference)

    @property
    def pillar_dates(self) -> List[_dt.date]:
        return [from_day(d) for d in self._inner.pillar_dates]

    @property
    def pillar_log_dfs(self) -> List[float]:
        return self._inner.pillar_log_dfs

    def df(self, dates: Union[DateLike, Iterable[DateLike]]) -> List[float]:
        """Discount factors to the dates."""
        return self._inner.df(_many(dates))

    def zero_rate(self, dates: Union[DateLike, Iterable[DateLike]]) -> List[float]:
        """Continuously compounded Act/365F zero rates to the dates."""
        return self._inner.zero_rate(_many(dates))

    def shifted(self, bp: float) -> "DiscountCurve":
        """The same curve with every zero rate ``bp`` basis points higher."""
        return DiscountCurve(self._inner.shifted(float(bp)))

    def __repr__(self) -> str:
        return f"DiscountCurve(reference={self.reference}, {len(self._inner.pillar_dates)} pillars)"


def _many(dates) -> List[int]:
    if isinstance(dates, (str, _dt.date, int)) or not hasattr(dates, "__iter__"):
        return [to_day(dates)]
    return to_days(dates)


class HazardCurve:
    """A piecewise-flat hazard curve: ``hazards[k]`` holds from the previous node (or the
    reference date) to ``node_dates[k]``, on Act/365F; the last hazard continues after it.
    The ``node_date`` and ``hazard`` columns of ``hazard_curves`` make one.

    >>> h = HazardCurve("2024-03-19", ["2025-03-21", "2029-06-21"], [0.01, 0.02])
    >>> [round(x, 6) for x in h.survival(["2025-03-19", "2029-06-20"])]
    [0.99005, 0.909286]
    """

    def __init__(self, reference: DateLike, node_dates: Sequence[DateLike], hazards: Sequence[float]) -> None:
        self._inner = _core.HazardCurve(to_day(reference), to_days(list(node_dates)), [float(h) for h in hazards])

    @classmethod
    def flat(cls, reference: DateLike, hazard: float) -> "HazardCurve":
        """A flat hazard.

        >>> import math
        >>> s = HazardCurve.flat("2024-03-19", 0.02).survival("2029-03-19")[0]
        >>> abs(s - math.exp(-0.02 * 1826 / 365)) < 1e-15
        True
        """
        out = cls.__new__(cls)
        out._inner = _core.HazardCurve.flat(to_day(reference), float(hazard))
        return out

    @property
    def reference(self) -> _dt.date:
        return from_day(self._inner.reference)

    @property
    def node_times(self) -> List[float]:
        return self._inner.node_times

    @property
    def hazards(self) -> List[float]:
        return self._inner.hazards

    def survival(self, dates: Union[DateLike, Iterable[DateLike]]) -> List[float]:
        """Survival probabilities from the reference date to the dates."""
        return self._inner.survival(_many(dates))

    def hazard(self, dates: Union[DateLike, Iterable[DateLike]]) -> List[float]:
        """The hazard rate in force on each date."""
        return self._inner.hazard(_many(dates))

    def survival_at(self, times: Iterable[float]) -> List[float]:
        """Survival at Act/365F year fractions from the reference date."""
        return self._inner.survival_at([float(t) for t in times])

    def hazard_at(self, times: Iterable[float]) -> List[float]:
        return self._inner.hazard_at([float(t) for t in times])

    def __repr__(self) -> str:
        return f"HazardCurve(reference={self.reference}, {len(self._inner.hazards)} nodes)"


def discount_curves_from_table(
    table, compounding: str = "continuous", day_count: str = "act365f"
) -> Dict[Tuple[_dt.date, str], DiscountCurve]:
    """Every (date, currency) curve of a discount table, as the command-line tool reads it:
    columns ``date``, ``currency``, a pillar as ``tenor`` or ``pillar_date``, and a value as
    ``zero_rate`` or ``discount_factor`` (a pyarrow Table, a polars DataFrame or a dict of
    columns). A curve mixing zero rates and discount factors takes each pillar's own value.

    >>> import pyarrow as pa
    >>> t = pa.table({"date": ["2024-03-19"] * 2, "currency": ["USD"] * 2,
    ...               "tenor": ["1Y", "5Y"], "zero_rate": [0.05, 0.04]})
    >>> sorted(discount_curves_from_table(t))
    [(datetime.date(2024, 3, 19), 'USD')]
    """
    from .frames import columns

    cols = columns(table)
    n = len(cols["date"])
    dates = to_days(cols["date"])
    tenors = cols.get("tenor", [None] * n)
    pillar_dates = cols.get("pillar_date", [None] * n)
    zero = cols.get("zero_rate", [None] * n)
    factor = cols.get("discount_factor", [None] * n)
    groups: Dict[Tuple[int, str], list] = {}
    for i in range(n):
        pillar = tenors[i] if tenors[i] is not None else pillar_dates[i]
        if pillar is None:
            raise _core.HazardlineError(f"discount table row {i}: no tenor and no pillar_date")
        groups.setdefault((dates[i], cols["currency"][i]), []).append(i)
    out = {}
    for (day, ccy), rows in groups.items():
        pillars = _pillars([tenors[i] if tenors[i] is not None else pillar_dates[i] for i in rows])
        z = [None if zero[i] is None else float(zero[i]) for i in rows]
        f = [None if factor[i] is None else float(factor[i]) for i in rows]
        inner = _core.DiscountCurve.from_pillar_values(day, pillars, z, f, compounding, day_count)
        out[(from_day(day), ccy)] = DiscountCurve(inner)
    return out
