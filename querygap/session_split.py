"""Sessions and their rate figures from searches sorted by actor and time (pure computation).

The session stage hands over one row per search, sorted by (actor, time, file, line), where the
actor is a session key or a user key (numbered from 0; -1 for a search with neither). A new
session starts at

- the first search of each actor, and every search with actor -1 (a session of its own);
- a search of a *user* actor more than ``gap_us`` microseconds after the actor's previous one
  (a gap of exactly ``gap_us`` stays in the session); a session key never splits.

Per session it returns the number of searches, first and last time, the most searches within
any span of ``minute_us`` and of ``hour_us`` (a search counts every search of its session at
or before its time and no more than the span earlier, ties included: SQL's ``RANGE BETWEEN span
PRECEDING AND CURRENT ROW``), and the median gap in seconds between consecutive searches (the
mean of the two middle gaps for an even count; NaN for a session of one search).

One pass over the rows, compiled with numba: linear in the searches, apart from the median's
sort within each session.
"""

from __future__ import annotations

from dataclasses import dataclass

import numba
import numpy as np

from querygap.lookup import positions


@dataclass(frozen=True)
class Sessions:
    """Sessions of sorted searches: ``row_session`` per row, the rest per session."""

    row_session: np.ndarray  # int64, session index of each row
    first_row: np.ndarray  # int64, the session's first row
    number: np.ndarray  # int64, 1, 2, ... within a user actor (1 otherwise)
    searches: np.ndarray  # int64
    first_us: np.ndarray  # int64
    last_us: np.ndarray  # int64
    peak_minute: np.ndarray  # int64
    peak_hour: np.ndarray  # int64
    median_gap_s: np.ndarray  # float64, NaN for a single search


def rows_of(stored: np.ndarray, wanted: np.ndarray) -> np.ndarray:
    """Positions in ``stored`` (distinct rowids, any order) of each rowid in ``wanted``."""
    if stored.size and stored[0] == 0 and stored[-1] == stored.size - 1:
        if (np.diff(stored) == 1).all():  # a table without deletions, scanned in order
            return wanted.astype(np.int64, copy=False)
    return positions(stored, wanted)


