"""The README's Python example runs as written, and its 5Y contract reprices the 5Y quote."""

from __future__ import annotations

import re


def test_readme_example(repo, monkeypatch):
    text = (repo / "README.md").read_text()
    blocks = re.findall(r"```python\n(.*?)```", text, re.S)
    assert len(blocks) == 1
    monkeypatch.chdir(repo)
    scope: dict = {}
    exec(compile(blocks[0], "README.md", "exec"), scope)
    assert scope["curves"]["status"].to_list() == ["ok", "ok", "ok"]
    assert abs(scope["legs"].par_spread * 1e4 - 110.0) < 1e-9
    assert "backtest_buckets" in scope["run"]
