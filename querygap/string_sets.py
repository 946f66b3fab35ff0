"""Membership of strings in a set, by Arrow's hash set.

pandas' ``Series.isin`` on Arrow-backed strings first turns every member into a Python string,
one at a time: 0.6 s for 300k members. :func:`in_set` hands both sides to ``pyarrow.compute``.
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
