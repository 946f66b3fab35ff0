"""The compiled session split against SQL window functions computed by DuckDB.

Reference: the SQL standard's window frames as DuckDB evaluates them (``lag``, ``count(*) OVER
(... RANGE BETWEEN INTERVAL n SECONDS PRECEDING AND CURRENT ROW)`` and ``median``), a
general-purpose engine independent of querygap's own pass.
"""

from __future__ import annotations

import duckdb
import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from querygap.session_split import actor_numbers, in_file_order, rows_of, split_sessions

GAP_US = 1_800_000_000  # 30 minutes

REFERENCE = """
WITH opened AS (
    SELECT *, CASE WHEN lag(at_us) OVER w IS NULL
                     OR (is_user AND at_us - lag(at_us) OVER w > $gap) THEN 1 ELSE 0 END AS opens
    FROM rows WHERE actor >= 0
    WINDOW w AS (PARTITION BY actor ORDER BY at_us, seq)
), numbered AS (
    SELECT *, sum(opens) OVER (PARTITION BY actor ORDER BY at_us, seq
                               ROWS BETWEEN UNBOUNDED PRECEDING AND CURRENT ROW) AS number
    FROM opened
    UNION ALL
    SELECT *, 1, 1 FROM rows WHERE actor < 0
), framed AS (
    SELECT *, make_timestamp(at_us) AS ts,
           (at_us - lag(at_us) OVER s) / 1e6 AS gap_s
    FROM numbered
    WINDOW s AS (PARTITION BY actor, number, CASE WHEN actor < 0 THEN seq END ORDER BY at_us, seq)
), counted AS (
    SELECT *,
           count(*) OVER (PARTITION BY actor, number, CASE WHEN actor < 0 THEN seq END
                          ORDER BY ts RANGE BETWEEN INTERVAL 60 SECONDS PRECEDING
                          AND CURRENT ROW) AS in_minute,
           count(*) OVER (PARTITION BY actor, number, CASE WHEN actor < 0 THEN seq END
                          ORDER BY ts RANGE BETWEEN INTERVAL 3600 SECONDS PRECEDING
                          AND CURRENT ROW) AS in_hour
    FROM framed
)
SELECT min(seq) AS first_seq, any_value(actor) AS actor, any_value(number) AS number,
       count(*) AS searches, min(at_us) AS first_us, max(at_us) AS last_us,
       max(in_minute) AS peak_minute, max(in_hour) AS peak_hour, median(gap_s) AS median_gap_s
FROM counted GROUP BY actor, number, CASE WHEN actor < 0 THEN seq END
ORDER BY first_seq
"""


def reference(actor: np.ndarray, is_user: np.ndarray, at_us: np.ndarray) -> pd.DataFrame:
    rows = pd.DataFrame(
        {"seq": np.arange(actor.size), "actor": actor, "is_user": is_user, "at_us": at_us}
    )
    con = duckdb.connect()
    con.register("rows", rows)
    return con.execute(REFERENCE.replace("$gap", str(GAP_US))).df()


@st.composite
def searches(draw):
    """Searches of a few actors, sorted by (actor, time) as the stage hands them over."""
    n = draw(st.integers(1, 60))
    actor = np.array(draw(st.lists(st.integers(-1, 4), min_size=n, max_size=n)))
    # Times on a coarse grid so that ties and exact 60 s / 3600 s / 30 min gaps are common.
    steps = draw(st.lists(st.sampled_from([0, 1, 30, 60, 61, 1800, 1801, 3600]), min_size=n))
    at_us = np.cumsum(np.array(steps[:n], dtype=np.int64)) * 1_000_000
    kinds = draw(st.lists(st.booleans(), min_size=5, max_size=5))
    order = np.lexsort((at_us, actor))
    actor, at_us = actor[order], at_us[order]
    is_user = np.array([kinds[a] if a >= 0 else False for a in actor])
    return actor, is_user, at_us


@settings(max_examples=150, deadline=None)
@given(searches())
def test_split_matches_sql_window_frames(data) -> None:
    actor, is_user, at_us = data
    got = split_sessions(actor, is_user, at_us, GAP_US)
    want = reference(actor, is_user, at_us)
    assert got.first_row.tolist() == want["first_seq"].tolist()
    assert got.searches.tolist() == want["searches"].tolist()
    assert got.number.tolist() == want["number"].astype(int).tolist()
    assert got.first_us.tolist() == want["first_us"].tolist()
    assert got.last_us.tolist() == want["last_us"].tolist()
    assert got.peak_minute.tolist() == want["peak_minute"].tolist()
    assert got.peak_hour.tolist() == want["peak_hour"].tolist()
    np.testing.assert_allclose(got.median_gap_s, want["median_gap_s"].to_numpy(float), rtol=1e-12)
    assert (
        got.row_session.tolist() == np.repeat(np.arange(got.searches.size), got.searches).tolist()
    )


