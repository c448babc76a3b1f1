#!/usr/bin/env sh
# The Python package's tests: a fresh virtual environment, `pip install` of the package from this
# repository (maturin builds the extension from crates/hazardline-py), then pytest (the tests in
# crates/hazardline-py/tests, which run the demo pipeline with the command-line tool and compare
# tables bit for bit, and every docstring example), and mypy over the package and its stubs.
#
#   sh scripts/test-python.sh [VENV_DIR]
#
# VENV_DIR defaults to a new temporary folder (removed at the end). The command-line tool is
# HAZARDLINE_BIN, or the debug build under CARGO_TARGET_DIR (or target/), built here if missing.
set -eu
cd "$(dirname "$0")/.."
PYTHON="${PYTHON:-python3}"
TARGET="${CARGO_TARGET_DIR:-$PWD/target}"
if [ -z "${HAZARDLINE_BIN:-}" ]; then
    HAZARDLINE_BIN="$TARGET/debug/hazardline"
    [ -x "$HAZARDLINE_BIN" ] || cargo build --locked --bin hazardline
fi
export HAZARDLINE_BIN
if [ $# -ge 1 ]; then
    VENV="$1"
    CLEANUP=""
else
    VENV="$(mktemp -d)/venv"
    CLEANUP="$(dirname "$VENV")"
fi
"$PYTHON" -m venv "$VENV"
PIP="$VENV/bin/python -m pip --disable-pip-version-check --quiet"
# The test tools; the package's own dependencies (numpy, pyarrow, polars) come with it.
$PIP install pytest matplotlib mypy
started=$(date +%s)
$PIP install ./crates/hazardline-py
echo "pip install of the package: $(( $(date +%s) - started )) s"
"$VENV/bin/python" -c "import hazardline, sys; print('hazardline', hazardline.__version__, 'on Python', sys.version.split()[0])"
# Outside the source tree, so that the installed package (not python/) is what runs.
cd crates/hazardline-py/tests
"$VENV/bin/python" -m pytest -q -p no:cacheprovider .
"$VENV/bin/python" -m pytest -q -p no:cacheprovider --doctest-modules --pyargs hazardline
cd ../python
"$VENV/bin/python" -m mypy --no-incremental --cache-dir=/dev/null --ignore-missing-imports hazardline
[ -z "$CLEANUP" ] || rm -rf "$CLEANUP"
