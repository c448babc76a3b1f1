#!/bin/sh
# Prints the SHA-256 of every file that the demo pipeline writes, as one run and as a run in
# 2 entity shards x 2 curve-date ranges merged, so that a change meant to keep behaviour (a
# refactor, a speed-up) can be shown to keep every output byte for byte.
#
#   scripts/output-digests.sh BINARY WORK_DIR > digests.txt
#   scripts/output-digests.sh BINARY WORK_DIR --check scripts/output-digests.txt
#
# BINARY is a built hazardline (release or debug: the outputs do not depend on the profile);
# WORK_DIR is emptied and used for the runs. run.log is left out (it holds timings). With
# --check the digests are compared with a committed list and the command fails on any
# difference. scripts/output-digests.txt holds the list of the current outputs: regenerate it
# only in a commit that changes outputs on purpose, and say so in that commit. The build's
# source revision, which the manifest and the report print, is replaced by REVISION before
# hashing, so the list does not change with every commit.
set -eu
bin=$1
work=$2
shift 2
here=$(cd "$(dirname "$0")/.." && pwd)
case "$bin" in /*) ;; *) bin=$(pwd)/$bin ;; esac
rm -rf "$work"
mkdir -p "$work/single" "$work/sharded"
cd "$here"
"$bin" run pipelines/demo.toml --out "$work/single" --label digest > "$work/single.out"
HAZARDLINE="$bin" DATES="..2017-06-30 2017-07-01.." sh pipelines/run-sharded.sh pipelines/demo.toml 2 1 -- \
    --out "$work/sharded" --label digest > "$work/sharded.out"
digests() {
    (cd "$work" && find single sharded -type f ! -name run.log ! -name '*.out' -print | LC_ALL=C sort | while read -r f; do
        case "$f" in
        *.md | *.json | *.html)
            d=$(sed -e 's/\(source revision \(<code>\|`\)\)[0-9a-z-]*/\1REVISION/g' \
                -e 's/\("source_revision": "\)[0-9a-z-]*/\1REVISION/g' "$f" | sha256sum | cut -d' ' -f1) ;;
        *) d=$(sha256sum < "$f" | cut -d' ' -f1) ;;
        esac
        printf '%s  %s\n' "$d" "$f"
    done)
}
if [ "${1:-}" = "--check" ]; then
    case "$2" in /*) list=$2 ;; *) list=$here/$2 ;; esac
    digests > "$work/digests.txt"
    if diff -u "$list" "$work/digests.txt"; then
        echo "outputs identical: $(wc -l < "$work/digests.txt") files"
    else
        echo "outputs differ (above: - committed, + this build)" >&2
        exit 1
    fi
else
    digests
fi