def test_a_gap_of_exactly_the_cut_off_stays_in_the_session() -> None:
    actor = np.array([0, 0, 0])
    at_us = np.array([0, GAP_US, 2 * GAP_US + 1])
    got = split_sessions(actor, np.ones(3, bool), at_us, GAP_US)
    assert got.searches.tolist() == [2, 1]
    assert got.number.tolist() == [1, 2]


def test_a_session_key_never_splits_and_keyless_searches_stand_alone() -> None:
    actor = np.array([-1, -1, 0, 0])
    at_us = np.array([0, 0, 0, 10 * GAP_US])
    got = split_sessions(actor, np.array([False, False, False, False]), at_us, GAP_US)
    assert got.searches.tolist() == [1, 1, 2]
    assert np.isnan(got.median_gap_s[:2]).all()
    assert got.median_gap_s[2] == 10 * GAP_US / 1e6


@settings(max_examples=60, deadline=None)
@given(
    st.lists(st.tuples(st.booleans(), st.booleans(), st.integers(0, 3)), min_size=0, max_size=40)
)
def test_actor_numbers_match_pandas_groups(rows: list[tuple[bool, bool, int]]) -> None:
    # Reference: pandas' groupby(...).ngroup() over (kind, key) of the keyed rows, sorted as the
    # session stage sorts them; keyless rows get -1.
    frame = pd.DataFrame(rows, columns=["has_key", "is_user", "key"])
    frame.loc[~frame["has_key"], ["is_user", "key"]] = [False, 0]
    frame = frame.sort_values(["has_key", "is_user", "key"], kind="stable").reset_index(drop=True)
    got = actor_numbers(
        frame["has_key"].to_numpy(),
        frame["is_user"].to_numpy(),
        frame["key"].to_numpy(np.uint64),
    )
    want = np.full(len(frame), -1, np.int64)
    keyed = frame["has_key"].to_numpy()
    if keyed.any():
        want[keyed] = frame[keyed].groupby(["is_user", "key"], sort=True).ngroup().to_numpy()
    assert got.tolist() == want.tolist()


@settings(max_examples=60, deadline=None)
@given(st.lists(st.tuples(st.integers(0, 2), st.integers(0, 2), st.integers(0, 3)), max_size=40))
def test_ties_in_time_end_in_file_and_line_order_as_pandas_sorts(rows) -> None:
    # Reference: pandas' sort_values over (kind, key, time, file, line). The rows arrive sorted by
    # (kind, key, time) and an arbitrary rowid, as sessions_order gives them.
    rng = np.random.default_rng(len(rows))
    frame = pd.DataFrame(rows, columns=["kind", "key", "at_us"])
    frame["file_id"] = rng.integers(1, 3, len(frame))
    frame["line"] = rng.permutation(len(frame)) + 2
    frame["rowid"] = rng.permutation(len(frame))
    given_order = frame.sort_values(["kind", "key", "at_us", "rowid"]).reset_index(drop=True)
    arrays = [
        given_order[c].to_numpy(np.int64) for c in ("kind", "key", "at_us", "file_id", "line")
    ]
    to, source = in_file_order(*arrays)
    perm = np.arange(len(given_order))
    perm[to] = perm[source]
    got = given_order.iloc[perm]
    want = frame.sort_values(["kind", "key", "at_us", "file_id", "line"])
    columns = ["kind", "key", "at_us", "file_id", "line"]
    assert got[columns].to_numpy().tolist() == want[columns].to_numpy().tolist()


@pytest.mark.parametrize("deleted", [False, True])
def test_rows_of_finds_each_rowid_as_a_dict_would(deleted: bool) -> None:
    # Reference: a Python dict from rowid to position.
    rng = np.random.default_rng(7)
    stored = np.arange(50)
    if deleted:  # rowids with gaps, scanned out of order
        stored = rng.permutation(np.delete(stored, [0, 7, 49]))
    wanted = rng.permutation(stored)
    position = {int(r): i for i, r in enumerate(stored)}
    assert rows_of(stored, wanted).tolist() == [position[int(r)] for r in wanted]
