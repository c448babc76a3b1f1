"""Dates to and from the day numbers (days since 1970-01-01) the Rust core takes."""

from __future__ import annotations

import datetime as _dt
from typing import Any, Iterable, List

import numpy as np

_EPOCH = _dt.date(1970, 1, 1)

DateLike = Any
"""A ``datetime.date`` (or ``datetime``), an ISO string ``YYYY-MM-DD``, a ``numpy.datetime64``
or an int day number."""


def to_day(value: DateLike) -> int:
    """The day number of one date-like value."""
    if isinstance(value, (bool, np.bool_)):
        raise TypeError(f"{value!r} is not a date")
    if isinstance(value, (int, np.integer)):
        return int(value)
    if isinstance(value, _dt.datetime):
        value = value.date()
    if isinstance(value, _dt.date):
        return (value - _EPOCH).days
    if isinstance(value, str):
        try:
            return (_dt.date.fromisoformat(value) - _EPOCH).days
        except ValueError:
            raise ValueError(f"date {value!r} is not an ISO date YYYY-MM-DD") from None
    if isinstance(value, np.datetime64):
        return int(value.astype("datetime64[D]").astype(np.int64))
    if hasattr(value, "date") and callable(value.date):  # pandas Timestamp and the like
        return to_day(value.date())
    raise TypeError(f"{value!r} is not a date (a datetime.date, an ISO string, a numpy datetime64 or a day number)")


def to_days(values: Iterable[DateLike]) -> List[int]:
    """Day numbers of a column of dates: a sequence, a numpy array, an Arrow or polars column."""
    if hasattr(values, "to_numpy") and not isinstance(values, np.ndarray):
        column: Any = values
        try:
            values = column.to_numpy(zero_copy_only=False)  # pyarrow
        except TypeError:
            values = column.to_numpy()  # polars, pandas
    if isinstance(values, np.ndarray):
        if np.issubdtype(values.dtype, np.datetime64):
            if np.isnat(values).any():
                raise ValueError("a date column holds a missing date")
            return values.astype("datetime64[D]").astype(np.int64).tolist()
        if np.issubdtype(values.dtype, np.integer):
            return values.astype(np.int64).tolist()
        values = values.tolist()
    return [to_day(v) for v in values]


def from_day(day: int) -> _dt.date:
    """The ``datetime.date`` of a day number."""
    return _EPOCH + _dt.timedelta(days=int(day))
