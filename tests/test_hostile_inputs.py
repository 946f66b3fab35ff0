"""Logs and content are hostile input: every bad case ends in a clear error or a kept reject.

Each test is one row of the "Bad input catalogue" in DEVELOPERS.md. The outcome is either an
InputError naming the file (and the line and field where there is one), or the row stored in
``rejects`` with its line, field and reason; never a traceback, never a row lost without a trace.
"""

from __future__ import annotations

import codecs
import gzip
import json
import os
from pathlib import Path

import duckdb
import pytest

from querygap.errors import InputError
from querygap.logload import LoadOptions, LoadResult, load_log
from querygap.pageload import ContentOptions, load_content

HEADER = "timestamp,visitor_id,query,results,clicks\n"
ROW = "2026-11-02T08:00:00Z,v1,leak,1,0\n"


def write_bytes(tmp_path: Path, name: str, data: bytes) -> Path:
    path = tmp_path / name
    path.write_bytes(data)
    return path


def rejects(conn: duckdb.DuckDBPyConnection) -> dict[int, tuple[str, str, str | None]]:
    rows = conn.execute("SELECT line, field, reason, raw FROM rejects ORDER BY line").fetchall()
    return {line: (field, reason, raw) for line, field, reason, raw in rows}


def stored(conn: duckdb.DuckDBPyConnection) -> list[tuple[int, str]]:
    return conn.execute("SELECT line, query_text FROM searches ORDER BY line").fetchall()


def reconciles(result: LoadResult) -> bool:
    return result.rows_read == result.loaded + result.rejected + result.duplicates


def test_empty_file_is_an_error(conn, tmp_path) -> None:
    path = write_bytes(tmp_path, "empty.csv", b"")
    with pytest.raises(InputError, match=r"empty\.csv:1: the file is empty"):
        load_log(conn, path, LoadOptions())
    jsonl = write_bytes(tmp_path, "empty.jsonl", b"\n\n")
    with pytest.raises(InputError, match=r"empty\.jsonl:1: the file is empty"):
        load_log(conn, jsonl, LoadOptions())


def test_header_only_reads_no_rows_and_records_the_file(conn, tmp_path) -> None:
    result = load_log(conn, write_bytes(tmp_path, "h.csv", HEADER.encode()), LoadOptions())
    assert (result.rows_read, result.loaded, result.rejected) == (0, 0, 0)
    assert conn.execute("SELECT rows_read FROM log_files").fetchall() == [(0,)]


def test_missing_required_column_names_file_line_and_field(conn, tmp_path) -> None:
    path = write_bytes(tmp_path, "m.csv", b"timestamp,visitor\n2026-11-02T08:00:00Z,v1\n")
    with pytest.raises(InputError, match=r"m\.csv:1: no column for query; .*--column query="):
        load_log(conn, path, LoadOptions())


def test_unknown_extra_columns_are_ignored_and_stated(conn, tmp_path) -> None:
    path = write_bytes(
        tmp_path, "x.csv", b"timestamp,query,ip,referrer\n2026-11-02T08:00:00Z,leak,192.0.2.7,r\n"
    )
    result = load_log(conn, path, LoadOptions())
    assert result.loaded == 1 and result.ignored == ("ip", "referrer")
    columns = {c for (c,) in conn.execute("SELECT column_name FROM duckdb_columns()").fetchall()}
    assert "referrer" not in columns and "ip" not in columns


def test_wrong_delimiter_in_header_is_an_error(conn, tmp_path) -> None:
    path = write_bytes(tmp_path, "w.csv", b"timestamp query\n2026-11-02T08:00:00Z leak\n")
    with pytest.raises(InputError, match=r"w\.csv:1: the header has one column.*--delimiter"):
        load_log(conn, path, LoadOptions())


def test_rows_with_another_delimiter_than_the_header_are_rejected(conn, tmp_path) -> None:
    body = HEADER + ROW + "2026-11-02T08:01:00Z;v1;bill;1;0\n"
    result = load_log(conn, write_bytes(tmp_path, "d.csv", body.encode()), LoadOptions())
    assert (result.loaded, result.rejected) == (1, 1) and reconciles(result)
    assert "fewer fields than the header has" in rejects(conn)[3][1]


def test_quoted_fields_with_newlines_and_delimiters(conn, tmp_path) -> None:
    body = HEADER + '2026-11-02T08:00:00Z,v1,"a, ""b""\r\nc;d|e",1,0\n' + ROW
    result = load_log(conn, write_bytes(tmp_path, "q.csv", body.encode()), LoadOptions())
    assert result.loaded == 2 and stored(conn)[0] == (2, 'a, "b" c;d|e')


