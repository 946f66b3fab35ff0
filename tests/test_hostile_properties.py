"""Property tests: any generated log loads or is refused with a reason; counts always reconcile."""

from __future__ import annotations

import csv
import io
import json
import tempfile
from pathlib import Path

from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from querygap.errors import InputError
from querygap.logload import LoadOptions, load_log
from querygap.textnorm import normalize_query
from querygap.workspace import connect

GOOD_TS = st.sampled_from(["2026-11-02T08:00:00Z", "2026-11-02 09:30:00", "1762070400"])
BAD_TS = st.sampled_from(["", "yesterday", "2999-01-01T00:00:00Z", "31/12/2026", "2026-02-30"])
COUNT = st.one_of(st.integers(-3, 50).map(str), st.sampled_from(["", "x", "1.5", "true", "9" * 25]))
QUERY = st.one_of(
    st.text(max_size=30),
    st.sampled_from(["=SUM(1)", "mail ann@example.org", "4111 1111 1111 1111", "a,b", 'q"q']),
)
ROW = st.fixed_dictionaries(
    {
        "timestamp": st.one_of(GOOD_TS, BAD_TS),
        "visitor": st.sampled_from(["v1", "v2", ""]),
        "query": QUERY,
        "results": COUNT,
        "clicks": COUNT,
    }
)


def as_csv(rows: list[dict[str, str]]) -> bytes:
    out = io.StringIO()
    writer = csv.writer(out, lineterminator="\n")
    writer.writerow(["timestamp", "visitor_id", "query", "results", "clicks"])
    writer.writerows([list(r.values()) for r in rows])
    return out.getvalue().encode("utf-8", errors="surrogatepass")


def as_jsonl(rows: list[dict[str, str]], junk: list[bool]) -> bytes:
    lines = ["{not json" if bad else json.dumps(r) for r, bad in zip(rows, junk, strict=True)]
    return ("\n".join(lines) + "\n").encode("utf-8", errors="surrogatepass")


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(
    rows=st.lists(ROW, min_size=1, max_size=25),
    fmt=st.sampled_from(["csv", "jsonl"]),
    junk=st.lists(st.booleans(), min_size=25, max_size=25),
    repeat=st.booleans(),
)
def test_any_log_loads_or_is_refused_and_reconciles(rows, fmt, junk, repeat) -> None:
    data = as_csv(rows) if fmt == "csv" else as_jsonl(rows, junk[: len(rows)])
    with tempfile.TemporaryDirectory() as tmp:
        conn = connect(None)
        try:
            path = Path(tmp) / f"log.{fmt}"
            path.write_bytes(data)
            try:
                result = load_log(conn, path, LoadOptions())
            except InputError as exc:
                assert str(path) in str(exc)  # refused, with the file named
                return
            assert result.rows_read == result.loaded + result.rejected + result.duplicates
            stored = conn.execute("SELECT count(*) FROM searches").fetchall()[0][0]
            kept = conn.execute("SELECT count(*) FROM rejects WHERE reason <> ''").fetchall()[0][0]
            assert (stored, kept) == (result.loaded, result.rejected)
            keyed = conn.execute("SELECT count(DISTINCT (file_id, line)) FROM searches").fetchall()
            assert keyed[0][0] == stored  # one search per record (searches has no primary key)
            if repeat:  # the same rows again, in a file with other bytes: all already loaded
                copy = Path(tmp) / f"copy.{fmt}"
                copy.write_bytes(data + b"\n")
                again = load_log(conn, copy, LoadOptions())
                assert (again.loaded, again.duplicates) == (0, result.loaded)
        finally:
            conn.close()


@settings(max_examples=300, deadline=None)
@given(st.text(max_size=60))
def test_normalizing_twice_changes_nothing(text) -> None:
    once = normalize_query(text)
    assert normalize_query(once) == once
    assert once == once.strip() and "  " not in once
