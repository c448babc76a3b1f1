"""Many hazard curves at once, with the columns of the ``hazard_curves`` table."""

from __future__ import annotations

import datetime as _dt
from typing import Any, Dict, List, Mapping, Optional, Tuple, Union

import numpy as np
import pyarrow as pa

from . import _core
from ._dates import from_day
from .curves import Calendar, DiscountCurve, WEEKENDS_ONLY, discount_curves_from_table
from .frames import arrow_table, date_numbers, finish, numbers, text_codes

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
    curves: List[Any] = []
    out: List[int] = []
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
    t = arrow_table(quotes)
    if "date" not in t.column_names or "tenor" not in t.column_names:
        raise _core.HazardlineError("the quotes need the columns date and tenor")
    n = t.num_rows
    days = date_numbers(t.column("date"), "date")
    entity_codes, entities = text_codes(t, "entity", "")
    currency_codes, currencies = text_codes(t, "currency", "USD")
    seniority_codes, seniorities = text_codes(t, "seniority", None)
    doc_codes, docs = text_codes(t, "doc_clause", None)
    par, upf, quoted = (numbers(t, c) for c in ("par_spread_bp", "upfront", "quoted_spread_bp"))
    coupon, rec = numbers(t, "coupon_bp"), numbers(t, "recovery")
    given = (~np.isnan(par)).astype(int) + (~np.isnan(upf)) + (~np.isnan(quoted))
    if n and (given != 1).any():
        i = int(np.argmax(given != 1))
        raise _core.HazardlineError(
            f"quote row {i} ({from_day(days[i])} {entities[entity_codes[i]] if entity_codes[i] >= 0 else ''}): "
            "give exactly one of par_spread_bp, upfront, quoted_spread_bp"
        )
    bad_upfront = ~np.isnan(upf) & np.isnan(coupon)
    if bad_upfront.any():
        raise _core.HazardlineError(f"quote row {int(np.argmax(bad_upfront))}: an upfront needs its coupon_bp")
    if "maturity" in t.column_names:
        mat = t.column("maturity")
        valid = np.asarray(mat.is_valid().to_numpy(zero_copy_only=False), dtype=bool)
        mat_days = np.where(valid, date_numbers(mat.fill_null(0) if pa.types.is_integer(mat.type) else mat, "maturity", allow_null=True), _NO_MATURITY)
    else:
        mat_days = np.full(n, _NO_MATURITY, dtype=np.int64)

    # Curves: (date, entity, currency, seniority, doc_clause), sorted by value; quotes in input order.
    order = np.lexsort((doc_codes, seniority_codes, currency_codes, entity_codes, days))
    keys = np.stack([days, entity_codes, currency_codes, seniority_codes, doc_codes])[:, order]
    change = np.ones(n, dtype=bool)
    if n:
        change[1:] = (keys[:, 1:] != keys[:, :-1]).any(axis=0)
    first = np.flatnonzero(change)
    starts = np.append(first, n)
    kinds = np.where(~np.isnan(par), 0, np.where(~np.isnan(upf), 1, 2))[order]
    values = np.where(~np.isnan(par), par / 1e4, np.where(~np.isnan(upf), upf, quoted / 1e4))[order]
    coupons = np.where(np.isnan(par), np.where(np.isnan(coupon), standard_coupon_bp, coupon) / 1e4, 0.0)[order]
    recoveries = np.where(np.isnan(rec), recovery, rec)[order]
    tenors = t.column("tenor").cast(pa.string()).take(pa.array(order)).to_pylist()
    if any(x is None for x in tenors):
        raise _core.HazardlineError(f"quote row {int(order[tenors.index(None)])}: no tenor")
    curve_keys = [
        (int(k[0]), _name(entities, k[1], ""), _name(currencies, k[2], "USD"), _name(seniorities, k[3], None), _name(docs, k[4], None))
        for k in keys[:, first].T.tolist()
    ]
    discount_index, discounts = _discount_for(discount, curve_keys)
    if calendar is None or isinstance(calendar, Calendar):
        cals = [(calendar or WEEKENDS_ONLY)._inner]
        calendar_index = [0] * len(curve_keys)
    else:
        names = sorted({k[2] for k in curve_keys})
        cals = [(calendar.get(c) or WEEKENDS_ONLY)._inner for c in names]
        calendar_index = [names.index(k[2]) for k in curve_keys]
    raw = _core.bootstrap_columns(
        keys[0, first].tolist(), starts.tolist(), discount_index, calendar_index, tenors, mat_days[order].tolist(),
        kinds.tolist(), values.tolist(), coupons.tolist(), recoveries.tolist(), discounts, cals, accrual, infeasible,
    )
    curve = pa.array(np.asarray(raw["curve"], dtype=np.int64))

    def per_node(j: int) -> pa.Array:
        return pa.array([k[j] for k in curve_keys], pa.string()).take(curve)

    table = pa.table(
        {
            "date": pa.array(keys[0, first].astype(np.int32)).cast(pa.date32()).take(curve),
            "entity": per_node(1),
            "currency": per_node(2),
            "seniority": per_node(3),
            "doc_clause": per_node(4),
            "source": pa.repeat("cds", len(curve)).cast(pa.string()),
            "tenor": pa.array(raw["tenor"], pa.string()),
            "maturity": pa.array(raw["maturity"], pa.int32()).cast(pa.date32()),
            "node_date": pa.array(raw["node_date"], pa.int32()).cast(pa.date32()),
            "hazard": pa.array(raw["hazard"], pa.float64()),
            "survival": pa.array(raw["survival"], pa.float64()),
            "status": pa.array(raw["status"], pa.string()),
            "recovery": pa.array(raw["recovery"], pa.float64()),
            "iterations": pa.array(raw["iterations"], pa.int64()),
            "detail": pa.array(raw["detail"], pa.string()),
        },
        schema=HAZARD_CURVES_SCHEMA,
    )
    failed = [(curve_keys[c], why) for c, why in zip(raw["error_curve"], raw["error"])]
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
            "seniority": [k[3] for k, _ in failed],
            "doc_clause": [k[4] for k, _ in failed],
            "reason": [why for _, why in failed],
        },
        schema=REJECTS_SCHEMA,
    )
    return finish(table, output), finish(rejects, output)


def _name(values: List[Any], code: int, absent: Any) -> Any:
    return absent if code < 0 else values[code]


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
