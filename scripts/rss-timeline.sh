#!/bin/sh
# Resident memory of a command over time, sampled once a second from /proc (Linux).
#
#     sh scripts/rss-timeline.sh OUT COMMAND [ARGS...]
#
# Runs COMMAND with its output in OUT.stdout and writes OUT.rss, one line per second and
# process (the command and its direct children): seconds since the start, pid, resident MiB.
# The largest line is the peak as sampled (a spike shorter than a second can be missed; the
# run's own `peak RSS` figure, from VmHWM, catches every spike but says nothing of when).
set -eu
out=$1
shift
"$@" >"$out.stdout" 2>&1 &
pid=$!
t0=$(date +%s)
while kill -0 "$pid" 2>/dev/null; do
    for p in $(pgrep -P "$pid") "$pid"; do
        r=$(awk '/VmRSS/{print $2}' "/proc/$p/status" 2>/dev/null || true)
        [ -n "$r" ] && echo "$(($(date +%s) - t0)) $p $((r / 1024))"
    done
    sleep 1
done >"$out.rss"
wait "$pid"
