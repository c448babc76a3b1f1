"""Many hazard curves at once, with the columns of the ``hazard_curves`` table."""

from __future__ import annotations

import datetime as _dt
from typing import Any, Dict, List, Mapping, Optional, Tuple, Union

import numpy as np
import pyarrow as pa

from . import _core
from ._dates import from_day, to_days
from .curves import Calendar, DiscountCurve, WEEKENDS_ONLY, discount_curves_from_table
from .frames import columns, finish

_NO_MATURITY = -(2**31)

HAZARD_CURVES_SCHEMA = pa.schema(
    [
        ("date", pa.date32()),
        ("entity", pa.string()),
        ("currency", pa.string()),
        ("seniority", pa.string()),
        ("doc_clause", pa.string()),
        ("source", pa.string()),
        ("tenor", pa.string()),
        ("maturity", pa.date32()),
        ("node_date", pa.date32()),
        ("hazard", pa.float64()),
        ("survival", pa.float64()),
        ("status", pa.string()),
        ("recovery", pa.float64()),
        ("iterations", pa.int64()),
        ("detail", pa.string()),
    ]
)
"""The columns of the command-line tool's ``hazard_curves`` table (its CDS rows)."""

REJECTS_SCHEMA = pa.schema(
    [
        ("date", pa.date32()),
        ("entity", pa.string()),
        ("currency", pa.string()),
        ("seniority", pa.string()),
        ("doc_clause", pa.string()),
        ("reason", pa.string()),
    ]
)


def _discount_for(discount, keys) -> Tuple[List[int], List[Any]]:
    """Per curve, the index of its discount curve, and the curves."""
    if isinstance(discount, DiscountCurve):
        return [0] * len(keys), [discount._inner]
    if not isinstance(discount, Mapping):
        discount = discount_curves_from_table(discount)
    index: Dict[Any, int] = {}
    curves = []
    out = []
    for key in keys:
        day, ccy = from_day(key[0]), key[2]
        found = discount.get((day, ccy)) if (day, ccy) in discount else discount.get(day)
        if found is None:
            raise _core.HazardlineError(f"no discount curve for {day} {ccy}")
        if id(found) not in index:
            index[id(found)] = len(curves)
            curves.append(found._inner)
        out.append(index[id(found)])
    return out, curves


