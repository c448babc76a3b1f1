"""The package's surface: every public name documented with an example, the input forms of
``bootstrap`` giving the same table, GIL release, and refusals with clear messages."""

from __future__ import annotations

import datetime as dt
import inspect
import threading
import time

import hazardline as hl
import numpy as np
import polars as pl
import pyarrow as pa
import pytest


def test_every_public_name_has_a_docstring_example():
    missing = []
    for name in hl.__all__:
        obj = getattr(hl, name)
        if isinstance(obj, (pa.Schema, hl.Calendar)):
            continue
        doc = inspect.getdoc(obj) or ""
        if ">>>" not in doc and name not in ("HazardlineError", "CouponPeriod", "Legs", "Run"):
            missing.append(name)
    assert not missing, missing


def _quotes():
    return {
        "date": ["2024-03-19"] * 4 + ["2024-03-20"] * 4,
        "entity": ["Alder Works"] * 8,
        "currency": ["USD"] * 8,
        "tenor": ["1Y", "3Y", "5Y", "10Y"] * 2,
        "par_spread_bp": [60.0, 85.0, 110.0, 130.0, 61.0, 86.0, 111.0, 131.0],
    }


def _discount():
    return {
        dt.date(2024, 3, 19): hl.DiscountCurve.flat("2024-03-19", 0.04),
        dt.date(2024, 3, 20): hl.DiscountCurve.flat("2024-03-20", 0.04),
    }


def test_input_forms_give_the_same_table():
    q = _quotes()
    base = hl.bootstrap(q, _discount())
    as_numpy = dict(q, date=np.array(q["date"], dtype="datetime64[D]"), par_spread_bp=np.array(q["par_spread_bp"]))
    as_dates = dict(q, date=[dt.date.fromisoformat(d) for d in q["date"]])
    for other in (pa.table(as_numpy), pl.DataFrame(as_dates), pl.DataFrame(as_dates).lazy(), as_numpy, as_dates):
        assert hl.bootstrap(other, _discount()).equals(base)
    assert hl.bootstrap(q, _discount(), output="polars").equals(pl.from_arrow(base))
    # Row order of the input does not matter; the output is sorted by curve, nodes by maturity.
    shuffled = {k: list(reversed(v)) for k, v in q.items()}
    assert hl.bootstrap(shuffled, _discount()).equals(base)
    assert base.schema == hl.HAZARD_CURVES_SCHEMA
    assert base.num_rows == 8 and set(base.column("status").to_pylist()) == {"ok"}


def test_bootstrap_releases_the_interpreter(monkeypatch):
    """While the Rust bootstrap of many curves runs, another Python thread keeps running (it
    could not if the call held the interpreter lock)."""
    n = 20000
    q = {
        "date": ["2024-03-19"] * (4 * n),
        "entity": [f"Name {i // 4}" for i in range(4 * n)],
        "tenor": ["1Y", "3Y", "5Y", "10Y"] * n,
        "par_spread_bp": [v for i in range(n) for v in (60.0 + i % 97, 85.0 + i % 89, 110.0, 130.0)],
    }
    d = hl.DiscountCurve.flat("2024-03-19", 0.04)
    ticks = []
    stop = threading.Event()
    during = []
    inner = hl._core.bootstrap_columns

    def timed(*args, **kwargs):
        t0 = time.perf_counter()
        out = inner(*args, **kwargs)
        t1 = time.perf_counter()
        inside = [t for t in list(ticks) if t0 < t < t1]
        # The other thread ran through the call, not only in a switch before or after it.
        during.append((max(inside) - min(inside)) / (t1 - t0) if inside else 0.0)
        return out

    monkeypatch.setattr(hl._core, "bootstrap_columns", timed)

    def count():
        while not stop.is_set():
            ticks.append(time.perf_counter())

    t = threading.Thread(target=count)
    t.start()
    try:
        table = hl.bootstrap(q, d)
    finally:
        stop.set()
        t.join()
    assert table.num_rows == 4 * n
    assert during and during[0] > 0.5, during


def test_refusals():
    d = hl.DiscountCurve.flat("2024-03-19", 0.04)
    with pytest.raises(hl.HazardlineError, match="give exactly one of par_spread_bp, upfront, quoted_spread_bp"):
        hl.bootstrap({"date": ["2024-03-19"], "tenor": ["5Y"]}, d)
    with pytest.raises(hl.HazardlineError, match="an upfront needs its coupon_bp"):
        hl.bootstrap({"date": ["2024-03-19"], "tenor": ["5Y"], "upfront": [0.01]}, d)
    with pytest.raises(hl.HazardlineError, match="no discount curve for 2024-03-20 USD"):
        hl.bootstrap({"date": ["2024-03-20"], "tenor": ["5Y"], "par_spread_bp": [100.0]}, {dt.date(2024, 3, 19): d})
    with pytest.raises(hl.HazardlineError, match="discount curve is referenced on 2024-03-19, not on the trade date 2024-03-20"):
        hl.bootstrap({"date": ["2024-03-20"], "tenor": ["5Y"], "par_spread_bp": [100.0]}, d)
    with pytest.raises(ValueError, match="not an ISO date"):
        hl.Contract.standard("19/03/2024", "5Y")
    nodes, rejects = hl.bootstrap(
        {"date": ["2024-03-19"] * 3, "entity": ["A", "B", "B"], "tenor": ["5Y", "5Y", "5Y"], "par_spread_bp": [100.0, 90.0, 95.0]},
        d,
        errors="return",
    )
    assert nodes.column("entity").to_pylist() == ["A"]
    assert rejects.column("entity").to_pylist() == ["B"] and "same maturity" in rejects.column("reason")[0].as_py()


def test_quoted_spreads_convert_as_the_tool_does():
    """A quoted spread at a coupon is the upfront of its flat hazard: bootstrapping the quoted
    spread and bootstrapping that upfront give the same curve bits."""
    d = hl.DiscountCurve.flat("2024-03-19", 0.04)
    c = hl.Contract.standard("2024-03-19", "5Y")
    upfront = hl.spread_to_upfront(c, 0.025, 0.01, 0.4, d)
    a = hl.bootstrap({"date": ["2024-03-19"], "tenor": ["5Y"], "quoted_spread_bp": [250.0], "coupon_bp": [100.0]}, d)
    b = hl.bootstrap({"date": ["2024-03-19"], "tenor": ["5Y"], "upfront": [upfront], "coupon_bp": [100.0]}, d)
    assert a.equals(b)
    # The flat curve of a single quoted spread is its own flat hazard.
    h = hl.flat_hazard_of_spread(c, 0.025, 0.4, d)
    assert abs(a.column("hazard")[0].as_py() - h) < 1e-12