def test_truncated_last_line_without_newline_is_loaded(conn, tmp_path) -> None:
    body = HEADER + ROW + "2026-11-02T08:01:00Z,v1,bill,1,0"  # no final newline
    result = load_log(conn, write_bytes(tmp_path, "t.csv", body.encode()), LoadOptions())
    assert result.loaded == 2 and stored(conn)[1] == (3, "bill")


@pytest.mark.parametrize(
    ("cut", "field", "reason"),
    [
        ('2026-11-02T08:01:00Z,v1,"bil', "query", "a quote that is not closed"),
        ("2026-11-02T08:01", "visitor_id", "fewer fields than the header has"),
    ],
)
def test_last_line_cut_mid_field_is_rejected(conn, tmp_path, cut, field, reason) -> None:
    path = write_bytes(tmp_path, "c.csv", (HEADER + ROW + cut).encode())
    result = load_log(conn, path, LoadOptions())
    assert (result.rows_read, result.loaded, result.rejected) == (2, 1, 1)
    assert rejects(conn)[3][:2] == (field, reason)


def test_invalid_utf8_bytes_reject_only_their_line(conn, tmp_path) -> None:
    data = (HEADER + ROW).encode() + b"2026-11-02T08:01:00Z,v1,caf\xe9 \xff,1,0\n" + ROW.encode()
    result = load_log(conn, write_bytes(tmp_path, "u.csv", data), LoadOptions())
    assert (result.loaded, result.rejected) == (2, 1)
    assert "not valid utf-8; pass --encoding" in rejects(conn)[3][1]


def test_latin1_declared_is_read(conn, tmp_path) -> None:
    data = (HEADER + "2026-11-02T08:00:00Z,v1,café crème,1,0\n").encode("latin-1")
    result = load_log(conn, write_bytes(tmp_path, "l.csv", data), LoadOptions(encoding="latin1"))
    assert result.loaded == 1 and stored(conn) == [(2, "café crème")]


def test_utf16_with_bom_is_read(conn, tmp_path) -> None:
    data = codecs.BOM_UTF16_LE + (HEADER + "2026-11-02T08:00:00Z,v1,thé,1,0\n").encode("utf-16-le")
    result = load_log(conn, write_bytes(tmp_path, "le.csv", data), LoadOptions())
    assert result.loaded == 1 and stored(conn) == [(2, "thé")]


def test_utf16_big_endian_is_refused_not_read_as_nothing(conn, tmp_path) -> None:
    # Before the fix DuckDB read this file as zero rows without a word.
    data = codecs.BOM_UTF16_BE + (HEADER + ROW).encode("utf-16-be")
    with pytest.raises(InputError, match=r"be\.csv: the file is UTF-16 big-endian.*iconv"):
        load_log(conn, write_bytes(tmp_path, "be.csv", data), LoadOptions())


def test_nul_bytes_without_a_bom_are_refused(conn, tmp_path) -> None:
    data = (HEADER + ROW).encode("utf-16-le")  # UTF-16 without its byte-order mark
    with pytest.raises(InputError, match=r"nul\.csv: the file has NUL bytes.*--encoding utf-16"):
        load_log(conn, write_bytes(tmp_path, "nul.csv", data), LoadOptions())


def test_a_ten_megabyte_line_is_rejected_and_the_rest_loads(conn, tmp_path) -> None:
    huge = "2026-11-02T08:00:00Z,v1," + "x" * (10 << 20) + ",1,0\n"
    path = write_bytes(tmp_path, "big.csv", (HEADER + ROW + huge + ROW).encode())
    result = load_log(conn, path, LoadOptions())
    assert (result.rows_read, result.loaded, result.rejected) == (3, 2, 1)
    field, reason, _ = rejects(conn)[3]
    assert field == "(line)" and "longer than the reader's limit" in reason
    # The reject keeps at most 2,000 characters of the line (here none: the log has visitor ids).
    assert conn.execute("SELECT max(length(raw)) FROM rejects").fetchall()[0][0] is None


def test_a_ten_megabyte_json_line_is_rejected(conn, tmp_path) -> None:
    line = json.dumps({"time": "2026-11-02T08:00:00Z", "q": "x" * (10 << 20)})
    good = json.dumps({"time": "2026-11-02T08:00:00Z", "q": "leak"})
    path = write_bytes(tmp_path, "big.jsonl", f"{good}\n{line}\n{good}\n".encode())
    result = load_log(conn, path, LoadOptions())
    assert (result.loaded, result.rejected) == (2, 1) and rejects(conn)[2][0] == "(line)"
    assert len(rejects(conn)[2][2] or "") == 2000  # no key column: the raw text is kept, capped