def bootstrap(
    quotes: Any,
    discount: Union[DiscountCurve, Mapping, Any],
    *,
    calendar: Union[Calendar, Mapping[str, Calendar], None] = None,
    recovery: float = 0.40,
    standard_coupon_bp: float = 100.0,
    accrual: str = "published",
    infeasible: str = "floor",
    output: str = "arrow",
    errors: str = "raise",
):
    """Bootstraps the piecewise-flat hazard curve of every (date, entity, currency, seniority,
    doc_clause) in ``quotes``, in parallel with the interpreter released, and returns its nodes
    with the columns of ``hazard_curves`` (sorted by date, entity, currency, tier; nodes in
    maturity order).

    ``quotes``: a pyarrow Table, polars or pandas DataFrame, or dict of columns (sequences or
    numpy arrays) with the ``cds_quotes`` columns: ``date``, ``tenor``, and per row one of
    ``par_spread_bp``, ``upfront`` (fraction of notional, with ``coupon_bp``) or
    ``quoted_spread_bp`` (with ``coupon_bp``, or the standard coupon); optional ``entity``,
    ``currency``, ``recovery`` (else ``recovery``), ``seniority``, ``doc_clause``,
    ``maturity`` (a contract off its tenor's standard roll).

    ``discount``: one DiscountCurve (every quote on its date), a dict keyed by ``(date,
    currency)`` or by ``date``, or a discount table (see ``discount_curves_from_table``).
    ``calendar``: one Calendar, or a dict by currency (weekends only where none is given).
    ``errors``: ``"raise"`` (a curve that cannot be bootstrapped at all raises), or
    ``"return"`` (returns ``(curves, rejects)``, rejects naming each such curve and why).

    >>> usd = DiscountCurve.flat("2024-03-19", 0.04)
    >>> q = {"date": ["2024-03-19"] * 2, "entity": ["Alder Works"] * 2,
    ...      "tenor": ["1Y", "5Y"], "par_spread_bp": [60.0, 110.0]}
    >>> t = bootstrap(q, usd)
    >>> t.column("status").to_pylist(), [round(h, 6) for h in t.column("hazard").to_pylist()]
    (['ok', 'ok'], [0.010087, 0.020323])
    """
    if errors not in ("raise", "return"):
        raise ValueError(f"errors {errors!r} is not one of 'raise', 'return'")
    cols = columns(quotes)
    if "date" not in cols or "tenor" not in cols:
        raise _core.HazardlineError("the quotes need the columns date and tenor")
    n = len(cols["date"])
    none = [None] * n
    days = to_days(cols["date"])
    entity = cols.get("entity", [""] * n)
    currency = cols.get("currency", ["USD"] * n)
    seniority = cols.get("seniority", none)
    doc = cols.get("doc_clause", none)
    par = cols.get("par_spread_bp", none)
    upf = cols.get("upfront", none)
    quoted = cols.get("quoted_spread_bp", none)
    coupon = cols.get("coupon_bp", none)
    rec = cols.get("recovery", none)
    mat = cols.get("maturity", none)
    mat_days = [(_NO_MATURITY if m is None else d) for m, d in zip(mat, to_days([m if m is not None else 0 for m in mat]))]

    groups: Dict[tuple, List[int]] = {}
    for i in range(n):
        groups.setdefault((days[i], entity[i], currency[i], seniority[i] or "", doc[i] or ""), []).append(i)
    keys = sorted(groups)
    trades, starts, order = [], [0], []
    kinds, values, coupons, recoveries = [], [], [], []
    for key in keys:
        trades.append(key[0])
        for i in groups[key]:
            given = [x is not None for x in (par[i], upf[i], quoted[i])]
            if sum(given) != 1:
                raise _core.HazardlineError(
                    f"quote row {i} ({from_day(days[i])} {entity[i]} {cols['tenor'][i]}): give exactly one of par_spread_bp, upfront, quoted_spread_bp"
                )
            if par[i] is not None:
                kinds.append(0)
                values.append(float(par[i]) / 1e4)
                coupons.append(0.0)
            else:
                c = coupon[i]
                if c is None and upf[i] is not None:
                    raise _core.HazardlineError(f"quote row {i}: an upfront needs its coupon_bp")
                coupons.append((standard_coupon_bp if c is None else float(c)) / 1e4)
                kinds.append(1 if upf[i] is not None else 2)
                values.append(float(upf[i]) if upf[i] is not None else float(quoted[i]) / 1e4)
            recoveries.append(float(recovery if rec[i] is None else rec[i]))
            order.append(i)
        starts.append(len(order))
    tenors = [cols["tenor"][i] for i in order]
    maturities = [mat_days[i] for i in order]
    discount_index, discounts = _discount_for(discount, keys)
    if calendar is None or isinstance(calendar, Calendar):
        cals = [(calendar or WEEKENDS_ONLY)._inner]
        calendar_index = [0] * len(keys)
    else:
        names = sorted({k[2] for k in keys})
        cals = [(calendar.get(c) or WEEKENDS_ONLY)._inner for c in names]
        calendar_index = [names.index(k[2]) for k in keys]
    raw = _core.bootstrap_columns(
        trades, starts, discount_index, calendar_index, tenors, maturities, kinds, values, coupons, recoveries,
        discounts, cals, accrual, infeasible,
    )
    curve = np.asarray(raw["curve"], dtype=np.int64)
    key_cols = list(zip(*keys)) if keys else [(), (), (), (), ()]

    def per_node(j: int, blank_none: bool) -> List[Any]:
        vals = key_cols[j]
        if blank_none:
            return [vals[c] or None for c in curve]
        return [vals[c] for c in curve]

    table = pa.table(
        {
            "date": pa.array(np.asarray([key_cols[0][c] for c in curve], dtype="int32"), pa.int32()).cast(pa.date32()),
            "entity": per_node(1, False),
            "currency": per_node(2, False),
            "seniority": per_node(3, True),
            "doc_clause": per_node(4, True),
            "source": ["cds"] * len(curve),
            "tenor": raw["tenor"],
            "maturity": pa.array(raw["maturity"], pa.int32()).cast(pa.date32()),
            "node_date": pa.array(raw["node_date"], pa.int32()).cast(pa.date32()),
            "hazard": raw["hazard"],
            "survival": raw["survival"],
            "status": raw["status"],
            "recovery": raw["recovery"],
            "iterations": pa.array(raw["iterations"], pa.int64()),
            "detail": raw["detail"],
        },
        schema=HAZARD_CURVES_SCHEMA,
    )
    failed = [(keys[c], why) for c, why in zip(raw["error_curve"], raw["error"])]
    if errors == "raise":
        if failed:
            (d, e, c, s, dc), why = failed[0]
            more = f" (and {len(failed) - 1} more curves)" if len(failed) > 1 else ""
            raise _core.HazardlineError(f"curve {from_day(d)} {e} {c}{' ' + s if s else ''}: {why}{more}")
        return finish(table, output)
    rejects = pa.table(
        {
            "date": pa.array([k[0] for k, _ in failed], pa.int32()).cast(pa.date32()),
            "entity": [k[1] for k, _ in failed],
            "currency": [k[2] for k, _ in failed],
            "seniority": [k[3] or None for k, _ in failed],
            "doc_clause": [k[4] or None for k, _ in failed],
            "reason": [why for _, why in failed],
        },
        schema=REJECTS_SCHEMA,
    )
    return finish(table, output), finish(rejects, output)


def curve_from_nodes(date: Any, node_dates: Any, hazards: Any, statuses: Optional[Any] = None):
    """The HazardCurve of one curve's rows of ``hazard_curves``: its usable nodes (status ``ok``
    or ``floored``) in maturity order, as the command-line tool builds it.

    >>> h = curve_from_nodes("2024-03-19", ["2025-03-21", "2029-06-21"], [0.01, 0.02])
    >>> h.hazards
    [0.01, 0.02]
    """
    from .curves import HazardCurve

    node_dates, hazards = list(node_dates), list(hazards)
    if statuses is not None:
        keep = [s in ("ok", "floored") for s in statuses]
        node_dates = [d for d, k in zip(node_dates, keep) if k]
        hazards = [h for h, k in zip(hazards, keep) if k]
    return HazardCurve(date, node_dates, hazards)
