"""The session stage: splitting at the inactivity gap, session keys, bot verdicts, review counts."""

from __future__ import annotations

import json
import re
from datetime import UTC, datetime, timedelta
from pathlib import Path

import duckdb
import numpy as np
import pandas as pd
import pytest

from querygap.demo import DEMO_DIR, run_demo
from querygap.errors import ConfigError
from querygap.sessions import (
    STEP_GAP_SECONDS,
    SessionSettings,
    build_sessions,
    validate_sessions,
)
from querygap.workspace import connect, run

T0 = datetime(2026, 11, 9, 8, 0, tzinfo=UTC)


def key_of(name: str | None) -> int | None:
    """A stored visitor key (64 bits) for a short test name: its bytes, zero-padded to 8."""
    return None if name is None else int.from_bytes(name.encode().ljust(8, b"\0"), "big")


def named(shown: str) -> str:
    """A session id or actor key with each key's 16 hex digits turned back into its test name."""
    return re.sub("[0-9a-f]{16}", lambda m: bytes.fromhex(m.group()).rstrip(b"\0").decode(), shown)


def add_searches(conn: duckdb.DuckDBPyConnection, rows: list[dict]) -> None:
    """Insert searches: each row gives at (seconds after T0), query, and optional keys."""
    data = pd.DataFrame(
        {
            "file_id": 1,
            "line": range(2, len(rows) + 2),
            "searched_at": [T0 + timedelta(seconds=r["at"]) for r in rows],
            "query_text": [r.get("query", "q") for r in rows],
            "query": [r.get("query", "q") for r in rows],
            "session_key": pd.array([key_of(r.get("session")) for r in rows], "UInt64"),
            "user_key": pd.array([key_of(r.get("user")) for r in rows], "UInt64"),
            "results": None,
            "clicks": None,
            "fingerprint": range(len(rows)),
            "occurrence": 1,
        }
    )
    conn.register("new_rows", data)
    conn.execute(
        "INSERT INTO searches SELECT file_id, line, searched_at, query_text, query, session_key,"
        " user_key, results::BIGINT, clicks::BIGINT, fingerprint::UBIGINT, occurrence FROM new_rows"
    )
    conn.unregister("new_rows")


def sessions_of(conn: duckdb.DuckDBPyConnection) -> list[str]:
    rows = conn.execute(
        "SELECT t.session_id FROM search_sessions s JOIN session_traffic t USING (session) "
        "ORDER BY s.line"
    ).fetchall()
    return [named(r[0]) for r in rows]


def verdicts(conn: duckdb.DuckDBPyConnection) -> dict[str, str]:
    rows = conn.execute("SELECT actor_key, verdict FROM session_traffic").fetchall()
    return {named(key): verdict for key, verdict in rows}


@pytest.mark.parametrize(
    ("rows", "sessions"),
    [
        pytest.param(
            # 30 minutes: the de facto default (Catledge & Pitkow, 1995). A gap of exactly 30
            # minutes stays in the session; one second more opens a new one.
            [
                {"at": 0, "user": "u1"},
                {"at": 1800, "user": "u1"},
                {"at": 3601, "user": "u1"},
                {"at": 3602, "user": "u2"},
            ],
            ["u:u1:1", "u:u1:1", "u:u1:2", "u:u2:1"],
            id="split at the gap boundary",
        ),
        pytest.param(
            [
                {"at": 0, "user": "u1", "session": "s9"},
                {"at": 7200, "user": "u1", "session": "s9"},  # 2 h apart, same session key
                {"at": 7300},
                {"at": 7301},
            ],
            ["s:s9", "s:s9", "r:1:4", "r:1:5"],
            id="a session key wins over the user key; keyless searches stand alone",
        ),
        pytest.param(
            # A log may use one id as both: the session key's searches never split, the user
            # key's do.
            [
                {"at": 0, "session": "k1"},
                {"at": 1, "user": "k1"},
                {"at": 7200, "session": "k1"},
                {"at": 7201, "user": "k1"},
            ],
            ["s:k1", "u:k1:1", "s:k1", "u:k1:2"],
            id="a session key and a user key of one value are two actors",
        ),
    ],
)
def test_sessions_are_named_by_key_kind_and_gap(
    conn: duckdb.DuckDBPyConnection, rows: list[dict], sessions: list[str]
) -> None:
    add_searches(conn, rows)
    build_sessions(conn)
    assert sessions_of(conn) == sessions


def test_gap_is_overridable(conn: duckdb.DuckDBPyConnection) -> None:
    add_searches(conn, [{"at": 0, "user": "u1"}, {"at": 301, "user": "u1"}])
    build_sessions(conn, SessionSettings(gap_minutes=5))
    assert sessions_of(conn) == ["u:u1:1", "u:u1:2"]
    build_sessions(conn, SessionSettings(gap_minutes=10))
    assert sessions_of(conn) == ["u:u1:1", "u:u1:1"]


