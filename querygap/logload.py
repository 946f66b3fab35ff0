"""The load stage for query logs: file -> ``searches`` (+ ``rejects``, ``duplicates``).

DuckDB reads the file once, parsing it as it reads (no Python list of rows), and hashes each
distinct session/user key once with HMAC-SHA256 in SQL. Python touches only the distinct query
texts (to redact and normalize them), in a worker thread while DuckDB hashes the keys: logs follow
Zipf's law, so these are far fewer than the rows. The rows are then written to ``searches`` in one
pass, and the few repeats and rows already held from another file are corrected in place. The
whole write is one transaction: a load that fails or is killed part-way leaves the workspace as it
was.

Reconciliation, printed by the command: rows read = loaded + rejected + duplicates.
"""

from __future__ import annotations

import hashlib
import json
import re
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field
from pathlib import Path

import duckdb
import pandas as pd

from querygap.errors import InputError
from querygap.logformats import LogLayout, sniff_log
from querygap.redaction import RedactionRules, hmac_pads, new_secret, redact_series
from querygap.textnorm import normalize_series
from querygap.workspace import run, transaction

_REJECT_WORDS = {
    "INVALID ENCODING": (
        "bytes that are not valid {encoding}; pass --encoding if the file uses another"
    ),
    "MISSING COLUMNS": "fewer fields than the header has",
    "TOO MANY COLUMNS": "more fields than the header has (an unquoted delimiter?)",
    "UNQUOTED VALUE": "a quote that is not closed",
    "LINE SIZE OVER MAXIMUM": "a line longer than the reader's limit",
    "CAST ERROR": "a value that cannot be read",
}


@dataclass(frozen=True)
class LoadOptions:
    """How to read and store one log file (every field has a command-line option)."""

    fmt: str | None = None
    encoding: str | None = None
    delimiter: str | None = None
    columns: dict[str, str] = field(default_factory=dict)
    time_zone: str = "UTC"
    time_format: str = ""
    redaction: RedactionRules = field(default_factory=RedactionRules)
    max_query_chars: int = 500
    future_slack_hours: int = 24


@dataclass(frozen=True)
class LoadResult:
    """What one load did; ``rows_read == loaded + rejected + duplicates`` always."""

    path: str
    file_id: int
    skipped: bool  # the same bytes were loaded before
    rows_read: int
    loaded: int
    rejected: int
    duplicates: int
    redacted: dict[str, int]
    columns: dict[str, str]
    ignored: tuple[str, ...] = ()  # the file's columns that no field uses (not stored)

    def reconciliation(self) -> str:
        """The line the command prints for this file."""
        if self.skipped:
            return (
                f"{self.path}: already loaded (same content as file {self.file_id}); "
                "nothing changed"
            )
        return (
            f"{self.path}: {self.rows_read:,} rows read = {self.loaded:,} loaded + "
            f"{self.rejected:,} rejected + {self.duplicates:,} already loaded from another file"
        )


def file_sha256(path: Path) -> str:
    """Hex SHA-256 of the file's bytes, read in 1 MiB chunks."""
    digest = hashlib.sha256()
    with path.open("rb") as fh:
        for chunk in iter(lambda: fh.read(1 << 20), b""):
            digest.update(chunk)
    return digest.hexdigest()


def _quote_ident(name: str) -> str:
    return '"' + name.replace('"', '""') + '"'


def _sql_str(text: str) -> str:
    return "'" + text.replace("'", "''") + "'"


