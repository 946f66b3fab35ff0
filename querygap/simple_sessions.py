"""A stand-in session stage: 30-minute sessions per visitor, for the demo and tests.

Until the session stage fills ``search_sessions``, searches of one user (or session key) with
gaps under 30 minutes form a session (Catledge & Pitkow, 1995), and a long session of very fast
searches is marked as a bot. See sql/propose.sql ``sessions_fill_simple``.
"""

from __future__ import annotations

import duckdb

from querygap.sessions import STEP_GAP_SECONDS
from querygap.workspace import run, transaction


def fill_simple_sessions(
    conn: duckdb.DuckDBPyConnection,
    gap_minutes: float = 30.0,
    bot_searches: int = 30,
    bot_seconds: float = 5.0,
) -> bool:
    """Fill search_sessions (and their steps, search_steps) with 30-minute sessions per user
    when nothing else has filled them.

    Returns whether it filled the table. See sql/propose.sql ``sessions_fill_simple``.
    """
    if run(conn, "sessions_count").fetchall()[0][0]:
        return False
    with transaction(conn):
        run(
            conn,
            "sessions_fill_simple",
            {"gap_minutes": gap_minutes, "bot_searches": bot_searches, "bot_seconds": bot_seconds},
        )
        run(conn, "steps_fill_simple", {"max_gap_us": STEP_GAP_SECONDS * 1_000_000})
    return True
