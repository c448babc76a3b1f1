#!/bin/sh
# Runs a pipeline as N entity shards and merges them: the worked example of DEVELOPERS.md
# ("Sharded runs"). Here the batch engine is xargs, running JOBS shards at a time on this
# machine; an array job or a dataflow task runs the same two commands elsewhere.
#
#   pipelines/run-sharded.sh PIPELINE.toml N [JOBS] [-- extra run options, e.g. --out ROOT]
#
# Example (the bundled demo, 4 shards, 2 at a time, into /tmp/sharded):
#   pipelines/run-sharded.sh pipelines/demo.toml 4 2 -- --out /tmp/sharded
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
bin=${HAZARDLINE:-hazardline}
# One process per shard; each writes <root>/<name>/<label>.shards/part-I-of-N/.
seq 1 "$n" | xargs -P "$jobs" -I{} "$bin" run "$pipeline" --shard "{}/$n" "$@"
# Pools the parts into the run folder, the same files a single run writes.
"$bin" merge "$pipeline" "$@"
