"""joined_runs against pandas' groupby(...).agg(sep.join), the reference."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from querygap.group_text import BOUNDARY, joined_runs


def _reference(keys: np.ndarray, texts: list[str], sep: str) -> pd.Series:
    # Reference: pandas groupby (sort=False keeps the runs' order; keys here are sorted).
    return pd.Series(texts, dtype=object).groupby(keys, sort=False).agg(sep.join)


@pytest.mark.parametrize("sep", [" ", ", ", ""])
def test_runs_match_pandas_groupby_join(sep: str) -> None:
    rng = np.random.default_rng(3)
    keys = np.sort(rng.integers(0, 400, 3000))
    alphabet = list("abcxyzé 日") + [""]
    texts = ["".join(rng.choice(alphabet, rng.integers(0, 6))) for _ in range(keys.size)]
    got = joined_runs(keys, np.array(texts, dtype=object), sep)
    want = _reference(keys, texts, sep)
    assert got.index.tolist() == want.index.tolist()
    assert got.tolist() == want.tolist()


def test_a_text_holding_the_boundary_is_joined_group_by_group() -> None:
    keys = np.array([1, 1, 2, 5, 5, 5])
    texts = ["a", f"b{BOUNDARY}c", "d", "", "e", "f"]
    got = joined_runs(keys, np.array(texts, dtype=object))
    assert got.to_dict() == _reference(keys, texts, " ").to_dict()
    assert got[1] == f"a b{BOUNDARY}c"


def test_unsorted_keys_give_one_entry_per_run_and_nothing_gives_nothing() -> None:
    got = joined_runs(np.array(["x", "x", "y", "x"]), np.array(["1", "2", "3", "4"]))
    assert got.index.tolist() == ["x", "y", "x"] and got.tolist() == ["1 2", "3", "4"]
    assert joined_runs(np.array([], dtype=np.int64), np.array([], dtype=object)).empty
