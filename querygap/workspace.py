"""The workspace: one DuckDB file holding every table of every stage.

The schema is built from the numbered scripts in ``sql/schema/`` (``001_core.sql``, ...). Table
``schema_version`` records which scripts ran, so a later release can migrate an existing workspace
and an older release refuses a workspace made by a newer one.
"""

from __future__ import annotations

import os
import re
from collections.abc import Iterator, Mapping
from contextlib import contextmanager
from pathlib import Path
from typing import Any

import duckdb
import pandas as pd
import pyarrow as pa

from querygap.errors import SchemaError, WorkspaceBusyError
from querygap.sqlfiles import SQL_DIR, Statement, statement

DEFAULT_WORKSPACE = Path("querygap.duckdb")
SCHEMA_DIR = SQL_DIR / "schema"
_SCRIPT = re.compile(r"^(\d{3})_[a-z0-9_]+\.sql$")


def memory_limit() -> str:
    """DuckDB's memory limit for a workspace connection: QUERYGAP_MEMORY_LIMIT or 1.5 GB."""
    value = os.environ.get("QUERYGAP_MEMORY_LIMIT", "1.5GB").strip()
    if not re.fullmatch(r"\d+(\.\d+)?\s*(KB|MB|GB|TB|KiB|MiB|GiB|TiB)", value, re.I):
        raise SchemaError(f"QUERYGAP_MEMORY_LIMIT must be a size such as 2GB; got {value!r}")
    return value


_UNIT_BYTES = {
    "kb": 10**3,
    "mb": 10**6,
    "gb": 10**9,
    "tb": 10**12,
    "kib": 2**10,
    "mib": 2**20,
    "gib": 2**30,
    "tib": 2**40,
}


def memory_limit_bytes() -> int:
    """:func:`memory_limit` in bytes ("1.5GB" -> 1,500,000,000)."""
    found = re.fullmatch(r"(\d+(?:\.\d+)?)\s*([a-z]+)", memory_limit().lower())
    assert found is not None  # memory_limit() refuses any other form
    return int(float(found.group(1)) * _UNIT_BYTES[found.group(2)])


@contextmanager
def smaller_cache(conn: duckdb.DuckDBPyConnection, share: float) -> Iterator[None]:
    """DuckDB's memory limit lowered to ``share`` of :func:`memory_limit` for the block, then
    set back (also when the block fails).

    DuckDB keeps the table blocks it has read cached up to its limit: after the earlier stages of
    a review that was 1.5 GB of the process's 3.8-4.0 GB peak while the clusters and proposals
    were made side by side. With the limit lowered the cache gives way (a second week at size M:
    peak 3.78 -> 2.78 GB, no slower). The limit is the database's, so it holds for every
    connection to it.
    """
    conn.execute(f"SET memory_limit = '{int(memory_limit_bytes() * share)}B'")
    try:
        yield
    finally:
        conn.execute(f"SET memory_limit = '{memory_limit()}'")


def schema_scripts(schema_dir: Path = SCHEMA_DIR) -> list[tuple[int, Path]]:
    """The numbered schema scripts, in order: ``[(version, path), ...]``."""
    scripts = []
    for path in sorted(schema_dir.glob("*.sql")):
        match = _SCRIPT.match(path.name)
        if not match:
            raise SchemaError(f"{path}: schema scripts are named NNN_words.sql")
        scripts.append((int(match.group(1)), path))
    return scripts


def latest_schema_version() -> int:
    """The highest schema version this release knows."""
    return max(version for version, _ in schema_scripts())


def connect(
    path: Path | str | None = DEFAULT_WORKSPACE, *, read_only: bool = False
) -> duckdb.DuckDBPyConnection:
    """Open, create or migrate a workspace; ``None`` or ``":memory:"`` gives an in-memory one."""
    target = ":memory:" if path is None else str(path)
    if target != ":memory:":
        parent = Path(target).resolve().parent
        if not parent.is_dir():
            raise SchemaError(f"cannot create workspace {target}: folder {parent} does not exist")
    try:
        conn = duckdb.connect(target, read_only=read_only)
    except duckdb.IOException as exc:
        text = str(exc)
        if "lock" in text.lower():
            raise WorkspaceBusyError(
                f"workspace {target} is in use by another process; wait for it to finish, "
                "or pass --db with another file"
            ) from None
        if "read-only" in text.lower() or "permission" in text.lower():
            raise SchemaError(f"cannot open workspace {target}: {text.splitlines()[0]}") from None
        raise SchemaError(f"cannot open workspace {target}: {text.splitlines()[0]}") from None
    except duckdb.Error as exc:
        raise SchemaError(
            f"{target} is not a querygap workspace: {str(exc).splitlines()[0]}"
        ) from None
    _session_settings(conn)
    # Bound memory: DuckDB spills staging tables and sorts to disk beyond this limit, so a log many
    # times larger than RAM still loads. QUERYGAP_MEMORY_LIMIT overrides (a DuckDB size, "4GB").
    conn.execute(f"SET memory_limit = '{memory_limit()}'")
    # DuckDB's allocator keeps the pages a finished statement freed until it is busy again: a
    # 14.5M-row ORDER BY left 0.5 GB resident after its result was freed, and the resident set
    # of a review, whose stages run one big statement after another, rose by the sum. A
    # background thread returns them to the system within about 3 s.
    conn.execute("SET allocator_background_threads = true")
    if target != ":memory:":
        spill = Path(target).resolve().parent / (Path(target).name + ".tmp")
        conn.execute(f"SET temp_directory = '{str(spill).replace(chr(39), chr(39) * 2)}'")
    if not read_only:
        migrate(conn, target)
    return conn


