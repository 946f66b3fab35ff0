"""Session stage: group searches into sessions and mark machine traffic.

Reads ``searches``; writes ``search_sessions`` (one row per search) and ``session_traffic`` (one
row per session). The stage rebuilds both tables on every run, so it is idempotent. DuckDB
numbers the keys and sorts the searches; :mod:`querygap.session_split` splits them into sessions
and computes the rate figures in one compiled pass; DuckDB names the sessions and stores them.

Sessions
    A search with a session key belongs to that key's session. Otherwise the searches of one user
    key, in time order, open a new session after more than ``gap_minutes`` of inactivity (a gap of
    exactly ``gap_minutes`` stays in the session). A search with neither key is a session alone.
    The default of 30 minutes is the de facto standard, traced to Catledge & Pitkow (1995); shorter
    cut-offs in the literature are 5 minutes (Silverstein et al., SIGIR Forum 1999) and 10-15
    minutes (He & Goeker, 2000).

Bots
    Following the idea of Duskin & Feitelson (WSCD 2009), each criterion has two thresholds: a
    "surely human" limit and a "surely bot" limit, with an ambiguous zone between them. A session
    beyond any bot limit is a bot (its searches stay in ``searches`` but are left out of review
    rates); a session beyond a human limit only is a suspect (counted, and reported). Criteria:

    - searches within any 60 s span (``peak_per_minute``),
    - searches within any 3600 s span (``peak_per_hour``),
    - the median gap in seconds between consecutive searches, for sessions of at least
      ``min_searches`` searches (a few quick retypes are human; a long run of them is not).

    The threshold values are our own, reasoned from how long a person needs to read a result list
    and type the next query (common practice, no source): see :class:`SessionSettings`.
"""

from __future__ import annotations

from dataclasses import dataclass

import duckdb
import numpy as np
import pandas as pd
import pyarrow as pa

from querygap.errors import ConfigError
from querygap.session_split import actor_numbers, in_file_order, rows_of, split_sessions
from querygap.windows import Window
from querygap.workspace import frame, run, transaction

VERDICTS = ("bot", "suspect", "human")
# Steps (consecutive searches of different queries) are kept when at most this far apart: twice
# the proposal stage's reformulation window (ProposalSettings.max_gap_seconds, 5 minutes), and
# far fewer than all steps (at the benchmark's size M, 74k of 18.6M).
STEP_GAP_SECONDS = 600


@dataclass(frozen=True)
class SessionSettings:
    """Session cut-off and bot thresholds.

    Parameters
    ----------
    gap_minutes : float, default=30
        Inactivity that opens a new session of a user key (Catledge & Pitkow, 1995).
    human_per_minute, bot_per_minute : int, default=6, 20
        Searches within 60 s. Six is one every 10 s, already quick for reading results and typing
        again; twenty is one every 3 s, faster than a person types a short query (common practice,
        no source).
    human_per_hour, bot_per_hour : int, default=60, 150
        Searches within 3600 s: a person refining hard for an hour rarely passes one a minute;
        150 is one every 24 s for a whole hour (common practice, no source).
    human_median_gap, bot_median_gap : float, default=8.0, 3.0
        Median seconds between searches of a session with at least ``min_searches`` searches.
        Under 3 s is below the time to type a query of a few words (common practice, no source).
    min_searches : int, default=10
        Fewest searches in a session for the median-gap criterion to apply.
    """

    gap_minutes: float = 30.0
    human_per_minute: int = 6
    bot_per_minute: int = 20
    human_per_hour: int = 60
    bot_per_hour: int = 150
    human_median_gap: float = 8.0
    bot_median_gap: float = 3.0
    min_searches: int = 10

    def sql_params(self) -> dict[str, float]:
        return {
            "human_per_minute": self.human_per_minute,
            "bot_per_minute": self.bot_per_minute,
            "human_per_hour": self.human_per_hour,
            "bot_per_hour": self.bot_per_hour,
            "human_median_gap": self.human_median_gap,
            "bot_median_gap": self.bot_median_gap,
            "min_searches": self.min_searches,
        }


def validate_sessions(settings: SessionSettings) -> SessionSettings:
    """Raise ConfigError for a value out of range or a human limit beyond its bot limit."""
    if not 0 < settings.gap_minutes <= 24 * 60:
        raise ConfigError(
            "--session-gap must be more than 0 and at most 1440 minutes; "
            f"got {settings.gap_minutes}"
        )
    pairs = (
        ("human_per_minute", "bot_per_minute", 1),
        ("human_per_hour", "bot_per_hour", 1),
        ("bot_median_gap", "human_median_gap", 0),
    )
    for low_name, high_name, least in pairs:
        low, high = getattr(settings, low_name), getattr(settings, high_name)
        if low < least or high < least:
            raise ConfigError(f"{low_name} and {high_name} must be at least {least}")
        if low > high:
            raise ConfigError(
                f"{low_name} ({low}) must not be above {high_name} ({high}): the ambiguous zone "
                "lies between the two"
            )
    if settings.min_searches < 2:
        raise ConfigError(f"min_searches must be at least 2; got {settings.min_searches}")
    return settings


