"""Throughput of hazardline.bootstrap on a year of the demo's quotes (every name, every day of
2015, the default tier, curves discounted on the demo's discount table): curves per second with
one and with two threads, from an Arrow table in to an Arrow table out.

    python crates/hazardline-py/benches/bootstrap_many.py
"""

from __future__ import annotations

import os
import subprocess
import sys
import time
from pathlib import Path

REPO = Path(__file__).resolve().parents[3]


def one(threads: int) -> None:
    import hazardline as hl
    import polars as pl
    import pyarrow.parquet as pq

    discount = hl.discount_curves_from_table(pq.read_table(REPO / "demo-data" / "discount.parquet"))
    have = pl.DataFrame({"date": [d for d, _ in discount], "currency": [c for _, c in discount]})
    quotes = (
        pl.read_parquet(REPO / "demo-data" / "cds_quotes" / "quotes_2015.parquet")
        .filter(pl.col("par_spread_bp").is_not_null())
        .join(have, on=["date", "currency"])
        .unique(["date", "entity", "currency", "tenor"], keep="first", maintain_order=True)
        .to_arrow()
    )
    started = time.perf_counter()
    nodes, rejects = hl.bootstrap(quotes, discount, errors="return")
    seconds = time.perf_counter() - started
    curves = len({(d, e, c) for d, e, c in zip(*(nodes.column(x).to_pylist() for x in ("date", "entity", "currency")))})
    print(
        f"threads {threads}: {quotes.num_rows} quotes, {curves} curves ({rejects.num_rows} refused) in {seconds:.2f} s: "
        f"{curves / seconds:,.0f} curves per second, {seconds / curves * 1e6:.1f} us per curve"
    )


if __name__ == "__main__":
    if len(sys.argv) > 1:
        one(int(sys.argv[1]))
    else:
        for threads in (1, 2):
            env = dict(os.environ, RAYON_NUM_THREADS=str(threads))
            subprocess.run([sys.executable, __file__, str(threads)], check=True, env=env)
