"""A run folder of the command-line tool as polars LazyFrames."""

from __future__ import annotations

import json
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Dict, Iterator, Union


@dataclass
class Run:
    """What ``read_run`` returns: the folder, its manifest, and a LazyFrame per table."""

    path: Path
    manifest: Dict[str, Any]
    tables: Dict[str, Any] = field(default_factory=dict)

    def __getitem__(self, name: str):
        try:
            return self.tables[name]
        except KeyError:
            raise KeyError(f"{self.path}: no table {name!r} (tables: {', '.join(sorted(self.tables))})") from None

    def __contains__(self, name: str) -> bool:
        return name in self.tables

    def __iter__(self) -> Iterator[str]:
        return iter(sorted(self.tables))


def read_run(path: Union[str, Path]) -> Run:
    """Every table of a run folder (``<output root>/<name>/<label>/``) as a polars LazyFrame,
    keyed by table name: ``tables/<name>.parquet``, or a folder ``tables/<name>/`` of files by
    year for large runs (scanned as one frame); and ``manifest.json`` as a dict.

    >>> import tempfile, pathlib
    >>> d = pathlib.Path(tempfile.mkdtemp())
    >>> (d / "manifest.json").write_text('{"name": "demo"}') and None
    >>> read_run(d).manifest["name"]
    'demo'
    """
    import polars as pl

    root = Path(path)
    manifest_path = root / "manifest.json"
    if not manifest_path.is_file():
        raise FileNotFoundError(f"{root}: not a run folder (no manifest.json)")
    with open(manifest_path, encoding="utf-8") as f:
        manifest = json.load(f)
    tables: Dict[str, Any] = {}
    folder = root / "tables"
    if folder.is_dir():
        for entry in sorted(folder.iterdir()):
            if entry.is_file() and entry.suffix == ".parquet":
                tables[entry.stem] = pl.scan_parquet(entry)
            elif entry.is_dir():
                files = sorted(entry.rglob("*.parquet"))
                if files:
                    tables[entry.name] = pl.scan_parquet(files)
    return Run(path=root, manifest=manifest, tables=tables)
