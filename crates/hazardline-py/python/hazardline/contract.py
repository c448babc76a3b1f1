"""The standard single-name CDS contract: schedule, legs, par spread, upfront, the quoted-spread
conversions and CS01. Spreads and coupons are decimals (100 bp = 0.01), upfronts fractions of
notional (positive when the protection buyer pays)."""

from __future__ import annotations

import datetime as _dt
from typing import List, NamedTuple, Optional

from . import _core
from ._dates import DateLike, from_day, to_day
from .curves import WEEKENDS_ONLY, Calendar, DiscountCurve, HazardCurve

Legs = _core.Legs


class CouponPeriod(NamedTuple):
    accrual_start: _dt.date
    accrual_end: _dt.date
    payment: _dt.date
    accrual_days: int
    accrual_fraction: float


class Contract:
    """A standard CDS traded on ``trade_date``: protection from T + 1 calendar day, coupons on the
    quarterly IMM dates (Actual/360, the last period counting the maturity day), cash settlement
    T + 3 business days.

    >>> c = Contract.standard("2024-03-19", "5Y")
    >>> c.maturity, c.cash_settlement, len(c.schedule())
    (datetime.date(2028, 12, 20), datetime.date(2024, 3, 22), 19)
    """

    def __init__(self, inner: "_core.Contract") -> None:
        self._inner = inner

    @classmethod
    def standard(cls, trade_date: DateLike, tenor: str, calendar: Calendar = WEEKENDS_ONLY) -> "Contract":
        """The standard contract of ``tenor`` (a multiple of 3 months) on the semi-annual roll."""
        return cls(_core.Contract.standard(to_day(trade_date), tenor, calendar._inner))

    @classmethod
    def with_maturity(cls, trade_date: DateLike, maturity: DateLike, calendar: Calendar = WEEKENDS_ONLY) -> "Contract":
        """A contract to a given unadjusted maturity.

        >>> Contract.with_maturity("2009-05-21", "2010-06-20").schedule()[0].accrual_start
        datetime.date(2009, 3, 20)
        """
        return cls(_core.Contract.with_maturity(to_day(trade_date), to_day(maturity), calendar._inner))

    @property
    def trade_date(self) -> _dt.date:
        return from_day(self._inner.trade_date)

    @property
    def maturity(self) -> _dt.date:
        return from_day(self._inner.maturity)

    @property
    def protection_start(self) -> _dt.date:
        return from_day(self._inner.protection_start)

    @property
    def cash_settlement(self) -> _dt.date:
        return from_day(self._inner.cash_settlement)

    @property
    def rebate_accrual(self) -> float:
        """Accrual fraction (days/360 per unit coupon) repaid to the buyer at settlement."""
        return self._inner.rebate_accrual

    def schedule(self) -> List[CouponPeriod]:
        return [
            CouponPeriod(from_day(a), from_day(b), from_day(p), days, frac)
            for a, b, p, days, frac in self._inner.schedule()
        ]

    def __repr__(self) -> str:
        return f"Contract(trade_date={self.trade_date}, maturity={self.maturity})"


def price_legs(
    contract: Contract, recovery: float, discount: DiscountCurve, hazard: HazardCurve, accrual: str = "published"
) -> "_core.Legs":
    """The legs of ``contract`` on the curves (both referenced on its trade date), with
    ``risky_annuity``, ``par_spread``, ``upfront(coupon)`` and ``coupon_from_upfront(upfront)``.
    ``accrual``: ``published`` (the default, the published standard model), ``standard`` or
    ``exact``.

    >>> d = DiscountCurve.flat("2024-03-19", 0.04)
    >>> legs = price_legs(Contract.standard("2024-03-19", "5Y"), 0.4, d, HazardCurve.flat("2024-03-19", 0.02))
    >>> round(legs.par_spread * 1e4, 4), round(legs.risky_annuity, 6)
    (118.9598, 4.175989)
    """
    return _core.price_legs(contract._inner, float(recovery), discount._inner, hazard._inner, accrual)


def flat_hazard_of_spread(
    contract: Contract, spread: float, recovery: float, discount: DiscountCurve, accrual: str = "published"
) -> Optional[float]:
    """The flat hazard at which the contract's par spread is ``spread`` (None when no hazard up
    to 50 per year reaches it).

    >>> d, c = DiscountCurve.flat("2024-03-19", 0.04), Contract.standard("2024-03-19", "5Y")
    >>> s = price_legs(c, 0.4, d, HazardCurve.flat("2024-03-19", 0.02)).par_spread
    >>> round(flat_hazard_of_spread(c, s, 0.4, d), 12)
    0.02
    """
    return _core.flat_hazard_of_spread(contract._inner, float(spread), float(recovery), discount._inner, accrual)


def spread_to_upfront(
    contract: Contract, spread: float, coupon: float, recovery: float, discount: DiscountCurve, accrual: str = "published"
) -> Optional[float]:
    """The upfront of a contract quoted at ``spread`` with running ``coupon``: the upfront of the
    flat hazard whose par spread is the quote (the quoted-spread convention).

    >>> d = DiscountCurve.flat("2024-03-19", 0.04)
    >>> round(spread_to_upfront(Contract.standard("2024-03-19", "5Y"), 0.03, 0.01, 0.4, d), 6)
    0.078049
    """
    return _core.spread_to_upfront(contract._inner, float(spread), float(coupon), float(recovery), discount._inner, accrual)


def upfront_to_spread(
    contract: Contract, upfront: float, coupon: float, recovery: float, discount: DiscountCurve, accrual: str = "published"
) -> Optional[float]:
    """The quoted spread of a contract trading at ``upfront`` with running ``coupon``.

    >>> d = DiscountCurve.flat("2024-03-19", 0.04)
    >>> c = Contract.standard("2024-03-19", "5Y")
    >>> round(upfront_to_spread(c, spread_to_upfront(c, 0.03, 0.01, 0.4, d), 0.01, 0.4, d), 12)
    0.03
    """
    return _core.upfront_to_spread(contract._inner, float(upfront), float(coupon), float(recovery), discount._inner, accrual)


def cs01(
    contract: Contract, spread: float, coupon: float, recovery: float, discount: DiscountCurve, accrual: str = "published"
) -> Optional[float]:
    """CS01: the change of the clean upfront (per unit notional) when the quoted spread rises by
    1 bp, both upfronts by the quoted-spread convention. Close to the risky annuity x 1 bp.

    >>> d = DiscountCurve.flat("2024-03-19", 0.04)
    >>> round(cs01(Contract.standard("2024-03-19", "5Y"), 0.01, 0.01, 0.4, d) * 1e4, 4)
    4.2061
    """
    return _core.cs01(contract._inner, float(spread), float(coupon), float(recovery), discount._inner, accrual)