def in_file_order(
    kind: np.ndarray, key: np.ndarray, at_us: np.ndarray, file_id: np.ndarray, line: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """Rows to reorder so that rows of equal (kind, key, at_us) come in (file_id, line) order.

    The rows are sorted by (kind, key, at_us) already; rows that tie there (one actor's searches
    at one instant, rare) are reordered among themselves and every other row stays. Returns
    (to, source): for every array ``v`` in that order, ``v[to] = v[source]`` puts it in order
    (both empty when no two rows tie).
    """
    same = (kind[1:] == kind[:-1]) & (key[1:] == key[:-1]) & (at_us[1:] == at_us[:-1])
    after = np.flatnonzero(same)  # row i + 1 ties with row i, for i in after
    if after.size == 0:
        empty = np.empty(0, np.int64)
        return empty, empty
    to = np.union1d(after, after + 1)
    # a run of tied rows starts at a row that does not tie with the row before it
    opens = np.ones(to.size, np.bool_)
    inner = to[1:] > 0
    opens[1:][inner] = ~same[to[1:][inner] - 1]
    run_id = np.cumsum(opens)
    return to, to[np.lexsort((line[to], file_id[to], run_id))]


@numba.njit(cache=True, nogil=True)
def _actor_numbers(has_key: np.ndarray, is_user: np.ndarray, key: np.ndarray) -> np.ndarray:
    actor = np.empty(key.size, np.int64)
    current = -1
    for i in range(key.size):
        if not has_key[i]:
            actor[i] = -1
            continue
        if (
            current < 0
            or not has_key[i - 1]
            or key[i] != key[i - 1]
            or is_user[i] != is_user[i - 1]
        ):
            current += 1
        actor[i] = current
    return actor


def actor_numbers(has_key: np.ndarray, is_user: np.ndarray, key: np.ndarray) -> np.ndarray:
    """Actor numbers for :func:`split_sessions` from rows sorted by (has_key, is_user, key).

    Rows with the same key and kind get one number (0, 1, ... in row order); a row without a
    key gets -1. ``key`` is the 64-bit session or user key (any value where ``has_key`` is
    false). A session key and a user key with equal values are two actors.
    """
    return _actor_numbers(
        np.ascontiguousarray(has_key, np.bool_),
        np.ascontiguousarray(is_user, np.bool_),
        np.ascontiguousarray(key, np.uint64),
    )


@numba.njit(cache=True, nogil=True)
def _boundaries(
    actor: np.ndarray, is_user: np.ndarray, at_us: np.ndarray, gap_us: int
) -> tuple[np.ndarray, np.ndarray]:
    """Session index of each row and the first row of each session (plus an end marker)."""
    n = actor.size
    row_session = np.empty(n, np.int64)
    starts = np.empty(n + 1, np.int64)
    n_s = 0
    for i in range(n):
        new = (
            i == 0
            or actor[i] < 0
            or actor[i] != actor[i - 1]
            or (is_user[i] and at_us[i] - at_us[i - 1] > gap_us)
        )
        if new:
            starts[n_s] = i
            n_s += 1
        row_session[i] = n_s - 1
    starts[n_s] = n
    return row_session, starts[: n_s + 1].copy()


@numba.njit(cache=True, nogil=True)
def _peak(at_us: np.ndarray, lo0: int, hi0: int, span: int) -> int:
    """Most searches of rows ``lo0:hi0`` (sorted by time) within ``span`` before one, peers in."""
    best = 0
    lo = lo0
    hi = lo0
    for i in range(lo0, hi0):
        while at_us[lo] < at_us[i] - span:
            lo += 1
        if hi <= i:
            hi = i + 1
        while hi < hi0 and at_us[hi] <= at_us[i]:
            hi += 1
        if hi - lo > best:
            best = hi - lo
    return best


@numba.njit(cache=True, nogil=True)
def _figures(
    actor: np.ndarray,
    at_us: np.ndarray,
    starts: np.ndarray,
    minute_us: int,
    hour_us: int,
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Per session: number within actor, searches, peaks per minute and hour, median gap (s)."""
    n_s = starts.size - 1
    number = np.ones(n_s, np.int64)
    searches = np.empty(n_s, np.int64)
    peak_minute = np.empty(n_s, np.int64)
    peak_hour = np.empty(n_s, np.int64)
    median_gap = np.full(n_s, np.nan)
    for s in range(n_s):
        lo = starts[s]
        hi = starts[s + 1]
        if s > 0 and actor[lo] >= 0 and actor[lo] == actor[starts[s - 1]]:
            number[s] = number[s - 1] + 1
        searches[s] = hi - lo
        peak_minute[s] = _peak(at_us, lo, hi, minute_us)
        peak_hour[s] = _peak(at_us, lo, hi, hour_us)
        if hi - lo > 1:
            gaps = np.sort(at_us[lo + 1 : hi] - at_us[lo : hi - 1])
            m = gaps.size
            if m % 2:
                median_gap[s] = gaps[m // 2] / 1e6
            else:
                median_gap[s] = (gaps[m // 2 - 1] + gaps[m // 2]) / 2e6
    return number, searches, peak_minute, peak_hour, median_gap, starts[:-1].copy()


def split_sessions(
    actor: np.ndarray,
    is_user: np.ndarray,
    at_us: np.ndarray,
    gap_us: int,
    minute_us: int = 60_000_000,
    hour_us: int = 3_600_000_000,
) -> Sessions:
    """Sessions of searches sorted by (actor, time, file, line); see the module docstring.

    Parameters
    ----------
    actor : int64 array
        Actor number per search, -1 for a search with neither key.
    is_user : bool array
        True where the actor is a user key (its sessions split at gaps), False for a session key.
    at_us : int64 array
        Search time, microseconds since the epoch.
    gap_us : int
        Inactivity, in microseconds, after which a user's next search opens a new session.
    """
    actor = np.ascontiguousarray(actor, np.int64)
    at_us = np.ascontiguousarray(at_us, np.int64)
    is_user = np.ascontiguousarray(is_user, np.bool_)
    if actor.size == 0:
        empty = np.empty(0, np.int64)
        return Sessions(empty, empty, empty, empty, empty, empty, empty, empty, np.empty(0))
    row_session, starts = _boundaries(actor, is_user, at_us, int(gap_us))
    number, searches, peak_minute, peak_hour, median_gap, first_row = _figures(
        actor, at_us, starts, int(minute_us), int(hour_us)
    )
    return Sessions(
        row_session,
        first_row,
        number,
        searches,
        at_us[first_row],
        at_us[starts[1:] - 1],
        peak_minute,
        peak_hour,
        median_gap,
    )
