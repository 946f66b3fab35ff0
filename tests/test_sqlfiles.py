"""The named-statement loader and the workspace schema."""

from __future__ import annotations

from pathlib import Path

import duckdb
import pytest

from querygap.errors import SchemaError, WorkspaceBusyError
from querygap.sqlfiles import SQL_DIR, all_statements, parse_sql_text, statement
from querygap.workspace import (
    connect,
    current_version,
    latest_schema_version,
    run,
    schema_scripts,
)


def test_parses_names_docs_and_params() -> None:
    text = (
        "-- name: pick\n-- Pick rows.\n-- $low: the least value\nSELECT * FROM t WHERE x >= $low;\n"
    )
    stmts = parse_sql_text(text, "a.sql")
    assert stmts["pick"].params == {"low"}
    assert stmts["pick"].origin == "a.sql:1"
    assert "Pick rows." in stmts["pick"].doc


@pytest.mark.parametrize(
    ("text", "message"),
    [
        ("SELECT 1;\n", "a.sql:1: SQL before the first '-- name:' line"),
        (
            "-- name: x\nSELECT 1;\n-- name: x\nSELECT 2;\n",
            "a.sql:3: statement name 'x' is used twice",
        ),
        ("-- name: x\nSELECT $y;\n", "a.sql:1: statement 'x' uses undeclared parameter(s) y"),
        (
            "-- name: x\n-- $y: why\nSELECT 1;\n",
            "a.sql:1: statement 'x' declares unused parameter(s) y",
        ),
        ("-- name: x\n-- only a comment\n", "a.sql:1: statement 'x' has no SQL"),
    ],
)
def test_refuses_bad_files_with_file_and_line(text: str, message: str) -> None:
    with pytest.raises(SchemaError) as err:
        parse_sql_text(text, "a.sql")
    assert str(err.value).startswith(message)


def test_every_stage_statement_is_used_by_some_module() -> None:
    # Docs kept honest: a named statement nobody runs is dead SQL.
    source = "\n".join(p.read_text() for p in (SQL_DIR.parent / "querygap").rglob("*.py"))
    unused = [name for name in all_statements() if f'"{name}"' not in source]
    assert unused == []


def test_run_checks_parameters(conn: duckdb.DuckDBPyConnection) -> None:
    with pytest.raises(SchemaError, match="missing \\['sha256'\\]"):
        run(conn, "file_by_hash", {})


def test_schema_version_recorded(conn: duckdb.DuckDBPyConnection) -> None:
    assert current_version(conn) == latest_schema_version() >= 1


def workspace_at(path: Path, last: int) -> duckdb.DuckDBPyConnection:
    """A new workspace built by the schema scripts up to version ``last`` only."""
    old = duckdb.connect(str(path))
    for version, script in schema_scripts():
        if version <= last:
            old.execute(script.read_text(encoding="utf-8"))
            old.execute("INSERT INTO schema_version VALUES (?, ?, now())", [version, script.name])
    return old


def test_version_11_sessions_get_one_number_per_name(tmp_path: Path) -> None:
    path = tmp_path / "ws.duckdb"
    old = workspace_at(path, 11)
    names = ["u:b:1", "s:a", "u:b:1", "r:1:5"]  # r:1:5 came from the stand-in: no traffic row
    for line, name in enumerate(names, start=2):
        old.execute("INSERT INTO search_sessions VALUES (1, ?, ?, false)", [line, name])
    for name in ("s:a", "u:b:1"):
        old.execute(
            "INSERT INTO session_traffic VALUES (?, NULL, 1, TIMESTAMPTZ '2026-11-02 08:00:00+00', "
            "TIMESTAMPTZ '2026-11-02 08:00:00+00', 1, 1, NULL, 'human')",
            [name],
        )
    old.close()
    conn = connect(path)
    numbers = [
        r[0] for r in conn.execute("SELECT session FROM search_sessions ORDER BY line").fetchall()
    ]
    named = dict(conn.execute("SELECT session_id, session FROM session_traffic").fetchall())
    conn.close()
    assert len(numbers) == 4 and numbers[0] == numbers[2] and len(set(numbers)) == 3
    assert named == {"u:b:1": numbers[0], "s:a": numbers[1]}


def test_version_12_session_names_read_the_same_after_version_13(tmp_path: Path) -> None:
    path = tmp_path / "ws.duckdb"
    old = workspace_at(path, 12)
    stored = [("s:00000000000000aa", "00000000000000aa"), ("r:1:5", None), ("u:b:2", "b")]
    for session, (name, actor) in enumerate(stored):
        old.execute(
            "INSERT INTO session_traffic (session_id, actor_key, searches, first_at, last_at, "
            "peak_per_minute, peak_per_hour, median_gap_s, verdict, session) VALUES (?, ?, 1, "
            "TIMESTAMPTZ '2026-11-02 08:00:00+00', TIMESTAMPTZ '2026-11-02 08:00:00+00', 1, 1, "
            "NULL, 'human', ?)",
            [name, actor, session],
        )
    old.close()
    conn = connect(path)
    read = conn.execute(
        "SELECT session_id, actor_key FROM session_traffic ORDER BY session"
    ).fetchall()
    summary = conn.execute(statement("sessions_summary").sql).fetchall()
    conn.close()
    assert read == stored
    assert summary == [("human", 3, 3, 3)]


