"""The package against the command-line tool's own tables on the demo run, bit for bit: the
hazard curves of the demo's quotes bootstrapped by ``hazardline.bootstrap`` from the demo's
input files, and the backtest buckets' intervals and tests recomputed from their counts."""

from __future__ import annotations

import datetime as dt

import hazardline as hl
import polars as pl
import pyarrow.parquet as pq

# Curve dates compared: the first quote date of every month (about 3,500 curves).
QUOTE_FILES = [f"quotes_{y}.parquet" for y in range(2015, 2020)] + ["second_tier.parquet"]


def _raw_quotes(repo) -> pl.DataFrame:
    frames = []
    for name in QUOTE_FILES:
        df = pl.from_arrow(pq.read_table(repo / "demo-data" / "cds_quotes" / name))
        for col, dtype in [("seniority", pl.Utf8), ("par_spread_bp", pl.Float64), ("quoted_spread_bp", pl.Float64), ("coupon_bp", pl.Float64)]:
            if col not in df.columns:
                df = df.with_columns(pl.lit(None, dtype).alias(col))
        frames.append(df.select("date", "entity", "currency", "tenor", "seniority", "par_spread_bp", "quoted_spread_bp", "coupon_bp").with_columns(pl.col(pl.Utf8).cast(pl.Utf8)))
    manual = pl.read_csv(repo / "demo-data" / "cds_quotes" / "manual_entries.csv", infer_schema_length=0)
    return pl.concat(frames, how="vertical_relaxed"), manual


def test_bootstrap_reproduces_the_tools_hazard_curves(demo_run, repo):
    run = hl.read_run(demo_run)
    assert run.manifest["name"] == "demo"
    curves = run["hazard_curves"].filter(pl.col("source") == "cds").collect()
    used = run["discount_curves"].filter(pl.col("source") == "discount").select("date", "currency").unique().collect()
    firsts = curves.group_by(pl.col("date").dt.strftime("%Y-%m").alias("month")).agg(pl.col("date").min()).get_column("date")
    curves = curves.filter(pl.col("date").is_in(firsts.implode())).join(used, on=["date", "currency"])
    raw, manual = _raw_quotes(repo)
    keys = ["date", "entity", "currency", "tenor"]
    # Only quotes with one row in the input files and none among the manual entries (a
    # duplicate or a manual correction is the quality rules' business, not the bootstrap's).
    manual_keys = manual.select(
        pl.col("date").str.to_date(), "entity", "currency", "tenor"
    ).unique()
    raw = raw.filter(pl.len().over(keys + ["seniority"]) == 1).join(manual_keys, on=keys, how="anti")
    nodes = curves.join(raw, on=keys + ["seniority"], how="left", nulls_equal=True)
    complete = nodes.group_by("date", "entity", "currency", "seniority").agg(
        (pl.col("par_spread_bp").is_not_null() | pl.col("quoted_spread_bp").is_not_null()).all().alias("ok")
    ).filter(pl.col("ok"))
    nodes = nodes.join(complete.drop("ok"), on=["date", "entity", "currency", "seniority"], nulls_equal=True)
    quotes = nodes.select(
        "date", "entity", "currency", "tenor", "seniority", "recovery",
        pl.when(pl.col("quoted_spread_bp").is_null()).then(pl.col("par_spread_bp")).alias("par_spread_bp"),
        "quoted_spread_bp", "coupon_bp",
    )
    discount = hl.discount_curves_from_table(pq.read_table(repo / "demo-data" / "discount.parquet"))
    ours = hl.bootstrap(quotes, discount, output="polars")
    theirs = nodes.select(ours.columns).sort("date", "entity", "currency", "seniority", "node_date", nulls_last=False)
    ours = ours.sort("date", "entity", "currency", "seniority", "node_date", nulls_last=False)
    n_curves = theirs.select("date", "entity", "currency", "seniority").unique().height
    assert n_curves > 3000, n_curves
    assert theirs.filter(pl.col("seniority").is_not_null()).height > 100  # the second tier, quoted spreads
    assert ours.height == theirs.height
    for col in ours.columns:
        a, b = ours.get_column(col), theirs.get_column(col)
        if a.dtype == pl.Float64:
            # Bit for bit: the same IEEE doubles (NaN and null where the tool has them).
            same = (a.is_null() & b.is_null()) | (a.cast(pl.Float64).reinterpret(signed=True) == b.reinterpret(signed=True))
        else:
            same = (a.is_null() & b.is_null()) | (a == b)
        bad = (~same.fill_null(False)).sum()
        assert bad == 0, f"{col}: {bad} of {ours.height} values differ from the tool's hazard_curves"
    print(f"{n_curves} curves, {ours.height} nodes equal bit for bit")