def build_sessions(
    conn: duckdb.DuckDBPyConnection, settings: SessionSettings | None = None
) -> pd.DataFrame:
    """Rebuild ``search_sessions`` and ``session_traffic``; return sessions per verdict.

    Returns
    -------
    pandas.DataFrame
        Columns verdict, sessions, searches, keys (distinct actor keys).
    """
    settings = validate_sessions(settings or SessionSettings())
    with transaction(conn):
        run(conn, "sessions_clear")
        run(conn, "sessions_clear_traffic")
        run(conn, "sessions_clear_steps")
        order = run(conn, "sessions_order").fetchnumpy()
        payload = run(conn, "sessions_payload").fetchnumpy()
        # Each column is gathered into session order and its stored order dropped at once, so
        # at most one extra column is held (at 20M searches, 160 MB each).
        at = rows_of(np.asarray(payload.pop("r")), np.asarray(order.pop("r")))
        file_id, line, actor_key, query_hash = (
            np.asarray(payload.pop(name))[at]
            for name in ("file_id", "line", "actor_key", "query_hash")
        )
        del payload, at
        kind = np.asarray(order.pop("kind"))
        key = np.asarray(order.pop("key"))
        at_us = np.asarray(order.pop("at_us"))
        del order
        to, source = in_file_order(kind, key, at_us, file_id, line)
        for v in (file_id, line, actor_key, query_hash, kind, key, at_us):
            v[to] = v[source]
        has_key = kind > 0
        is_user = kind == 2
        del kind
        actor = actor_numbers(has_key, is_user, key)
        split = split_sessions(actor, is_user, at_us, round(settings.gap_minutes * 60 * 1_000_000))
        steps = session_steps(
            STEP_GAP_SECONDS * 1_000_000,
            split.row_session,
            query_hash,
            at_us,
            file_id,
            line,
        )
        first = split.first_row
        figures = pa.table(
            {
                "session": np.arange(first.size, dtype=np.int64),
                "has_key": has_key[first],
                "is_user": is_user[first],
                "key": key[first],
                "actor_key": actor_key[first],
                "number": split.number,
                "file_id": file_id[first],
                "line": line[first],
                "searches": split.searches,
                "first_us": split.first_us,
                "last_us": split.last_us,
                "peak_per_minute": split.peak_minute,
                "peak_per_hour": split.peak_hour,
                "median_gap_s": pa.array(split.median_gap_s, from_pandas=True),  # NaN -> NULL
            }
        )
        del at_us, key, actor, actor_key, query_hash
        conn.register("session_figures", figures)
        run(conn, "sessions_name", settings.sql_params())
        conn.unregister("session_figures")
        del figures
        run(conn, "sessions_traffic")
        conn.register("session_steps", steps)
        run(conn, "sessions_steps")
        conn.unregister("session_steps")
        del steps
        per_row = pa.table({"file_id": file_id, "line": line, "session": split.row_session})
        conn.register("session_rows", per_row)
        run(conn, "sessions_assign")
        conn.unregister("session_rows")
        run(conn, "sessions_drop_named")
    return frame(conn, "sessions_summary")


def session_steps(
    max_gap_us: int,
    row_session: np.ndarray,
    query_hash: np.ndarray,
    at_us: np.ndarray,
    file_id: np.ndarray,
    line: np.ndarray,
) -> pa.Table:
    """The steps of searches sorted in session order: each search followed by the next search
    of the same session with another query hash, at most ``max_gap_us`` later (session,
    file_id, line, next_file_id, next_line, searched_us, gap_us; times in microseconds). A
    repeat of the same query in between is skipped: the step then starts at the repeat's last
    search."""
    gap = at_us[1:] - at_us[:-1]
    at = np.flatnonzero(
        (row_session[1:] == row_session[:-1])
        & (query_hash[1:] != query_hash[:-1])
        & (gap <= max_gap_us)
    )
    nxt = at + 1
    return pa.table(
        {
            "session": row_session[at],
            "file_id": file_id[at],
            "line": line[at],
            "next_file_id": file_id[nxt],
            "next_line": line[nxt],
            "searched_us": at_us[at],
            "gap_us": gap[at],
        }
    )


def record_review_bots(conn: duckdb.DuckDBPyConnection, window: Window) -> dict[str, int]:
    """Store and return the bot and suspect figures of a review window (table review_bots)."""
    params = {"review_id": window.review_id, "start": window.start, "end": window.end}
    run(conn, "sessions_clear_review_bots", {"review_id": window.review_id})
    run(conn, "sessions_review_bots", params)
    row = run(conn, "sessions_review_bots_row", {"review_id": window.review_id}).fetchall()[0]
    names = ("bot_keys", "bot_searches", "suspect_keys", "suspect_searches")
    return {k: int(v) for k, v in zip(names, row, strict=True)}


def bot_keys(conn: duckdb.DuckDBPyConnection, window: Window) -> pd.DataFrame:
    """The bot actor keys of a window with their searches, most first."""
    return frame(conn, "sessions_review_bot_keys", {"start": window.start, "end": window.end})