def test_version_9_visitor_keys_migrate_to_the_numbers_their_hex_digits_spell(
    tmp_path: Path,
) -> None:
    # A workspace as version 9 left it: keys stored as 16 hex digits. Reference: Python's int().
    path = tmp_path / "ws.duckdb"
    old = workspace_at(path, 9)
    keys = [
        ("00ab12cd34ef5678", "ffffffffffffffff"),
        (None, "0000000000000001"),
        ("hand-made", None),
    ]
    for line, (session, user) in enumerate(keys, start=2):
        old.execute(
            "INSERT INTO searches VALUES (1, ?, TIMESTAMPTZ '2026-11-02 08:00:00+00', 'Bill', "
            "'bill', ?, ?, NULL, NULL, 7, 1)",
            [line, session, user],
        )
    old.close()
    conn = connect(path)
    got = conn.execute("SELECT session_key, user_key FROM searches ORDER BY line").fetchall()
    shown = conn.execute(
        "SELECT printf('%016x', session_key), printf('%016x', user_key) FROM searches "
        "WHERE line < 4 ORDER BY line"
    ).fetchall()
    conn.close()
    assert got[:2] == [(int("00ab12cd34ef5678", 16), 2**64 - 1), (None, 1)]
    assert shown == keys[:2]
    assert got[2][0] is not None and got[2][1] is None  # a non-hex key keeps a hash of its text


def test_newer_workspace_is_refused(tmp_path: Path) -> None:
    path = tmp_path / "ws.duckdb"
    c = connect(path)
    c.execute("INSERT INTO schema_version VALUES (999, 'future.sql', now())")
    c.close()
    with pytest.raises(SchemaError, match="made by a newer querygap \\(schema version 999"):
        connect(path)


def test_not_a_workspace(tmp_path: Path) -> None:
    path = tmp_path / "junk.duckdb"
    path.write_bytes(b"this is not a database file at all" * 100)
    with pytest.raises(SchemaError, match="junk.duckdb"):
        connect(path)


def test_locked_workspace_gives_a_clear_message(tmp_path: Path) -> None:
    import subprocess
    import sys
    import time

    path = tmp_path / "ws.duckdb"
    connect(path).close()
    holder = subprocess.Popen(
        [
            sys.executable,
            "-c",
            f"import duckdb,time; c=duckdb.connect({str(path)!r}); "
            "print('ready', flush=True); time.sleep(30)",
        ],
        stdout=subprocess.PIPE,
        text=True,
    )
    try:
        assert holder.stdout is not None and holder.stdout.readline().strip() == "ready"
        time.sleep(0.2)
        with pytest.raises(WorkspaceBusyError, match="in use by another process"):
            connect(path)
    finally:
        holder.kill()
        holder.wait()


def test_workspace_connections_give_freed_memory_back(conn) -> None:
    # Without the allocator's background thread, DuckDB kept about 0.5 GB resident after a
    # 14.5M-row sorted result was freed (workspace.connect).
    setting = conn.execute("SELECT current_setting('allocator_background_threads')").fetchall()
    assert setting == [(True,)]


@pytest.mark.parametrize(
    ("setting", "bytes_"),
    [("1.5GB", 1_500_000_000), ("512 MiB", 512 * 2**20), ("2gb", 2 * 10**9), ("100KB", 10**5)],
)
def test_memory_limit_in_bytes(monkeypatch, setting: str, bytes_: int) -> None:
    from querygap.workspace import memory_limit_bytes

    monkeypatch.setenv("QUERYGAP_MEMORY_LIMIT", setting)
    assert memory_limit_bytes() == bytes_


def test_a_smaller_cache_is_set_back_even_when_the_block_fails(conn) -> None:
    from querygap.workspace import memory_limit_bytes, smaller_cache

    def limit() -> str:
        return conn.execute("SELECT current_setting('memory_limit')").fetchall()[0][0]

    before = limit()
    with pytest.raises(RuntimeError), smaller_cache(conn, 1 / 3):
        number, unit = limit().split()  # DuckDB shows binary units: "476.8 MiB"
        shown = float(number) * {"KiB": 2**10, "MiB": 2**20, "GiB": 2**30}[unit]
        assert shown == pytest.approx(memory_limit_bytes() / 3, rel=0.001)
        raise RuntimeError("a stage failed")
    assert limit() == before
