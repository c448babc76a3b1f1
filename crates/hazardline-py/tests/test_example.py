"""The example script on the demo run: it runs, its recomputed figures agree with the tool's
tables, and it writes a PNG of the hazard curve."""

from __future__ import annotations

import re
import subprocess
import sys

from conftest import needs


def test_walkthrough_on_the_demo_run(demo_run, repo, tmp_path):
    needs("matplotlib")
    png = tmp_path / "curve.png"
    out = subprocess.run(
        [sys.executable, str(repo / "crates" / "hazardline-py" / "examples" / "demo_walkthrough.py"), str(demo_run), "--png", str(png)],
        check=True,
        capture_output=True,
        text=True,
    ).stdout
    assert "same as backtest_buckets: True" in out, out
    m = re.search(r"market par spreads ([0-9.e+-]+) bp, from the tool's repriced values ([0-9.e+-]+) bp", out)
    assert m, out
    assert float(m.group(1)) < 1e-9 and float(m.group(2)) < 1e-9, out
    data = png.read_bytes()
    assert data[:8] == b"\x89PNG\r\n\x1a\n" and len(data) > 10_000, len(data)
