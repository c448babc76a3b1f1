"""Tables in and out: a pyarrow Table, a polars DataFrame, a pandas DataFrame or a dict of
columns (sequences or numpy arrays) in; pyarrow or polars out."""

from __future__ import annotations

from typing import Any, Dict, List, Mapping

import numpy as np
import pyarrow as pa


def columns(table: Any) -> Dict[str, List[Any]]:
    """The columns of ``table`` as Python lists (missing values as None)."""
    if isinstance(table, pa.Table):
        return {name: table.column(name).to_pylist() for name in table.column_names}
    if type(table).__module__.startswith("polars"):
        if hasattr(table, "collect") and not hasattr(table, "to_arrow"):
            table = table.collect()
        return columns(table.to_arrow())
    if type(table).__module__.startswith("pandas"):
        return columns(pa.Table.from_pandas(table, preserve_index=False))
    if isinstance(table, Mapping):
        out = {}
        for name, col in table.items():
            if isinstance(col, np.ndarray):
                if np.issubdtype(col.dtype, np.datetime64):
                    out[name] = list(col.astype("datetime64[D]"))
                else:
                    out[name] = [None if (isinstance(v, float) and np.isnan(v)) else v for v in col.tolist()]
            elif isinstance(col, (pa.Array, pa.ChunkedArray)):
                out[name] = col.to_pylist()
            elif type(col).__module__.startswith("polars"):
                out[name] = col.to_list()
            else:
                out[name] = list(col)
        lengths = {len(v) for v in out.values()}
        if len(lengths) > 1:
            raise ValueError(f"the columns have different lengths: { {k: len(v) for k, v in out.items()} }")
        return out
    raise TypeError(f"{type(table).__name__} is not a table: give a pyarrow Table, a polars or pandas DataFrame, or a dict of columns")


def finish(table: pa.Table, output: str):
    """``table`` as the caller asked: ``"arrow"`` or ``"polars"``."""
    if output == "arrow":
        return table
    if output == "polars":
        import polars as pl

        return pl.from_arrow(table)
    raise ValueError(f"output {output!r} is not one of 'arrow', 'polars'")
