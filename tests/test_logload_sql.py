"""The set-based load: record numbers around rejected lines, key hashing and fingerprints in SQL.

The load computes in DuckDB what Python used to compute row by row; each check below compares the
SQL result with an outside reference (the standard library's hmac and hashlib, RFC 4231) or with
the record numbers of the file itself.
"""

from __future__ import annotations

import hashlib
import hmac
from pathlib import Path

import duckdb
import pandas as pd
import pytest

from querygap.logload import LoadOptions, load_log
from querygap.redaction import hmac_pads, keyed_hash_series
from querygap.workspace import SCHEMA_DIR, connect, run

HEADER = "timestamp,session,visitor_id,query,results\n"


def csv_file(tmp_path: Path, body: str, name: str = "log.csv") -> Path:
    path = tmp_path / name
    path.write_text(HEADER + body, encoding="utf-8")
    return path


def sql_hashes(conn: duckdb.DuckDBPyConnection, keys: list[str], secret: bytes) -> dict[str, str]:
    """Run the load's own statement stage_key_map over ``keys`` (as session keys).

    Returns each key's stored UBIGINT printed as 16 hex digits, as the tool shows it.
    """
    conn.execute(
        "CREATE OR REPLACE TEMP TABLE stage_typed AS SELECT k AS session_raw, "
        "NULL::VARCHAR AS user_raw, NULL::VARCHAR AS problem, false AS blank "
        "FROM unnest(?::VARCHAR[]) t(k)",
        [keys],
    )
    inner, outer = hmac_pads(secret)
    run(conn, "stage_key_map", {"inner_pad": inner, "outer_pad": outer})
    return dict(conn.execute("SELECT k, printf('%016x', hashed) FROM stage_key_map").fetchall())


# RFC 4231 (HMAC-SHA256 test vectors), test cases 1 and 6 (values from memory, and checked here
# against the standard library's hmac module as well): a 20-byte key, and a 131-byte key longer
# than the 64-byte block, which HMAC hashes first.
RFC_4231 = [
    (
        b"\x0b" * 20,
        "Hi There",
        "b0344c61d8db38535ca8afceaf0bf12b881dc200c9833da726e9376c2e32cff7",
    ),
    (
        b"\xaa" * 131,
        "Test Using Larger Than Block-Size Key - Hash Key First",
        "60e431591ee0b67f0d8a26aacbf5b77f8e0bc6213728c5140546040f0ee37f54",
    ),
]


@pytest.mark.parametrize(("secret", "data", "expected"), RFC_4231)
def test_sql_key_hash_is_hmac_sha256(conn, secret: bytes, data: str, expected: str) -> None:
    # Reference: RFC 4231 and Python's hmac module (RFC 2104 HMAC with SHA-256).
    assert hmac.new(secret, data.encode(), hashlib.sha256).hexdigest() == expected
    assert sql_hashes(conn, [data], secret) == {data: expected[:16]}


def test_sql_key_hash_equals_the_python_pseudonyms(conn) -> None:
    secret = bytes(range(32))
    keys = ["", "a", "v1", "café", "中文🙂", "\\x41", "'quoted'", "k" * 300, " spaced "]
    got = sql_hashes(conn, keys, secret)
    expected = keyed_hash_series(pd.Series(keys, dtype=object), secret)
    assert [got[k] for k in keys] == expected.tolist()


def test_hmac_pads_refuse_a_short_secret() -> None:
    with pytest.raises(ValueError, match="16 or more"):
        hmac_pads(b"short")