def _reader_sql(layout: LogLayout) -> tuple[str, int, bool]:
    """The table function that reads the file; the first data record number; rejects?"""
    path = _sql_str(str(layout.path))
    comp = "'gzip'" if layout.compressed else "'none'"
    if layout.format == "parquet":
        return (f"read_parquet({path})", 1, False)
    if layout.format == "jsonl":
        # DuckDB 2.0 reads CR LF files right only when it detects the line ending itself
        # (new_line = '\\r\\n' with store_rejects reads no rows at all).
        opts = (
            "columns = {'j': 'VARCHAR'}, header = false, auto_detect = false, delim = '\\x1f', "
            "quote = '', escape = ''" + ("" if layout.crlf else ", new_line = '\\n'")
        )
        first = 1
    else:
        cols = ", ".join(f"{_sql_str(c)}: 'VARCHAR'" for c in layout.columns)
        opts = (
            f"columns = {{{cols}}}, header = true, auto_detect = false, "
            f"delim = {_sql_str(layout.delimiter)}, quote = '\"', escape = '\"'"
        )
        first = 2
    return (
        f"read_csv({path}, {opts}, encoding = {_sql_str(layout.encoding)}, "
        f"compression = {comp}, store_rejects = true, rejects_table = 'qg_reject_errors', "
        "rejects_scan = 'qg_reject_scans', strict_mode = true)",
        first,
        True,
    )


def _raw_sql(layout: LogLayout, reader: str) -> str:
    """The SELECT of view stage_raw: the reader's rows as our standard text columns."""

    def col(fld: str) -> str:
        name = layout.mapping.get(fld)
        if name is None:
            return "NULL::VARCHAR"
        if layout.format == "jsonl":
            path = _sql_str("$." + json.dumps(name))
            return f"json_extract_string(CASE WHEN ok THEN j END, {path})"
        return f"CAST({_quote_ident(name)} AS VARCHAR)"

    fields = ", ".join(
        f"{col(f)} AS {f}_raw" for f in ("query", "session", "user", "results", "clicks")
    )
    ts = col("timestamp")
    if layout.format == "jsonl":
        # Blank lines are read (they hold a record number) but are not rows of the log.
        inner = (
            "SELECT j, coalesce(json_type(CASE WHEN json_valid(j) THEN j END) = 'OBJECT', false)"
            f" AS ok FROM {reader}"
        )
        return (
            f"SELECT j IS NULL OR trim(j) = '' AS blank, {ts} AS ts_raw, {fields}, "
            "CASE WHEN NOT ok THEN 'the line is not a JSON object' END AS parse_error "
            f"FROM ({inner})"
        )
    return (
        f"SELECT false AS blank, {ts} AS ts_raw, {fields}, NULL::VARCHAR AS parse_error "
        f"FROM {reader}"
    )


_PLACEHOLDER = re.compile(r"\[([a-z_]+)\]")
_MARKED = re.compile(r"qgmark([a-z_]+?)qgmark")


def normalize_keeping_placeholders(texts: pd.Series) -> pd.Series:
    """Normalize redacted texts; placeholders such as ``[email]`` survive as they are.

    The analyzer drops placeholders, so a redacted item neither matches nor counts against a query.
    """
    marked = texts.astype(object).str.replace(_PLACEHOLDER, r" qgmark\1qgmark ", regex=True)
    return normalize_series(marked).astype(object).str.replace(_MARKED, r"[\1]", regex=True)


def workspace_secret(conn: duckdb.DuckDBPyConnection) -> bytes:
    """The workspace's hashing secret, created on first use."""
    rows = conn.execute("SELECT secret FROM workspace_secret").fetchall()
    row = rows[0] if rows else None
    if row:
        return bytes(row[0])
    secret = new_secret()
    conn.execute("INSERT INTO workspace_secret VALUES (?)", [secret])
    return secret


def query_map(texts: pd.Series, rules: RedactionRules) -> tuple[pd.DataFrame, dict[str, int]]:
    """Each distinct raw query text with its redacted display text and its normalized form.

    Returns the frame (query_raw, query_text, query) and the redaction counts by kind.
    """
    redacted, counts = redact_series(texts, rules)
    shown = redacted.str.strip().str.replace(r"\s+", " ", regex=True)
    frame = pd.DataFrame(
        {"query_raw": texts, "query_text": shown, "query": normalize_series(redacted)}
    )
    return frame, counts