def _session_settings(conn: duckdb.DuckDBPyConnection) -> None:
    """The settings each connection keeps for itself (the memory limit is the database's)."""
    conn.execute("SET TimeZone = 'UTC'")
    # DuckDB draws a progress bar on stdout during long statements, which would corrupt --json.
    conn.execute("SET enable_progress_bar = false")


def side_connection(conn: duckdb.DuckDBPyConnection) -> duckdb.DuckDBPyConnection:
    """A second connection to the same workspace, for a stage run in another thread.

    It shares the database (and its memory limit) but has its own transactions, temp tables and
    registered views; close it when done.
    """
    side = conn.cursor()
    _session_settings(side)
    return side


def current_version(conn: duckdb.DuckDBPyConnection) -> int:
    """The schema version recorded in the workspace (0 for an empty file)."""
    exists = conn.execute(
        "SELECT count(*) FROM information_schema.tables WHERE table_name = 'schema_version'"
    ).fetchall()[0]
    if not exists or exists[0] == 0:
        return 0
    row = conn.execute("SELECT coalesce(max(version), 0) FROM schema_version").fetchall()[0]
    return int(row[0]) if row else 0


def migrate(conn: duckdb.DuckDBPyConnection, target: str = "workspace") -> int:
    """Run every schema script the workspace has not recorded yet; return the resulting version.

    Scripts are applied in number order, and a gap is filled: a workspace made by a branch that
    had script 005 but not 003 still gets 003.
    """
    have = current_version(conn)
    latest = latest_schema_version()
    if have > latest:
        raise SchemaError(
            f"{target} was made by a newer querygap (schema version {have}, this release knows "
            f"up to {latest}); upgrade querygap or use another --db"
        )
    done: set[int] = set()
    if have:
        done = {int(r[0]) for r in conn.execute("SELECT version FROM schema_version").fetchall()}
    for version, path in schema_scripts():
        if version in done:
            continue
        conn.execute("BEGIN TRANSACTION")
        try:
            conn.execute(path.read_text(encoding="utf-8"))
            conn.execute("INSERT INTO schema_version VALUES (?, ?, now())", [version, path.name])
            conn.execute("COMMIT")
        except Exception:
            conn.execute("ROLLBACK")
            raise
    return max(have, latest)


def run(
    conn: duckdb.DuckDBPyConnection, name: str, params: Mapping[str, Any] | None = None
) -> duckdb.DuckDBPyConnection:
    """Execute the named statement from ``sql/`` with its ``$parameters`` bound from ``params``."""
    stmt = statement(name)
    given = _check_params(stmt, name, params)
    return conn.execute(stmt.sql, given) if given else conn.execute(stmt.sql)


def _check_params(stmt: Statement, name: str, params: Mapping[str, Any] | None) -> dict[str, Any]:
    """The parameters of a named statement, refused when one is missing or unexpected."""
    given = dict(params or {})
    missing = stmt.params - given.keys()
    extra = given.keys() - stmt.params
    if missing or extra:
        raise SchemaError(
            f"{stmt.origin}: statement '{name}' takes {sorted(stmt.params)}; "
            f"missing {sorted(missing)}, unexpected {sorted(extra)}"
        )
    return given


def frame(
    conn: duckdb.DuckDBPyConnection, name: str, params: Mapping[str, Any] | None = None
) -> pd.DataFrame:
    """Run a named query and return its result as a DataFrame."""
    return run(conn, name, params).df()


@contextmanager
def transaction(conn: duckdb.DuckDBPyConnection) -> Iterator[duckdb.DuckDBPyConnection]:
    """One all-or-nothing unit of work: commit on success, roll back on any exception."""
    conn.execute("BEGIN TRANSACTION")
    try:
        yield conn
    except BaseException:
        conn.execute("ROLLBACK")
        raise
    conn.execute("COMMIT")


def arrow(
    conn: duckdb.DuckDBPyConnection, name: str, params: Mapping[str, Any] | None = None
) -> pa.Table:
    """Run a named query and return its result as an Arrow table (no pandas round trip)."""
    stmt = statement(name)
    given = _check_params(stmt, name, params)
    return conn.sql(stmt.sql, params=given or None).to_arrow_table()
