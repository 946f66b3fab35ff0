"""Columns of strings handled by Arrow, not one Python string at a time.

pandas' ``Series.isin`` on Arrow-backed strings first turns every member into a Python string,
one at a time: 0.6 s for 300k members. :func:`in_set` hands both sides to ``pyarrow.compute``,
and :func:`strings_at` repeats strings by Arrow's ``take``.
"""

from __future__ import annotations

from collections.abc import Iterable

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc


def in_set(column: pd.Series, members: pd.Series | pd.Index | Iterable[str | None]) -> np.ndarray:
    """Whether each value of ``column`` is one of ``members`` (bool array, as ``column.isin``).

    A missing value is a member when ``members`` holds a missing value too.
    """
    values = pa.array(column, from_pandas=True)
    if not isinstance(members, pd.Series | pd.Index):
        members = pd.Series(list(members), dtype=object)
    wanted = pa.array(members, from_pandas=True)
    if pa.types.is_null(values.type):
        values = values.cast(pa.string())
    if wanted.type != values.type:  # an empty or all-missing side is typed null
        wanted = wanted.cast(values.type)
    return np.asarray(pc.is_in(values, value_set=wanted).fill_null(False), dtype=bool)


def strings_at(values: pa.Array, positions: np.ndarray) -> pd.Series:
    """``values[positions]`` as a Series of pandas' Arrow-backed strings, taken by Arrow.

    The same Series as building it from ``values.to_numpy(object)[positions]``, which turns
    every string into a Python object and back: 1.3 s for 5M strings against 0.3 s.
    """
    taken = values.take(pa.array(np.asarray(positions, dtype=np.int64)))
    return pd.Series(pd.array(taken, dtype=pd.StringDtype("pyarrow", na_value=np.nan)))
