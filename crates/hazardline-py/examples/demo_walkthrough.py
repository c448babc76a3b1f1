"""A first session with the hazardline package on the demo run.

Reads a run folder of the command-line tool (by default the bundled demo's,
validation-reports/demo/2015-2019, after `cargo run --release -- run pipelines/demo.toml`),
then, with the package's own code:

1. recomputes one backtest bucket's default-rate intervals and binomial test from its counts;
2. rebuilds one day's hazard curve of one name from `hazard_curves` and its discount curve
   from `discount_curves`, and reprices the quotes it was calibrated to;
3. plots that hazard curve (a PNG).

    python crates/hazardline-py/examples/demo_walkthrough.py [RUN_FOLDER] [--png FILE]

Run by the Python tests (crates/hazardline-py/tests/test_example.py).
"""

from __future__ import annotations

import argparse
from pathlib import Path

import hazardline as hl
import polars as pl

ENTITY = "Salilvane Power"


def main() -> None:
    here = Path(__file__).resolve().parents[3]
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("run", nargs="?", default=here / "validation-reports" / "demo" / "2015-2019", type=Path)
    p.add_argument("--png", default=Path("hazard-curve.png"), type=Path)
    args = p.parse_args()

    run = hl.read_run(args.run)
    print(f"run {run.manifest['name']} / {run.manifest.get('label')}: {len(run.tables)} tables")

    # 1. One bucket's interval, from its counts.
    b = (
        run["backtest_buckets"]
        .filter((pl.col("horizon") == 1) & (pl.col("n_censored") == 0) & pl.col("implied_pd").is_not_null())
        .sort("cohort", "bucket")
        .collect()
        .row(0, named=True)
    )
    lo, hi = hl.jeffreys_interval(b["defaults"], b["n"], b["level"])
    p_up = hl.binomial_upper_tail(b["defaults"], b["n"], b["implied_pd"])
    same = (lo, hi, p_up) == (b["jeffreys_lo"], b["jeffreys_hi"], b["p_binom_upper"])
    print(
        f"bucket {b['cohort']} {b['bucket']} ({b['horizon']}y): {b['defaults']} defaults of {b['n']}, implied PD "
        f"{b['implied_pd']:.4f}; Jeffreys {b['level']:.0%} interval [{lo:.4f}, {hi:.4f}], binomial p {p_up:.4f}; "
        f"same as backtest_buckets: {same}"
    )

    # 2. One curve, repriced.
    nodes = (
        run["hazard_curves"]
        .filter((pl.col("entity") == ENTITY) & (pl.col("source") == "cds") & pl.col("seniority").is_null())
        .collect()
    )
    day = nodes.get_column("date").max()
    nodes = nodes.filter(pl.col("date") == day).sort("node_date")
    currency = nodes.get_column("currency")[0]
    curve = hl.curve_from_nodes(day, nodes.get_column("node_date"), nodes.get_column("hazard"), nodes.get_column("status"))
    pillars = run["discount_curves"].filter((pl.col("date") == day) & (pl.col("currency") == currency)).collect()
    discount = hl.DiscountCurve.from_discount_factors(day, pillars.get_column("pillar_date"), pillars.get_column("discount_factor"))
    quotes = (
        run["calibration_residuals"]
        .filter(
            (pl.col("date") == day) & (pl.col("entity") == ENTITY) & (pl.col("method") == "bootstrap")
            & pl.col("seniority").is_null()
        )
        .collect()
    )
    by_tenor = {q["tenor_or_bond"]: q for q in quotes.iter_rows(named=True)}
    vs_market = vs_tool = 0.0
    for node in nodes.filter(pl.col("status") == "ok").iter_rows(named=True):
        q = by_tenor[node["tenor"]]
        contract = hl.Contract.with_maturity(day, node["maturity"])
        model_bp = hl.price_legs(contract, node["recovery"], discount, curve).par_spread * 1e4
        vs_market = max(vs_market, abs(model_bp - q["market"]))
        vs_tool = max(vs_tool, abs(model_bp - q["model"]))
    print(
        f"{ENTITY} {currency} on {day}: {nodes.height} nodes repriced from hazard_curves and discount_curves; "
        f"largest difference from the market par spreads {vs_market:.1e} bp, from the tool's repriced values "
        f"{vs_tool:.1e} bp"
    )

    # 3. The curve, plotted.
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    times = [0.0] + curve.node_times
    hazards = curve.hazards + [curve.hazards[-1]]
    fig, ax = plt.subplots(figsize=(7, 3.6), dpi=110)
    ax.step(times, [h * 1e4 for h in hazards], where="post", color="#1f5f8b")
    ax.set_xlabel("years from the curve date (Act/365F)")
    ax.set_ylabel("hazard rate (bp per year)")
    ax.set_title(f"{ENTITY} ({currency}), hazard curve of {day}")
    ax.grid(alpha=0.3)
    fig.tight_layout()
    fig.savefig(args.png)
    print(f"wrote {args.png}")


if __name__ == "__main__":
    main()
