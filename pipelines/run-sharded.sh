#!/bin/sh
# Runs a pipeline as N entity shards, each over one or more date ranges, and merges them: the
# worked example of DEVELOPERS.md ("Sharded runs"). Here the batch engine is xargs, running
# JOBS parts at a time on this machine; an array job or a dataflow task runs the same two
# commands elsewhere.
#
#   [DATES="RANGE ..."] pipelines/run-sharded.sh PIPELINE.toml N [JOBS] [-- extra run options]
#
# DATES: curve-date ranges FROM..TO that together cover every date once (default `..`, the
# whole history), e.g. DATES="..2016-12-31 2017-01-01..".
#
# Examples (the bundled demo into /tmp/sharded; 4 shards, 2 at a time; then 2 shards x 2
# date ranges):
#   pipelines/run-sharded.sh pipelines/demo.toml 4 2 -- --out /tmp/sharded
#   DATES="..2017-06-30 2017-07-01.." pipelines/run-sharded.sh pipelines/demo.toml 2 2 -- --out /tmp/sharded
set -eu
pipeline=$1
n=$2
shift 2
jobs=1
if [ $# -gt 0 ] && [ "$1" != "--" ]; then
    jobs=$1
    shift
fi
if [ "${1:-}" = "--" ]; then
    shift
fi
HAZARDLINE_BIN=${HAZARDLINE:-hazardline}
HAZARDLINE_PIPELINE=$pipeline
export HAZARDLINE_BIN HAZARDLINE_PIPELINE
# One process per (shard, date range), each writing
# <root>/<name>/<label>.shards/part-I-of-N[-from-FROM-to-TO]/.
for i in $(seq 1 "$n"); do
    for r in ${DATES:-..}; do
        echo "$i/$n@$r"
    done
done | xargs -P "$jobs" -I{} sh -c 'p=$1; shift; exec "$HAZARDLINE_BIN" run "$HAZARDLINE_PIPELINE" --shard "${p%@*}" --dates "${p#*@}" "$@"' sh {} "$@"
# Pools the parts into the run folder, the same files a single run writes.
"$HAZARDLINE_BIN" merge "$pipeline" "$@"