def test_timestamps_mixed_naive_future_and_unparseable(conn, tmp_path) -> None:
    body = HEADER + "".join(
        f"{ts},v1,q{i},1,0\n"
        for i, ts in enumerate(
            [
                "2026-11-02T08:00:00Z",  # 2: instant
                "2026-11-02 08:00:00",  # 3: naive, read in --tz
                "2026-11-02T08:00:00+05:30",  # 4: offset
                "1762070400",  # 5: epoch seconds (2025-11-02T08:00:00Z)
                "1762070400000",  # 6: epoch milliseconds
                "02/11/2026 08:00",  # 7: another layout
                "2999-01-01T00:00:00Z",  # 8: future
                "yesterday",  # 9: unparseable
                "2026-13-45T99:00:00Z",  # 10: impossible
                "",  # 11: missing
            ]
        )
    )
    path = write_bytes(tmp_path, "ts.csv", body.encode())
    result = load_log(conn, path, LoadOptions(time_zone="Europe/Vienna"))
    assert (result.loaded, result.rejected) == (5, 5)
    times = dict(
        conn.execute(
            "SELECT line, strftime(searched_at AT TIME ZONE 'UTC', '%Y-%m-%dT%H:%M') FROM searches"
        ).fetchall()
    )
    # Vienna is UTC+1 in November; +05:30 is 02:30 UTC (computed by hand).
    assert times == {
        2: "2026-11-02T08:00",
        3: "2026-11-02T07:00",
        4: "2026-11-02T02:30",
        5: "2025-11-02T08:00",
        6: "2025-11-02T08:00",
    }
    got = rejects(conn)
    assert {line: got[line][0] for line in got} == dict.fromkeys(range(7, 12), "timestamp")
    assert "pass --time-format" in got[7][1] and "in the future" in got[8][1]
    assert got[11][1] == "the timestamp is missing"
    fmt = write_bytes(tmp_path, "fmt.csv", (HEADER + "02/11/2026 08:00,v1,q,1,0\n").encode())
    assert load_log(conn, fmt, LoadOptions(time_format="%d/%m/%Y %H:%M")).loaded == 1


def test_negative_fractional_and_non_numeric_counts_are_rejected(conn, tmp_path) -> None:
    body = HEADER + (
        "2026-11-02T08:00:00Z,v1,a,-1,0\n"  # 2
        "2026-11-02T08:00:00Z,v1,b,many,0\n"  # 3
        "2026-11-02T08:00:00Z,v1,c,1.5,0\n"  # 4: was rounded to 2 before the fix
        "2026-11-02T08:00:00Z,v1,d,1,-3\n"  # 5
        "2026-11-02T08:00:00Z,v1,e,99999999999999999999999,0\n"  # 6: beyond BIGINT
        "2026-11-02T08:00:00Z,v1,f, 3.0 ,true\n"  # 7: kept as 3 and 1
        "2026-11-02T08:00:00Z,v1,g,+5,007\n"  # 8: kept as 5 and 7 (digits alone: the fast branch)
    )
    result = load_log(conn, write_bytes(tmp_path, "n.csv", body.encode()), LoadOptions())
    assert (result.loaded, result.rejected) == (2, 5)
    got = rejects(conn)
    assert got[2][1] == "the result count -1 is negative"
    assert got[4][1] == "the result count 1.5 is not a whole number"
    assert got[5][:2] == ("clicks", "the click count -3 is negative")
    assert {got[i][0] for i in (2, 3, 4, 6)} == {"results"}
    assert conn.execute("SELECT results, clicks FROM searches ORDER BY line").fetchall() == [
        (3, 1),
        (5, 7),
    ]


def test_duplicate_rows_in_one_file_are_separate_searches(conn, tmp_path) -> None:
    # Two visitors' identical searches in the same second are two searches, not one.
    path = write_bytes(tmp_path, "dup.csv", (HEADER + ROW * 3).encode())
    result = load_log(conn, path, LoadOptions())
    assert (result.loaded, result.duplicates) == (3, 0)
    # An overlapping export holding two of them, and a later search: the two are the first
    # file's 1st and 2nd, so they are duplicates, and the later one is new.
    later = ROW.replace("08:00:00Z", "08:00:01Z")
    again = load_log(
        conn, write_bytes(tmp_path, "b.csv", (HEADER + ROW * 2 + later).encode()), LoadOptions()
    )
    assert (again.loaded, again.duplicates) == (1, 2)
    occurrences = conn.execute(
        "SELECT file_id, line, occurrence FROM searches ORDER BY file_id, line"
    ).fetchall()
    assert occurrences == [(1, 2, 1), (1, 3, 2), (1, 4, 3), (2, 4, 1)]