def test_rebuild_is_idempotent(conn: duckdb.DuckDBPyConnection) -> None:
    add_searches(conn, [{"at": i * 40, "user": "u1"} for i in range(5)])
    build_sessions(conn)
    first = conn.execute("SELECT * FROM search_sessions ORDER BY line").fetchall()
    build_sessions(conn)
    assert conn.execute("SELECT * FROM search_sessions ORDER BY line").fetchall() == first
    assert conn.execute("SELECT count(*) FROM session_traffic").fetchall() == [(1,)]


def test_burst_is_a_bot_and_a_person_is_not(conn: duckdb.DuckDBPyConnection) -> None:
    rows = [{"at": i * 1.5, "user": "scraper", "query": f"w{i}"} for i in range(300)]
    rows += [{"at": 40 * i, "user": "person"} for i in range(6)]
    rows += [{"at": 5000 + 5 * i, "user": "quick"} for i in range(12)]  # 5 s apart: ambiguous
    add_searches(conn, rows)
    summary = build_sessions(conn).set_index("verdict")
    assert verdicts(conn) == {"scraper": "bot", "person": "human", "quick": "suspect"}
    assert summary.loc["bot", "searches"] == 300
    flagged = conn.execute("SELECT count(*) FROM search_sessions WHERE is_bot").fetchall()[0][0]
    assert flagged == 300


def steps_of(conn: duckdb.DuckDBPyConnection) -> list[tuple[int, int, float]]:
    """(line, next line, gap in seconds) of every stored step, by line."""
    rows = conn.execute(
        "SELECT line, next_line, gap_us / 1e6 FROM search_steps ORDER BY line"
    ).fetchall()
    return [(int(a), int(b), float(g)) for a, b, g in rows]


def test_steps_skip_repeats_bots_and_session_ends(conn: duckdb.DuckDBPyConnection) -> None:
    rows = [  # lines 2.. in this order
        {"at": 0, "user": "u1", "query": "a"},
        {"at": 10, "user": "u1", "query": "a"},  # a repeat: the step starts here
        {"at": 25, "user": "u1", "query": "b"},
        {"at": 25, "user": "u1", "query": "c"},  # same time: file order decides
        {"at": 25 + 31 * 60, "user": "u1", "query": "d"},  # a new session: no step to it
        {"at": 30, "session": "s1", "query": "a"},
        {"at": 90, "session": "s1", "query": "e"},
        {"at": 95, "query": "f"},  # no key: a session alone
        {"at": 90 + STEP_GAP_SECONDS + 1, "session": "s1", "query": "g"},  # too late a step
    ]
    rows += [{"at": 200 + 1.5 * i, "user": "scraper", "query": f"w{i}"} for i in range(300)]
    add_searches(conn, rows)
    build_sessions(conn)
    assert steps_of(conn) == [(3, 4, 15.0), (4, 5, 0.0), (7, 8, 60.0)]


def test_steps_match_their_sql_definition(conn: duckdb.DuckDBPyConnection) -> None:
    # Seeded random traffic: user keys, session keys and keyless searches, repeats, ties in
    # time and a bot. The stage's compiled steps must equal the SQL window definition that the
    # stand-in sessions use (sql/propose.sql steps_fill_simple) on the sessions it built.
    rng = np.random.default_rng(7)
    n = 3000
    kind = rng.integers(0, 3, n)
    rows = [
        {
            "at": float(rng.integers(0, 20_000)),
            "query": f"q{rng.integers(0, 6)}",
            "user": f"u{rng.integers(0, 40)}" if kind[i] == 0 else None,
            "session": f"s{rng.integers(0, 40)}" if kind[i] == 1 else None,
        }
        for i in range(n)
    ]
    rows += [{"at": 1.0 * i, "user": "scraper", "query": f"w{i % 3}"} for i in range(200)]
    add_searches(conn, rows)
    build_sessions(conn)
    assert conn.execute("SELECT count(*) FROM search_sessions WHERE is_bot").fetchall()[0][0]
    cols = "file_id, line, next_file_id, next_line, searched_us, gap_us"
    stage = conn.execute(f"SELECT {cols} FROM search_steps ORDER BY ALL").fetchall()
    conn.execute("DELETE FROM search_steps")
    run(conn, "steps_fill_simple", {"max_gap_us": STEP_GAP_SECONDS * 1_000_000})
    reference = conn.execute(f"SELECT {cols} FROM search_steps ORDER BY ALL").fetchall()
    assert len(stage) > 500
    assert stage == reference


def test_each_bot_criterion_alone(conn: duckdb.DuckDBPyConnection) -> None:
    rows = [{"at": 0.5 * i, "user": "minute"} for i in range(25)]  # 25 in 12 s, but only 25
    rows += [{"at": 10_000 + 20 * i, "user": "hour"} for i in range(160)]  # 160 in 53 min
    add_searches(conn, rows)
    build_sessions(conn, SessionSettings(min_searches=1000))  # median-gap rule switched off
    assert verdicts(conn) == {"minute": "bot", "hour": "bot"}