def _bits(x: float) -> int:
    import struct

    return struct.unpack("<q", struct.pack("<d", x))[0]


def test_bucket_statistics_reproduce_the_tools_table(demo_run):
    """Every bucket without censored or incomplete members: the three intervals, the binomial,
    Jeffreys and correlated-default tests from (defaults, n, implied PD, rho) equal the tool's
    backtest_buckets bit for bit."""
    rows = (
        hl.read_run(demo_run)["backtest_buckets"]
        .filter((pl.col("n_censored") == 0) & (pl.col("n_incomplete") == 0) & pl.col("implied_pd").is_not_null())
        .collect()
        .to_dicts()
    )
    assert len(rows) > 50, len(rows)
    for r in rows:
        d, n, level = r["defaults"], r["n"], r["level"]
        got = {
            "cp_lo": hl.clopper_pearson(d, n, level)[0],
            "cp_hi": hl.clopper_pearson(d, n, level)[1],
            "jeffreys_lo": hl.jeffreys_interval(d, n, level)[0],
            "jeffreys_hi": hl.jeffreys_interval(d, n, level)[1],
            "wilson_lo": hl.wilson_interval(d, n, level)[0],
            "wilson_hi": hl.wilson_interval(d, n, level)[1],
            "p_binom_upper": hl.binomial_upper_tail(d, n, r["implied_pd"]),
            "p_binom_lower": hl.binomial_lower_tail(d, n, r["implied_pd"]),
            "p_jeffreys": hl.jeffreys_p_value(d, n, r["implied_pd"]),
            "p_vasicek_upper": hl.vasicek_upper_tail(d, n, r["implied_pd"], r["rho"]),
            "p_vasicek_lower": hl.vasicek_lower_tail(d, n, r["implied_pd"], r["rho"]),
        }
        for col, value in got.items():
            assert _bits(value) == _bits(r[col]), (r["cohort"], r["horizon"], r["bucket"], col, value, r[col])


def test_read_run_reads_every_table(demo_run, tmp_path):
    run = hl.read_run(demo_run)
    files = sorted(p.stem for p in (demo_run / "tables").glob("*.parquet"))
    assert sorted(run.tables) == files
    for name in files:
        assert run[name].collect_schema().names() == pq.read_schema(demo_run / "tables" / f"{name}.parquet").names
    # A table split by year (large runs) is one frame over its files.
    split = tmp_path / "run"
    (split / "tables" / "hazard_curves").mkdir(parents=True)
    (split / "manifest.json").write_text('{"name": "split"}')
    hc = run["hazard_curves"].collect()
    for year in (2015, 2016):
        hc.filter(pl.col("date").dt.year() == year).write_parquet(split / "tables" / "hazard_curves" / f"cds_{year}.parquet")
    both = hl.read_run(split)["hazard_curves"].collect()
    assert both.height == hc.filter(pl.col("date").dt.year() <= 2016).height > 0
    try:
        hl.read_run(tmp_path / "nowhere")
    except FileNotFoundError as e:
        assert "not a run folder" in str(e)
    else:
        raise AssertionError("a folder without a manifest was read")
