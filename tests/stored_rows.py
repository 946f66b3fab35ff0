"""Stored search rows of a review window, for tests that recount the stages' figures in pandas."""

from __future__ import annotations

import duckdb
import pandas as pd


def window_searches(conn: duckdb.DuckDBPyConnection, review_id: str, columns: str) -> pd.DataFrame:
    """``columns`` (SQL over ``s`` = searches) of every search in the review's window, and
    ``bot``: whether the session stage marked it a bot's."""
    start, end = conn.execute(
        "SELECT window_start, window_end FROM reviews WHERE review_id = ?", [review_id]
    ).fetchall()[0]
    return conn.execute(
        f"SELECT {columns}, coalesce(b.is_bot, false) AS bot FROM searches s "
        "LEFT JOIN search_sessions b ON b.file_id = s.file_id AND b.line = s.line "
        "WHERE s.searched_at >= ? AND s.searched_at < ?",
        [start, end],
    ).df()