def load_log(conn: duckdb.DuckDBPyConnection, path: Path, options: LoadOptions) -> LoadResult:
    """Load one log file into the workspace (one transaction)."""
    path = Path(path)
    layout = sniff_log(
        path,
        fmt=options.fmt,
        encoding=options.encoding,
        delimiter=options.delimiter,
        overrides=options.columns,
    )
    sha = file_sha256(path)
    found = run(conn, "file_by_hash", {"sha256": sha}).fetchall()
    known = found[0] if found else None
    if known:
        return LoadResult(
            str(path), int(known[0]), True, 0, 0, 0, 0, {}, layout.mapping, layout.ignored
        )
    try:
        return _load_staged(conn, path, layout, sha, options)
    except duckdb.OutOfMemoryException as exc:
        raise InputError(
            f"{path}: loading needs more memory than DuckDB may use "
            f"({str(exc).splitlines()[0][:120]}); set QUERYGAP_MEMORY_LIMIT higher, e.g. 4GB"
        ) from None
    finally:
        conn.execute("SET preserve_insertion_order = true")


def _read_error(path: Path, layout: LogLayout, exc: duckdb.Error) -> InputError:
    """The InputError for a file the reader gave up on."""
    first_line = str(exc).splitlines()[0]
    if "gzip" in first_line.lower():
        return InputError(f"{path}: the gzip data ends early or is damaged ({first_line})")
    hint = (
        "; the file may mix line endings (CR LF and LF): convert it, e.g. with dos2unix"
        if "state machine" in first_line
        else ""
    )
    return InputError(f"{path}: cannot be read as {layout.format}: {first_line}{hint}")