def test_contradictory_thresholds_are_refused() -> None:
    with pytest.raises(ConfigError, match=r"human_per_minute \(30\) must not be above"):
        validate_sessions(SessionSettings(human_per_minute=30))
    with pytest.raises(ConfigError, match="--session-gap"):
        validate_sessions(SessionSettings(gap_minutes=0))


def test_bot_searches_are_left_out_of_review_counts(conn: duckdb.DuckDBPyConnection) -> None:
    rows = [{"at": i, "user": "scraper", "query": "pay bill"} for i in range(40)]
    rows += [{"at": 100, "user": "person", "query": "pay bill"}]
    rows += [{"at": 160, "user": "person", "query": "sewer"}]
    add_searches(conn, rows)
    conn.execute(
        "INSERT INTO query_scores VALUES ('ix', 'pay bill', 2, 2, 0.9, 1.0, 'd1'),"
        " ('ix', 'sewer', 1, 0, 0.0, 0.0, NULL)"
    )
    build_sessions(conn)
    params = {
        "review_id": "r",
        "start": T0,
        "end": T0 + timedelta(days=1),
        "index_id": "ix",
        "min_score": 0.05,
        "min_coverage": 0.6,
    }
    run(conn, "review_flag", params)
    got = conn.execute("SELECT query, searches, visitors FROM review_queries ORDER BY 1").fetchall()
    assert got == [("pay bill", 1, 1), ("sewer", 1, 1)]


@pytest.fixture(scope="module")
def demo_db(tmp_path_factory: pytest.TempPathFactory) -> Path:
    folder = tmp_path_factory.mktemp("demo")
    run_demo(folder / "demo.duckdb", folder / "reports", say=lambda _m: None)
    return folder / "demo.duckdb"


def test_demo_bots_found(demo_db: Path) -> None:
    # The demo generator records one scraper per week and its searches per file (truth.json,
    # family_volumes[...]['bot']); the keys are hashed in the workspace, so compare counts.
    truth = json.loads((DEMO_DIR / "truth.json").read_text())
    expected = sorted(v["bot"] for v in truth["family_volumes"].values())
    conn = connect(demo_db, read_only=True)
    got = conn.execute(
        "SELECT t.actor_key, count(*) FROM search_sessions s JOIN session_traffic t"
        " USING (session) WHERE s.is_bot GROUP BY 1 ORDER BY 2"
    ).fetchall()
    suspects = conn.execute(
        "SELECT count(*) FROM session_traffic WHERE verdict = 'suspect'"
    ).fetchall()[0][0]
    conn.close()
    assert len(truth["bot_visitors"]) == 3
    assert sorted(n for _, n in got) == expected
    assert suspects == 0


def test_demo_review_reconciles_with_bots(demo_db: Path) -> None:
    # Every search of the window is either counted in review_queries or left out as a bot.
    conn = connect(demo_db, read_only=True)
    window_searches, counted, bots = conn.execute(
        "SELECT (SELECT count(*) FROM searches s, reviews r WHERE r.review_id = '2026-W46'"
        "        AND s.searched_at >= r.window_start AND s.searched_at < r.window_end),"
        " (SELECT sum(searches) FROM review_queries WHERE review_id = '2026-W46'),"
        " (SELECT bot_searches FROM review_bots WHERE review_id = '2026-W46')"
    ).fetchall()[0]
    conn.close()
    assert bots > 0
    assert counted + bots == window_searches


def test_summary_counts_actors_as_the_spelled_names_do(conn: duckdb.DuckDBPyConnection) -> None:
    # The summary counts actors on the numbers the names are spelled from (schema 13); counted on
    # the names themselves (each session with neither key an actor of its own) it is the same.
    rows = [{"at": i * 40, "user": "u1"} for i in range(3)]  # one user, two sessions
    rows += [{"at": 4000, "user": "u1"}, {"at": 10, "session": "s1"}, {"at": 20, "session": "s2"}]
    rows += [{"at": 30 + i} for i in range(3)]  # neither key: three sessions of their own
    rows += [{"at": 50 + i, "user": "bot"} for i in range(40)]  # a burst: a bot
    add_searches(conn, rows)
    build_sessions(conn)
    by_names = conn.execute(
        "SELECT verdict, count(*), sum(searches)::BIGINT, "
        "count(DISTINCT coalesce(actor_key, session_id)) FROM session_traffic "
        "GROUP BY verdict ORDER BY verdict"
    ).fetchall()
    summary = run(conn, "sessions_summary").fetchall()
    assert by_names == [("bot", 1, 40, 1), ("human", 7, 9, 6)]
    assert summary == by_names
