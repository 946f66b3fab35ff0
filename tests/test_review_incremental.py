"""A second week's review reuses the index and scores only the queries it has not scored."""

from __future__ import annotations

from datetime import datetime
from pathlib import Path

import pytest

from querygap.logload import LoadOptions, load_log
from querygap.pageload import ContentOptions, load_content
from querygap.review import run_review
from querygap.settings import ReviewSettings
from querygap.windows import week_of

CONTENT = """id,title,body
meter,Water meter,Replace a broken water meter or read it yourself.
bill,Pay your bill,Pay the water bill online or by phone.
leak,Report a leak,Report a leak in the street or at home.
"""


def log(path: Path, day: str, queries: list[str]) -> Path:
    lines = ["timestamp,query,session"]
    lines += [f"{day} 10:{i:02d}:00,{q},s{i}" for i, q in enumerate(queries)]
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return path


def test_second_week_reuses_index_and_scores_only_new_queries(conn, tmp_path) -> None:
    (tmp_path / "pages.csv").write_text(CONTENT, encoding="utf-8")
    load_content(conn, tmp_path / "pages.csv", ContentOptions(source="site"))
    load_log(
        conn,
        log(tmp_path / "w1.csv", "2025-03-04", ["water meter", "leak", "pay bill"]),
        LoadOptions(),
    )
    load_log(
        conn,
        log(tmp_path / "w2.csv", "2025-03-11", ["leak", "sofa", "water meter", "leak"]),
        LoadOptions(),
    )
    settings = ReviewSettings()
    first = run_review(conn, week_of(datetime(2025, 3, 4)), settings, None)
    second = run_review(conn, week_of(datetime(2025, 3, 11)), settings, None)
    assert (first.index_reused, first.scored_now, first.queries) == (False, 3, 3)
    assert second.index_id == first.index_id
    assert (second.index_reused, second.scored_now, second.queries) == (True, 1, 3)
    rows = conn.execute("SELECT count(*), count(DISTINCT query) FROM query_scores").fetchall()
    assert rows == [(4, 4)]  # "sofa" added; nothing scored twice

    # Changed content: a new index, and every query of the week is scored against it.
    (tmp_path / "pages.csv").write_text(
        CONTENT + "sofa,Sofas,We do not sell sofas.\n", encoding="utf-8"
    )
    load_content(conn, tmp_path / "pages.csv", ContentOptions(source="site"))
    third = run_review(conn, week_of(datetime(2025, 3, 11)), settings, None)
    assert third.index_id != first.index_id
    assert (third.index_reused, third.scored_now) == (False, 3)


KEYS = {  # the keys schema 008 no longer enforces with a primary key
    "query_scores": "index_id, query",
    "query_top_pages": "index_id, query, rank",
    "query_terms": "index_id, query, position",
    "review_queries": "review_id, query",
    "cluster_members": "review_id, query",
}


def test_rerunning_reviews_never_repeats_a_key(conn, tmp_path) -> None:
    (tmp_path / "pages.csv").write_text(CONTENT, encoding="utf-8")
    load_content(conn, tmp_path / "pages.csv", ContentOptions(source="site"))
    queries = ["water meter", "leak", "pay bill", "sofa", "meeter", "sofas", "lake"]
    load_log(conn, log(tmp_path / "w1.csv", "2025-03-04", queries), LoadOptions())
    settings = ReviewSettings()
    for _ in range(2):  # the same week twice: every stage reruns over its own rows
        run_review(conn, week_of(datetime(2025, 3, 4)), settings, None)
    for table, key in KEYS.items():
        total, distinct = conn.execute(
            f"SELECT count(*), count(DISTINCT ({key})) FROM {table}"
        ).fetchall()[0]
        assert total > 0, table
        assert total == distinct, table


def test_rebuilding_sessions_never_repeats_a_key(conn, tmp_path) -> None:
    from querygap.sessions import build_sessions

    queries = ["water meter", "leak", "pay bill", "sofa"]
    load_log(conn, log(tmp_path / "w1.csv", "2025-03-04", queries), LoadOptions())
    for _ in range(2):
        build_sessions(conn)
    for table, key in (
        ("search_sessions", "file_id, line"),
        ("session_traffic", "session_id"),
        ("session_traffic", "session"),
    ):
        total, distinct = conn.execute(
            f"SELECT count(*), count(DISTINCT ({key})) FROM {table}"
        ).fetchall()[0]
        assert total == distinct == 4, table


def test_scoring_in_parts_stores_what_one_part_stores(tmp_path, monkeypatch) -> None:
    # The score stage stores SCORE_PART queries at a time; parts of 2 must give the tables one
    # part gives, row for row.
    import querygap.review as review
    from querygap.workspace import connect

    queries = ["water meter", "leak", "pay bill", "sofa", "meeter", "sofas", "lake", "bill"]
    tables = {}
    for part in (1000, 2):
        monkeypatch.setattr(review, "SCORE_PART", part)
        conn = connect(tmp_path / f"ws{part}.duckdb")
        (tmp_path / "pages.csv").write_text(CONTENT, encoding="utf-8")
        load_content(conn, tmp_path / "pages.csv", ContentOptions(source="site"))
        load_log(conn, log(tmp_path / "w1.csv", "2025-03-04", queries), LoadOptions())
        done = run_review(conn, week_of(datetime(2025, 3, 4)), ReviewSettings(), None)
        assert done.scored_now == len(queries)
        tables[part] = {
            name: conn.execute(f"SELECT * EXCLUDE (index_id) FROM {name} ORDER BY ALL").fetchall()
            for name in ("query_scores", "query_top_pages", "query_terms")
        }
        conn.close()
    assert len(tables[2]["query_scores"]) == len(queries) and tables[2]["query_top_pages"]
    assert tables[2] == tables[1000]


def test_a_part_that_fails_leaves_no_part_stored(tmp_path, monkeypatch) -> None:
    # Parts are stored while the next is scored; a failure in a later part must still roll the
    # earlier, already stored parts back (one transaction), and surface the error.
    import querygap.review as review
    from querygap.workspace import connect

    monkeypatch.setattr(review, "SCORE_PART", 2)
    calls = []
    real = review.score_queries

    def failing_third(queries, index):
        calls.append(len(queries))
        if len(calls) == 3:
            raise RuntimeError("scoring failed")
        return real(queries, index)

    monkeypatch.setattr(review, "score_queries", failing_third)
    conn = connect(tmp_path / "ws.duckdb")
    (tmp_path / "pages.csv").write_text(CONTENT, encoding="utf-8")
    load_content(conn, tmp_path / "pages.csv", ContentOptions(source="site"))
    queries = ["water meter", "leak", "pay bill", "sofa", "meeter", "sofas", "lake", "bill"]
    load_log(conn, log(tmp_path / "w1.csv", "2025-03-04", queries), LoadOptions())
    with pytest.raises(RuntimeError, match="scoring failed"):
        run_review(conn, week_of(datetime(2025, 3, 4)), ReviewSettings(), None)
    assert calls == [2, 2, 2]
    stored = [
        conn.execute(f"SELECT count(*) FROM {name}").fetchall()[0][0]
        for name in ("query_scores", "query_top_pages", "query_terms")
    ]
    conn.close()
    assert stored == [0, 0, 0]
