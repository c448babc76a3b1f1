#!/usr/bin/env python3
"""The whole `run` at growing universe sizes against QuantLib's bootstrap, in one run.

For each size ENTITIES x YEARS given, one after the other on this machine: QuantLib's bootstrap
of the 8-tenor reference cases (as scripts/bench-calibrate-quantlib.py times it), then the
pipeline bench (`cargo bench --bench pipeline`, its binary given as BENCH) on the universe the
demo generator writes at that size, then QuantLib again. Prints each size's bench output and its
end-to-end microseconds per curve against the mean of the two QuantLib figures around it.

    tests/reference/.venv/bin/python scripts/bench-pipeline-quantlib.py BENCH 250x10 500x10 ...

BENCH: the pipeline bench executable (`cargo bench --bench pipeline --no-run` prints its path).
The universes are generated once under target/bench-data/ (the bench's own folder).
"""

import os
import re
import subprocess
import sys

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import importlib  # noqa: E402

cq = importlib.import_module("bench-calibrate-quantlib")


def main():
    bench = sys.argv[1]
    sizes = sys.argv[2:] or ["250x10", "500x10", "1000x10", "2000x10"]
    cases = cq.bench_cases()
    ql = cq.quantlib_us_per_curve(cases)
    for size in sizes:
        entities, years = size.split("x")
        env = dict(os.environ, HAZARDLINE_BENCH_ENTITIES=entities, HAZARDLINE_BENCH_YEARS=years)
        out = subprocess.run([bench], env=env, check=True, capture_output=True, text=True).stdout
        print(out, end="", flush=True)
        after = cq.quantlib_us_per_curve(cases)
        curves = int(re.search(r"input rows, (\d+) curves", out).group(1))
        wall = float(re.search(r"total\s+([0-9.]+) s wall", out).group(1))
        us = wall / curves * 1e6
        mean = (ql + after) / 2
        print(f"{size}: {wall:.1f} s wall, {us:.1f} us per curve end to end; QuantLib {mean:.0f} us per curve "
              f"(mean of {ql:.0f} and {after:.0f}): {mean / us:.1f} times faster\n", flush=True)
        ql = after


if __name__ == "__main__":
    main()
