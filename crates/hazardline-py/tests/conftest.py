"""Shared fixtures of the Python package's tests.

The reference values are the committed outputs of the scripts in tests/reference/ at the
repository root (QuantLib, scipy, statsmodels and scikit-learn from PyPI); the demo run is made
by the command-line tool itself (HAZARDLINE_BIN, or the debug build under CARGO_TARGET_DIR or
target/), so that the package is compared with the tool's own tables.
"""

from __future__ import annotations

import json
import os
import shutil
import subprocess
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parents[3]
REFERENCE = REPO / "tests" / "reference"


def reference(name: str):
    with open(REFERENCE / name, encoding="utf-8") as f:
        return json.load(f)


def rel_err(got: float, want: float) -> float:
    """As the Rust reference tests measure it: |got - want| / max(|got|, |want|)."""
    if got == want:
        return 0.0
    return abs(got - want) / max(abs(got), abs(want))


def _binary() -> Path | None:
    given = os.environ.get("HAZARDLINE_BIN")
    if given:
        return Path(given)
    targets = [os.environ.get("CARGO_TARGET_DIR"), str(REPO / "target")]
    for t in targets:
        for profile in ("debug", "release"):
            if t and (Path(t) / profile / "hazardline").is_file():
                return Path(t) / profile / "hazardline"
    return None


@pytest.fixture(scope="session")
def demo_run(tmp_path_factory) -> Path:
    """The demo pipeline run by the command-line tool into a temporary folder (about 30 s with a
    debug build); HAZARDLINE_DEMO_RUN names an existing run folder instead."""
    existing = os.environ.get("HAZARDLINE_DEMO_RUN")
    if existing:
        return Path(existing)
    binary = _binary()
    if binary is None or not binary.is_file():
        if os.environ.get("CI"):
            pytest.fail("no hazardline binary: set HAZARDLINE_BIN or build it with cargo build")
        pytest.skip("no hazardline binary (cargo build first, or set HAZARDLINE_BIN)")
    out = tmp_path_factory.mktemp("demo-run")
    subprocess.run(
        [str(binary), "-q", "run", str(REPO / "pipelines" / "demo.toml"), "--out", str(out)],
        check=True,
        cwd=REPO,
    )
    runs = [p.parent for p in out.rglob("manifest.json")]
    assert len(runs) == 1, runs
    return runs[0]


@pytest.fixture(scope="session")
def repo() -> Path:
    return REPO


def have(module: str) -> bool:
    try:
        __import__(module)
        return True
    except ImportError:
        return False


def needs(module: str):
    """A module the test needs: a failure under CI, a skip elsewhere."""
    if have(module):
        return
    if os.environ.get("CI"):
        pytest.fail(f"{module} is not installed")
    pytest.skip(f"{module} is not installed")


__all__ = ["REPO", "REFERENCE", "reference", "rel_err", "needs", "shutil"]
