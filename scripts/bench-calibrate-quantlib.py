#!/usr/bin/env python3
"""The `calibrate` command as a whole process against QuantLib's bootstrap, in one run.

Takes every 8-tenor case of tests/reference/cds_quantlib.py that bootstraps completely (invented
market data), writes COPIES copies of each as one cds_quotes table (every copy a name of its
own, each case its own currency so that it keeps its own discount curve) with the matching
discount table, then, one after the other on this machine:

1. `hazardline calibrate` on those tables as a whole process (reading, quality rules, the
   bootstrap, repricing, the quote conversions, writing the Parquet tables), with one thread
   (RAYON_NUM_THREADS=1) and with every core;
2. QuantLib's bootstrap of each case (the reference script's own: QuantLib 1.44's IsdaCdsEngine
   driven by one Brent root per tenor), REPEAT times each, median per curve.

Prints microseconds per curve for each and the ratios.

    tests/reference/.venv/bin/python scripts/bench-calibrate-quantlib.py BIN [WORK_DIR] [COPIES]

BIN: a release build of hazardline; WORK_DIR (default a temporary folder) receives the tables.
"""

import os
import statistics
import subprocess
import sys
import tempfile
import time

HERE = os.path.dirname(os.path.abspath(__file__))
sys.path.insert(0, os.path.join(HERE, "..", "tests", "reference"))

import pyarrow as pa  # noqa: E402
import pyarrow.parquet as pq  # noqa: E402

import cds_quantlib as ref  # noqa: E402

REPEAT = 20


def letters(k):
    a = "ABCDEFGHIJKLMNOPQRSTUVWXYZ"
    return "Q" + a[k // 26] + a[k % 26]


def bench_cases():
    """The 8-tenor cases of the reference script that bootstrap completely."""
    cases = []
    for case in ref.CASES:
        if len(case["quotes"]) != 8:
            continue
        trade = ref.qdate(case["trade_date"])
        ref.ql.Settings.instance().evaluationDate = trade
        disc, _, _ = ref.build_discount_curve(trade, case["discount"])
        _, _, _, infeasible, _ = ref.bootstrap(trade, case["quotes"], ref.ql.YieldTermStructureHandle(disc), case["recovery"])
        if infeasible is None:
            cases.append(case)
    return cases


def quantlib_us_per_curve(cases):
    """QuantLib's bootstrap of each case REPEAT times; the median in microseconds per curve."""
    samples = []
    for case in cases:
        trade = ref.qdate(case["trade_date"])
        ref.ql.Settings.instance().evaluationDate = trade
        disc, _, _ = ref.build_discount_curve(trade, case["discount"])
        dh = ref.ql.YieldTermStructureHandle(disc)
        for _ in range(REPEAT):
            t0 = time.perf_counter()
            ref.bootstrap(trade, case["quotes"], dh, case["recovery"])
            samples.append(time.perf_counter() - t0)
    ql_us = statistics.median(samples) * 1e6
    print(f"QuantLib {ref.ql.__version__} bootstrap: median {ql_us:.0f} us per curve "
          f"({len(samples)} bootstraps of {len(cases)} cases)", flush=True)
    return ql_us


def main():
    binary = sys.argv[1]
    work = sys.argv[2] if len(sys.argv) > 2 else tempfile.mkdtemp()
    copies = int(sys.argv[3]) if len(sys.argv) > 3 else 4200
    os.makedirs(work, exist_ok=True)
    cases = bench_cases()
    q = {k: [] for k in ("date", "entity", "currency", "tenor", "par_spread_bp", "recovery")}
    d = {k: [] for k in ("date", "currency", "tenor", "zero_rate")}
    for k, case in enumerate(cases):
        ccy = letters(k)
        for p in case["discount"]:
            d["date"].append(case["trade_date"])
            d["currency"].append(ccy)
            d["tenor"].append(p["tenor"])
            d["zero_rate"].append(p["zero_rate"])
        for j in range(copies):
            for quote in case["quotes"]:
                q["date"].append(case["trade_date"])
                q["entity"].append(f"Case {k} name {j}")
                q["currency"].append(ccy)
                q["tenor"].append(quote["tenor"])
                q["par_spread_bp"].append(quote["par_spread_bp"])
                q["recovery"].append(case["recovery"])
    import datetime as dt

    for t in (q, d):
        t["date"] = [dt.date.fromisoformat(x) for x in t["date"]]
    pq.write_table(pa.table(q), os.path.join(work, "cds_quotes.parquet"))
    pq.write_table(pa.table(d), os.path.join(work, "discount.parquet"))
    curves = len(cases) * copies
    print(f"{len(cases)} cases x {copies} copies = {curves} curves, {len(q['date'])} quotes")

    runs = {}
    for threads in ("1", str(os.cpu_count())):
        out = os.path.join(work, f"out-{threads}")
        env = dict(os.environ, RAYON_NUM_THREADS=threads, POLARS_MAX_THREADS=threads)
        t0 = time.perf_counter()
        subprocess.run([binary, "-q", "calibrate", "--cds", os.path.join(work, "cds_quotes.parquet"),
                        "--discount", os.path.join(work, "discount.parquet"), "--out", out],
                       check=True, env=env, stdout=subprocess.DEVNULL)
        runs[threads] = time.perf_counter() - t0
        n = pq.read_table(os.path.join(out, "hazard_curves.parquet"), columns=["status"]).num_rows
        assert n == len(q["date"]), (n, len(q["date"]))

    ql_us = quantlib_us_per_curve(cases)
    for threads, seconds in runs.items():
        us = seconds / curves * 1e6
        print(f"hazardline calibrate, whole process, {threads} thread(s): {seconds:.2f} s, {us:.1f} us per curve, "
              f"{ql_us / us:.1f} times faster than QuantLib's bootstrap, {curves / seconds:,.0f} curves per second")


if __name__ == "__main__":
    main()