@pytest.mark.parametrize("rows", [1, 50_000])
def test_gzip_that_ends_early_is_an_error_and_stores_nothing(conn, tmp_path, rows) -> None:
    data = gzip.compress((HEADER + ROW * rows).encode())
    path = write_bytes(tmp_path, "cut.csv.gz", data[: max(len(data) // 2, len(data) - 8)])
    with pytest.raises(InputError, match=r"cut\.csv\.gz: .*gzip"):
        load_log(conn, path, LoadOptions())
    tables = ("searches", "rejects", "log_files")
    assert [conn.execute(f"SELECT count(*) FROM {t}").fetchall()[0][0] for t in tables] == [0] * 3


def test_a_file_that_is_not_gzip_despite_its_name(conn, tmp_path) -> None:
    with pytest.raises(InputError, match=r"fake\.csv\.gz: cannot read it as gzip"):
        load_log(conn, write_bytes(tmp_path, "fake.csv.gz", b"plain text"), LoadOptions())


def test_crlf_json_lines_are_read(conn, tmp_path) -> None:
    # Before the fix the reader, told that lines end in LF, failed on CR LF files.
    lines = [json.dumps({"time": "2026-11-02T08:00:00Z", "q": q}) for q in ("a", "b")]
    path = write_bytes(tmp_path, "w.jsonl", ("\r\n".join(lines) + "\r\n").encode())
    result = load_log(conn, path, LoadOptions())
    assert result.loaded == 2 and stored(conn) == [(1, "a"), (2, "b")]


def test_mixed_line_endings_are_an_error_with_a_hint(conn, tmp_path) -> None:
    body = HEADER + ROW + ROW.replace("\n", "\r\n") + ROW
    with pytest.raises(InputError, match=r"mix\.csv: cannot be read as csv.*mix line endings"):
        load_log(conn, write_bytes(tmp_path, "mix.csv", body.encode()), LoadOptions())


def test_json_lines_that_are_not_objects_or_lack_fields(conn, tmp_path) -> None:
    lines = [
        json.dumps({"time": "2026-11-02T08:00:00Z", "q": "a"}),
        '{"time": "2026-11-02T08:00:00Z", "q": "cut',  # truncated
        json.dumps([1, 2]),
        json.dumps({"time": "2026-11-02T08:00:00Z", "q": None}),
        json.dumps({"time": "2026-11-02T08:00:00Z"}),
    ]
    path = write_bytes(tmp_path, "j.jsonl", "\n".join(lines).encode())
    result = load_log(conn, path, LoadOptions())
    assert (result.rows_read, result.loaded, result.rejected) == (5, 1, 4)
    got = rejects(conn)
    assert got[2][:2] == got[3][:2] == ("(line)", "the line is not a JSON object")
    assert got[4][:2] == got[5][:2] == ("q", "the query is missing or empty")


def test_rejected_lines_keep_no_raw_visitor_key(conn, tmp_path) -> None:
    body = HEADER + ROW + "2026-11-02T08:00:00Z,secret-visitor-42,bill,1,0,extra\n"
    result = load_log(conn, write_bytes(tmp_path, "k.csv", body.encode()), LoadOptions())
    assert result.rejected == 1
    field, reason, raw = rejects(conn)[3]
    assert "more fields than the header has" in reason and raw is None


# --------------------------------------------------------------------------------------------
# Content folders


def test_content_folder_with_binary_empty_nav_only_pages_and_symlink_loops(conn, tmp_path) -> None:
    site = tmp_path / "site"
    (site / "a").mkdir(parents=True)
    (site / "b").mkdir()
    (site / "a" / "good.html").write_text(
        "<html><body><nav>Home</nav><main><p>Pay your water bill online.</p></main></body></html>"
    )
    (site / "a" / "nav.html").write_text(
        "<html><body><nav><a>Home</a><a>Bills</a></nav><footer>(c) us</footer></body></html>"
    )
    (site / "a" / "empty.html").write_bytes(b"")
    (site / "a" / "blank.md").write_text("  \n\n")
    (site / "a" / "image.html").write_bytes(b"\x89PNG\r\n\x1a\n\x00\x00\x00\rIHDR" * 20)
    (site / "a" / "photo.jpg").write_bytes(b"\xff\xd8\xff\xe0")
    os.symlink("..", site / "a" / "up")  # a loop back to the root
    os.symlink("../b", site / "b" / "self")  # a folder that contains itself
    os.symlink("me.html", site / "a" / "me.html")  # a file link to itself
    result = load_content(conn, site, ContentOptions(source="site"))
    assert (result.read, result.added, result.rejected) == (9, 1, 8)
    assert result.read == result.added + result.changed + result.unchanged + result.rejected
    reasons = dict(conn.execute("SELECT path, reason FROM page_rejects").fetchall())
    assert reasons["a/image.html"] == "binary file (has NUL bytes)"
    assert reasons["a/photo.jpg"].startswith("not a page (.jpg)")
    assert reasons["a/up"] == reasons["b/self"] == "symlinked folder, not followed"
    assert "Too many levels of symbolic links" in reasons["a/me.html"]
    for page in ("a/nav.html", "a/empty.html", "a/blank.md"):
        assert reasons[page] == "no text left after removing navigation and boilerplate"
