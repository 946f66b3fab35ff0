"""The shared id lookup against pandas."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from querygap.lookup import positions


@pytest.mark.parametrize(
    ("ids", "wanted"),
    [
        (np.array([10, 3, 7, 0]), np.array([3, 3, 9, 0, 10, 12, 7])),  # lookup table
        (np.array([5, 10**12]), np.array([10**12, 4, 5])),  # too sparse: hash index
        (np.array([-2, 4]), np.array([4, -2, 0])),  # negative ids: hash index
        (np.array(["a", "b"], dtype=object), np.array(["b", "c"], dtype=object)),
        (np.array([1, 2]), np.array([], dtype=np.int64)),
    ],
)
def test_positions_equal_pandas_get_indexer(ids: np.ndarray, wanted: np.ndarray) -> None:
    # Reference: pandas' Index.get_indexer (position among distinct ids, -1 when absent).
    want = pd.Index(ids).get_indexer(wanted)
    np.testing.assert_array_equal(positions(ids, wanted), want)