def test_stored_keys_and_fingerprints_follow_the_documented_formulas(conn, tmp_path) -> None:
    path = csv_file(
        tmp_path,
        "2026-11-02T08:00:00Z,s1,u1,Pay my bill,1\n"
        "2026-11-02T08:00:01.5Z,,u2,mail ann@example.org,0\n"
        "2026-11-02T08:00:02Z,s1,,  Meter   reading ,2\n",
    )
    load_log(conn, path, LoadOptions())
    # A file that overlaps no other is not fingerprinted; one that overlaps it fingerprints both
    # files' searches in the shared span (here its first and last search: all three).
    assert conn.execute("SELECT count(fingerprint) FROM searches").fetchall() == [(0,)]
    overlapping = csv_file(
        tmp_path,
        "2026-11-02T08:00:00Z,s1,u1,Pay my bill,1\n2026-11-02T08:00:02Z,s1,,  Meter   reading ,2\n",
        "b.csv",
    )
    assert load_log(conn, overlapping, LoadOptions()).duplicates == 2
    secret = bytes(conn.execute("SELECT secret FROM workspace_secret").fetchall()[0][0])
    rows = conn.execute(
        "SELECT epoch_us(searched_at), session_key, user_key, query_text, fingerprint "
        "FROM searches ORDER BY line"
    ).fetchall()
    raw_keys = [("s1", "u1"), (None, "u2"), ("s1", None)]
    for (micros, session, user, text, fingerprint), (raw_s, raw_u) in zip(
        rows, raw_keys, strict=True
    ):
        # Reference: Python's hmac and hashlib. The pseudonym is HMAC-SHA256 (its first 16 hex
        # digits, stored as the 64-bit number they spell); the fingerprint is the first 8 bytes
        # of the MD5 digest of instant (us), keys (16 hex digits) and text joined by U+001F,
        # read little-endian (DuckDB's md5_number_upper).
        for raw, stored in ((raw_s, session), (raw_u, user)):
            want = None if raw is None else hmac.new(secret, raw.encode(), "sha256").hexdigest()
            assert stored == (None if want is None else int(want[:16], 16))
        shown = ["" if key is None else f"{key:016x}" for key in (session, user)]
        joined = "\x1f".join([str(micros), *shown, text])
        digest = hashlib.md5(joined.encode()).digest()
        assert fingerprint == int.from_bytes(digest[:8], "little")
    check = conn.execute(
        "SELECT count(*) FROM searches WHERE fingerprint <> md5_number_upper(epoch_us(searched_at)"
        "::VARCHAR || chr(31) || coalesce(printf('%016x', session_key), '') || chr(31) "
        "|| coalesce(printf('%016x', user_key), '') "
        "|| chr(31) || query_text)"
    ).fetchall()
    assert check == [(0,)]


def test_record_numbers_skip_every_rejected_line(conn, tmp_path) -> None:
    good = "2026-11-02T08:00:{:02d}Z,s1,u1,q{},1\n"
    short = "2026-11-02T08:00:00Z,s1\n"  # fewer fields: the reader itself rejects it
    lines = {
        2: short,
        3: good.format(3, 3),
        4: short,
        5: short,
        6: good.format(6, 6),
        7: "yesterday,s1,u1,q7,1\n",  # parsed, then rejected for its timestamp
        8: short,
        9: good.format(9, 9),
        10: good.format(10, 10),
        11: short,
    }
    path = csv_file(tmp_path, "".join(lines[n] for n in sorted(lines)))
    result = load_log(conn, path, LoadOptions())
    assert (result.rows_read, result.loaded, result.rejected) == (10, 4, 6)
    stored = conn.execute("SELECT line, query FROM searches ORDER BY line").fetchall()
    assert stored == [(3, "q3"), (6, "q6"), (9, "q9"), (10, "q10")]
    kept = conn.execute("SELECT line, field FROM rejects ORDER BY line").fetchall()
    assert [line for line, _ in kept] == [2, 4, 5, 7, 8, 11]
    assert dict(kept)[7] == "timestamp"


def test_file_and_line_identify_each_search(conn, tmp_path) -> None:
    rows = [f"2026-11-02T08:{m:02d}:00Z,s{m % 3},u1,q{m % 4},1\n" for m in range(40)]
    # a.csv holds every row, then its first half again (repeats: occurrence 2)
    load_log(conn, csv_file(tmp_path, "".join(rows + rows[:20])), LoadOptions())
    b_csv = csv_file(tmp_path, "".join(rows) + "2026-11-02T09:00:00Z,s,u,new,1\n", "b.csv")
    load_log(conn, b_csv, LoadOptions())
    total, distinct = conn.execute(
        "SELECT count(*), count(DISTINCT (file_id, line)) FROM searches"
    ).fetchall()[0]
    assert total == distinct == 61  # 60 rows of a.csv; b.csv adds only its new row


def test_a_workspace_from_before_schema_6_keeps_its_searches(tmp_path) -> None:
    db = tmp_path / "old.duckdb"
    old = duckdb.connect(str(db))
    for script in sorted(SCHEMA_DIR.glob("00[1-5]_*.sql")):
        old.execute(script.read_text(encoding="utf-8"))
        old.execute(
            "INSERT INTO schema_version VALUES (?, ?, now())", [int(script.name[:3]), script.name]
        )
    old.execute(
        "INSERT INTO searches VALUES (1, 2, TIMESTAMPTZ '2026-11-02 08:00:00+00', 'Bill', 'bill', "
        "'abc', NULL, 1, 0, 42, 1)"
    )
    old.close()
    conn = connect(db)
    assert conn.execute("SELECT file_id, line, query, fingerprint FROM searches").fetchall() == [
        (1, 2, "bill", 42)
    ]
    keys = conn.execute(
        "SELECT count(*) FROM duckdb_constraints() WHERE table_name = 'searches' "
        "AND constraint_type = 'PRIMARY KEY'"
    ).fetchall()
    assert keys == [(0,)]
    conn.close()