def _load_staged(
    conn: duckdb.DuckDBPyConnection, path: Path, layout: LogLayout, sha: str, options: LoadOptions
) -> LoadResult:
    file_id = int(run(conn, "next_file_id").fetchall()[0][0])  # type: ignore[index]
    reader, first, has_rejects = _reader_sql(layout)
    for table in ("qg_reject_errors", "qg_reject_scans"):
        conn.execute(f"DROP TABLE IF EXISTS {table}")
    conn.execute(f"CREATE OR REPLACE TEMP VIEW stage_raw AS {_raw_sql(layout, reader)}")
    names = layout.mapping
    conn.execute(f"SET TimeZone = {_sql_str(options.time_zone)}")
    try:
        # One pass over the file: read, parse, check. The table's rowids keep the file order.
        run(
            conn,
            "stage_typed",
            {
                "time_format": options.time_format or "%Y-%m-%d %H:%M:%S",
                "use_format": bool(options.time_format),
                "max_query_chars": options.max_query_chars,
                "future_slack_hours": options.future_slack_hours,
                "f_timestamp": names["timestamp"],
                "f_query": names["query"],
                "f_results": names.get("results", ""),
                "f_clicks": names.get("clicks", ""),
            },
        )
    except duckdb.OutOfMemoryException:
        raise
    except duckdb.Error as exc:
        raise _read_error(path, layout, exc) from None
    finally:
        conn.execute("SET TimeZone = 'UTC'")
    # Later statements may reorder rows freely, which lets DuckDB spill them to disk.
    conn.execute("SET preserve_insertion_order = false")
    returned, blank_lines = run(conn, "stage_read_counts").fetchall()[0]  # type: ignore[misc]
    n_read = int(returned)
    structural = pd.DataFrame(columns=["line", "field", "reason", "raw"])
    if has_rejects:
        structural = conn.execute(
            "SELECT line, any_value(column_name) AS field, any_value(error_type) AS kind, "
            "any_value(error_message) AS message, any_value(csv_line) AS raw "
            "FROM qg_reject_errors GROUP BY line ORDER BY line"
        ).df()
        structural["reason"] = [
            _REJECT_WORDS.get(k, m).format(encoding=layout.encoding)
            for k, m in zip(structural["kind"], structural["message"], strict=True)
        ]
        if layout.format == "jsonl":
            structural["field"] = "(line)"
        structural["field"] = structural["field"].fillna("(line)")
    conn.execute("SET VARIABLE qg_first_line = ?", [first])
    if len(structural):
        conn.execute(
            "CREATE OR REPLACE TEMP TABLE stage_bad_lines AS SELECT unnest(?::BIGINT[]) AS line",
            [structural["line"].astype("int64").tolist()],
        )
        run(conn, "stage_line_shift", {"first": first, "total": n_read + len(structural)})
        run(conn, "stage_numbered_around_rejects")
    else:
        run(conn, "stage_numbered_in_order")

    texts = run(conn, "stage_query_texts").df()["query_raw"].astype(object)
    inner_pad, outer_pad = hmac_pads(workspace_secret(conn))
    # Python redacts and normalizes the texts while DuckDB (which releases the GIL) hashes keys.
    with ThreadPoolExecutor(max_workers=1) as pool:
        mapped = pool.submit(query_map, texts, options.redaction)
        run(conn, "stage_key_map", {"inner_pad": inner_pad, "outer_pad": outer_pad})
        frame, counts = mapped.result()
    conn.register("stage_query_map_df", frame)
    conn.execute("CREATE OR REPLACE TEMP TABLE stage_query_map AS SELECT * FROM stage_query_map_df")
    conn.unregister("stage_query_map_df")
    del frame, texts
    earlier = bool(conn.execute("SELECT count(*) FROM log_files").fetchall()[0][0])  # type: ignore[index]

    # Staging used temp tables only; from here on the workspace changes, all or nothing.
    with transaction(conn):
        run(conn, "store_new_searches", {"file_id": file_id})
        if earlier:
            # Only rows another file could also hold are fingerprinted (sql/load.sql).
            run(conn, "stage_fingerprints", {"file_id": file_id})
            run(conn, "stage_number_repeats")
            run(conn, "store_fingerprints")
            run(conn, "store_duplicates", {"file_id": file_id})
            run(conn, "drop_duplicate_searches", {"file_id": file_id})
        run(conn, "store_typed_rejects", {"file_id": file_id})
        if len(structural):
            raw, _ = redact_series(structural["raw"].astype(object).fillna(""), options.redaction)
            raw = raw.str.slice(0, 2000)
            if {"session", "user"} & names.keys():
                # A malformed line's fields cannot be told apart, so its session or user key
                # could not be hashed: keep no raw text rather than a raw visitor key.
                raw = pd.Series([None] * len(raw), dtype=object)
            conn.register(
                "stage_struct_df",
                pd.DataFrame(
                    {
                        "file_id": file_id,
                        "line": structural["line"].astype("int64"),
                        "field": structural["field"],
                        "reason": structural["reason"],
                        "raw": raw.to_numpy(),
                    }
                ),
            )
            conn.execute("INSERT INTO rejects SELECT * FROM stage_struct_df")
            conn.unregister("stage_struct_df")
        parsed, typed_rejects, dupes = run(conn, "load_counts", {"file_id": file_id}).fetchall()[0]  # type: ignore[misc]
        rejected = int(typed_rejects) + len(structural)
        rows_read = n_read - int(blank_lines) + len(structural)
        loaded = int(parsed) - int(dupes)
        for kind, items in counts.items():
            if items:
                conn.execute("INSERT INTO redactions VALUES (?, ?, ?)", [file_id, kind, int(items)])
        run(
            conn,
            "insert_log_file",
            {
                "file_id": file_id,
                "path": str(path),
                "sha256": sha,
                "format": layout.format,
                "columns_used": json.dumps(layout.mapping),
                "time_zone": options.time_zone,
                "redacted": options.redaction.enabled,
                "rows_read": rows_read,
                "rows_loaded": loaded,
                "rows_rejected": rejected,
                "rows_duplicate": int(dupes),
            },
        )
    conn.execute("DROP VIEW IF EXISTS stage_numbered")
    conn.execute("DROP VIEW IF EXISTS stage_raw")
    for table in (
        "stage_typed",
        "stage_bad_lines",
        "stage_line_shift",
        "stage_query_map",
        "stage_key_map",
        "stage_fingerprints",
    ):
        conn.execute(f"DROP TABLE IF EXISTS {table}")
    return LoadResult(
        str(path),
        file_id,
        False,
        rows_read,
        loaded,
        rejected,
        int(dupes),
        {k: int(v) for k, v in counts.items()},
        layout.mapping,
        layout.ignored,
    )
