"""in_set against pandas' own Series.isin (the reference), on Arrow and object strings."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from querygap.string_sets import in_set


def words(rng: np.random.Generator, n: int) -> list[str | None]:
    pool = ["meter", "bill", "leak", "tariff", "", "Meter", "meter ", "é", None]
    return [pool[i] for i in rng.integers(0, len(pool), n)]


@pytest.mark.parametrize("dtype", ["str", object])
@pytest.mark.parametrize("shape", ["series", "index", "set", "list", "empty"])
def test_in_set_agrees_with_pandas_isin(dtype: object, shape: str) -> None:
    rng = np.random.default_rng(41)
    for _ in range(20):
        column = pd.Series(words(rng, 200), dtype=dtype)
        pool = words(rng, int(rng.integers(0, 6)))
        members = {
            "series": pd.Series(pool, dtype=dtype),
            "index": pd.Index(pd.Series(pool, dtype=dtype)),
            "set": set(pool),
            "list": pool,
            "empty": [],
        }[shape]
        # Reference: pandas' Series.isin on the same values.
        np.testing.assert_array_equal(in_set(column, members), column.isin(members).to_numpy())


def test_in_set_on_an_empty_or_all_missing_column() -> None:
    assert in_set(pd.Series([], dtype="str"), ["a"]).shape == (0,)
    missing = pd.Series([None, None], dtype=object)
    np.testing.assert_array_equal(in_set(missing, ["a"]), [False, False])
    np.testing.assert_array_equal(in_set(missing, [None]), missing.isin([None]).to_numpy())


def test_strings_taken_by_arrow_equal_pandas_own_build() -> None:
    # Reference: pandas building the column from a numpy array of Python strings.
    import pyarrow as pa

    from querygap.string_sets import strings_at

    values = np.array(["water meter", "bill", "é 日本", "", "x"], dtype=object)
    arrow = pa.array(values, type=pa.large_string())
    for positions in (np.array([4, 0, 0, 2, 3, 1]), np.array([], dtype=np.int64)):
        want = pd.DataFrame({"q": values[positions]})["q"]
        got = strings_at(arrow, positions)
        assert got.tolist() == want.tolist()
        if len(positions):
            pd.testing.assert_series_equal(got, want, check_names=False)
