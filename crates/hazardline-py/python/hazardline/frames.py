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


def arrow_table(table: Any) -> pa.Table:
    """``table`` as a pyarrow Table (a dict of columns: sequences, numpy or Arrow arrays)."""
    if isinstance(table, pa.Table):
        return table
    if type(table).__module__.startswith("polars"):
        if hasattr(table, "collect") and not hasattr(table, "to_arrow"):
            table = table.collect()
        return table.to_arrow()
    if type(table).__module__.startswith("pandas"):
        return pa.Table.from_pandas(table, preserve_index=False)
    if isinstance(table, Mapping):
        cols = {}
        for name, col in table.items():
            if type(col).__module__.startswith("polars"):
                col = col.to_arrow()
            if isinstance(col, np.ndarray) and np.issubdtype(col.dtype, np.datetime64):
                col = col.astype("datetime64[D]")
            cols[name] = col if isinstance(col, (pa.Array, pa.ChunkedArray, np.ndarray)) else list(col)
        try:
            return pa.table(cols)
        except (pa.ArrowInvalid, pa.ArrowTypeError) as e:
            raise ValueError(f"the columns do not make a table: {e}") from None
    raise TypeError(f"{type(table).__name__} is not a table: give a pyarrow Table, a polars or pandas DataFrame, or a dict of columns")


def date_numbers(column: Any, name: str, allow_null: bool = False) -> np.ndarray:
    """Day numbers (int64) of an Arrow column of dates, datetimes, ISO strings or day numbers."""
    from ._dates import to_days

    typ = column.type
    if pa.types.is_timestamp(typ):
        column, typ = column.cast(pa.date32()), pa.date32()
    if column.null_count and not allow_null:
        raise ValueError(f"column {name} holds a missing date")
    if pa.types.is_date32(typ):
        return np.asarray(column.cast(pa.int32()).fill_null(0).to_numpy(zero_copy_only=False), dtype=np.int64)
    if pa.types.is_date64(typ):
        return date_numbers(column.cast(pa.date32()), name, allow_null)
    if pa.types.is_integer(typ):
        return np.asarray(column.fill_null(0).to_numpy(zero_copy_only=False), dtype=np.int64)
    values = column.to_pylist()
    return np.asarray(to_days([v if v is not None else 0 for v in values]), dtype=np.int64)


def numbers(table: pa.Table, name: str) -> np.ndarray:
    """A numeric column as float64 with NaN for a missing value (all NaN when absent)."""
    if name not in table.column_names:
        return np.full(table.num_rows, np.nan)
    col = table.column(name)
    if not (pa.types.is_integer(col.type) or pa.types.is_floating(col.type) or pa.types.is_null(col.type)):
        raise ValueError(f"column {name} is {col.type}, not a number")
    return np.asarray(col.cast(pa.float64()).to_numpy(zero_copy_only=False), dtype=np.float64)


def text_codes(table: pa.Table, name: str, absent: Any):
    """A text column as codes ranked by value (-1 for a missing value) and the sorted values; an
    absent column is ``absent`` everywhere (code -1 when ``absent`` is None)."""
    n = table.num_rows
    if name not in table.column_names:
        if absent is None:
            return np.full(n, -1, dtype=np.int64), []
        return np.zeros(n, dtype=np.int64), [absent]
    col = table.column(name).cast(pa.string())
    encoded = col.combine_chunks().dictionary_encode() if n else pa.array([], pa.string()).dictionary_encode()
    values = encoded.dictionary.to_pylist()
    rank = np.empty(len(values), dtype=np.int64)
    rank[np.argsort(np.asarray(values, dtype=object), kind="stable")] = np.arange(len(values))
    idx = np.asarray(encoded.indices.fill_null(-1).to_numpy(zero_copy_only=False), dtype=np.int64)
    codes = np.where(idx >= 0, rank[np.maximum(idx, 0)] if len(values) else -1, -1)
    return codes, sorted(values)


def finish(table: pa.Table, output: str):
    """``table`` as the caller asked: ``"arrow"`` or ``"polars"``."""
    if output == "arrow":
        return table
    if output == "polars":
        import polars as pl

        return pl.from_arrow(table)
    raise ValueError(f"output {output!r} is not one of 'arrow', 'polars'")
