#!/usr/bin/env python3
"""Reference counts for the one-year grade migration matrices (cohort method).

Why this exists: hazardline's `backtest::migration_rows` counts, at each cohort date t, every
entity with a grade in force at t (not in default on or before t, in coverage at t) in its grade,
and a year later (t + 12 calendar months) in `default` (a default in (t, t + 1Y] on or before the
end of its coverage), `left coverage` (coverage ended before t + 1Y without such a default) or
the grade in force at t + 1Y; a cohort whose year ends after the outcome end is left out. This
script applies the same rule independently with pandas (pandas.merge_asof for the grade in force
at a date, vectorised conditions for the destination) and counts the cells with pandas.crosstab,
per cohort year and pooled. It writes `tests/reference/migration_pandas.json`: the invented
universe (entities with grade spells, default dates and coverage ends, drawn with
numpy.random.default_rng(2026)), the cohort dates, the outcome end, and the counts; the Rust test
tests/all/backtest_reference.rs feeds the same universe to `migration_rows` and compares every
cell exactly.

Run: tests/reference/.venv/bin/python tests/reference/migration_pandas.py
"""
import json
import os
import platform

import numpy
import pandas

OUT_PATH = os.path.join(os.path.dirname(os.path.abspath(__file__)), "migration_pandas.json")


def universe():
    rng = numpy.random.default_rng(2026)
    start = pandas.Timestamp("2014-01-01")
    entities, spells = [], []
    for i in range(400):
        name = f"Synthco {i:03d}"
        grade = int(rng.integers(1, 8))
        day = start - pandas.Timedelta(days=int(rng.integers(0, 400)))
        n_spells = int(rng.integers(1, 6))
        for _ in range(n_spells):
            spells.append({"entity": name, "from_date": day, "grade": grade})
            day = day + pandas.Timedelta(days=int(rng.integers(60, 900)))
            grade = int(min(7, max(1, grade + rng.choice([-1, 1, 1, 2]))))
        default = None
        if rng.uniform() < 0.15:
            default = start + pandas.Timedelta(days=int(rng.integers(1, 6 * 365)))
        coverage_end = None
        if rng.uniform() < 0.12:
            coverage_end = start + pandas.Timedelta(days=int(rng.integers(1, 6 * 365)))
        entities.append({"entity": name, "default_date": default, "coverage_end": coverage_end})
    return pandas.DataFrame(entities), pandas.DataFrame(spells)


def grade_at(spells, frame, date_col):
    """The grade in force at frame[date_col] per entity: the spell with the latest from_date <= it."""
    left = frame.sort_values(date_col)
    right = spells.sort_values("from_date")
    out = pandas.merge_asof(left, right, left_on=date_col, right_on="from_date", by="entity",
                            direction="backward")
    return out.set_index(["entity", "cohort"])["grade"]


def main():
    entities, spells = universe()
    cohorts = [pandas.Timestamp(d) for d in ("2014-01-02", "2015-01-02", "2016-01-04", "2017-01-02",
                                               "2018-01-02", "2019-01-02")]
    outcome_end = pandas.Timestamp("2019-06-30")
    rows = []
    for t in cohorts:
        year_end = t + pandas.DateOffset(months=12)
        if year_end > outcome_end:
            continue
        f = entities.copy()
        f["cohort"] = t
        f["t"] = t
        f["year_end"] = year_end
        g0 = grade_at(spells, f, "t")
        g1 = grade_at(spells, f, "year_end")
        f = f.set_index(["entity", "cohort"])
        f["from_grade"] = g0
        f["grade_later"] = g1
        alive = f["default_date"].isna() | (f["default_date"] > t)
        covered = f["coverage_end"].isna() | (f["coverage_end"] >= t)
        f = f[f["from_grade"].notna() & alive & covered].copy()
        covered_to = f["coverage_end"].where(f["coverage_end"].notna() & (f["coverage_end"] < year_end), year_end)
        defaulted = f["default_date"].notna() & (f["default_date"] > t) & (f["default_date"] <= covered_to)
        left = f["coverage_end"].notna() & (f["coverage_end"] < year_end)
        to = numpy.where(defaulted, "default",
                         numpy.where(left, "left coverage",
                                     "grade " + f["grade_later"].astype(int).astype(str)))
        part = pandas.DataFrame({"cohort": str(t.year), "from_grade": f["from_grade"].astype(int).values, "to": to})
        rows.append(part)
    allrows = pandas.concat(rows, ignore_index=True)
    counts = []
    for cohort, frame in list(allrows.groupby("cohort")) + [("all", allrows)]:
        table = pandas.crosstab(frame["from_grade"], frame["to"])
        for from_grade, line in table.iterrows():
            for to, n in line.items():
                if n > 0:
                    counts.append({"cohort": cohort, "from_grade": int(from_grade), "to": to, "count": int(n)})
    fmt = lambda v: None if v is None or pandas.isna(v) else pandas.Timestamp(v).strftime("%Y-%m-%d")
    doc = {
        "generator": "tests/reference/migration_pandas.py",
        "versions": {"python": platform.python_version(), "numpy": numpy.__version__, "pandas": pandas.__version__},
        "notes": ["counts: pandas.crosstab of (from_grade, to) per cohort year and pooled ('all'); cells with a "
                  "zero count left out. Grades in force from pandas.merge_asof(direction='backward')."],
        "cohort_dates": [fmt(t) for t in cohorts],
        "outcome_end": fmt(outcome_end),
        "entities": [{"entity": e["entity"], "default_date": fmt(e["default_date"]),
                      "coverage_end": fmt(e["coverage_end"])} for e in entities.to_dict("records")],
        "spells": [{"entity": s["entity"], "from_date": fmt(s["from_date"]), "grade": int(s["grade"])}
                   for s in spells.to_dict("records")],
        "counts": counts,
    }
    with open(OUT_PATH, "w") as fh:
        json.dump(doc, fh, indent=1, sort_keys=True)
        fh.write("\n")
    print(f"wrote {OUT_PATH}: {len(doc['entities'])} entities, {len(counts)} cells, "
          f"{sum(c['count'] for c in counts if c['cohort'] == 'all')} pooled transitions")


if __name__ == "__main__":
    main()
