#!/bin/sh
# Does building the discount curves from deposit and swap quotes slow the pipeline down?
# Generates the invented universe of ENTITIES x YEARS (default 2,000 x 10) with the demo
# generator (its EUR curves given as rate quotes, its USD curves as zero rates), runs the whole
# pipeline on it as generated, then again with every curve of that run (its
# tables/discount_curves.parquet: the same pillars, as continuously compounded Act/365F zero
# rates by pillar date) given as the discount table and no rate quotes, and prints the wall
# time, CPU time and peak memory of both runs and the calibration stage of each (from run.log).
#
# Usage: sh scripts/bench-rate-quotes.sh HAZARDLINE_BINARY WORK_DIR [ENTITIES YEARS]
# (the binary of a release build; WORK_DIR is created; pyarrow must be importable by PYTHON,
# default tests/reference/.venv/bin/python).
set -eu
bin=$1
work=$2
entities=${3:-2000}
years=${4:-10}
python=${PYTHON:-tests/reference/.venv/bin/python}
mkdir -p "$work"
data="$work/data-${entities}x${years}"
if [ ! -f "$data/pipeline.toml" ]; then
    "$bin" -q demo "$data" --entities "$entities" --years "$years" --seed 20150101 --start 2015-01-01
fi
timed() {
    # $1: label, $2: pipeline file
    /usr/bin/time -f "$1: wall %e s, user %U s, system %S s, peak %M KiB" \
        "$bin" -q run "$2" --out "$work/out-$1" --label bench >/dev/null
    grep -i "calibrat" "$work/out-$1"/*/bench/run.log | sed "s|^|$1: |"
}
timed rate_quotes "$data/pipeline.toml"
# The same curves as a discount table.
"$python" - "$work/out-rate_quotes" "$data/discount_all.parquet" <<'PY'
import glob, sys
import pyarrow.parquet as pq
src = glob.glob(sys.argv[1] + "/*/bench/tables/discount_curves.parquet")[0]
t = pq.read_table(src, columns=["date", "currency", "pillar_date", "zero_rate"])
pq.write_table(t, sys.argv[2])
PY
sed -e 's|^discount = .*|discount = "discount_all.parquet"|' -e '/^rate_quotes = /d' "$data/pipeline.toml" \
    > "$data/pipeline-discount-table.toml"
timed discount_table "$data/pipeline-discount-table.toml"
