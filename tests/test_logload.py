"""Loading query logs: formats, column detection, rejects with file/line/field, reconciliation."""

from __future__ import annotations

import gzip
import json
from pathlib import Path

import duckdb
import pandas as pd
import pytest

from querygap.errors import InputError
from querygap.logload import LoadOptions, load_log

HEADER = "timestamp,visitor_id,query,results,clicks\n"


def csv_file(tmp_path: Path, body: str, name: str = "log.csv", header: str = HEADER) -> Path:
    path = tmp_path / name
    path.write_text(header + body, encoding="utf-8")
    return path


def searches(conn: duckdb.DuckDBPyConnection) -> pd.DataFrame:
    return conn.execute("SELECT * FROM searches ORDER BY file_id, line").df()


def rejects(conn: duckdb.DuckDBPyConnection) -> list[tuple]:
    return conn.execute("SELECT line, field, reason FROM rejects ORDER BY line").fetchall()


def test_csv_loads_with_lines_and_normalized_query(conn, tmp_path) -> None:
    path = csv_file(
        tmp_path,
        "2026-11-02T08:00:00+01:00,v1,  Pay  my BILL ,3,1\n"
        "2026-11-02T09:00:00Z,v2,meter reading,0,0\n",
    )
    result = load_log(conn, path, LoadOptions())
    assert (result.rows_read, result.loaded, result.rejected, result.duplicates) == (2, 2, 0, 0)
    rows = searches(conn)
    assert list(rows["line"]) == [2, 3]
    assert list(rows["query"]) == ["pay my bill", "meter reading"]
    assert list(rows["query_text"]) == ["Pay my BILL", "meter reading"]
    # The offset is kept as an instant: 08:00+01:00 is 07:00 UTC.
    assert str(rows["searched_at"][0].tz_convert("UTC")) == "2026-11-02 07:00:00+00:00"
    assert list(rows["results"]) == [3, 0]


def test_naive_timestamps_read_in_the_stated_zone(conn, tmp_path) -> None:
    path = csv_file(tmp_path, "2026-07-01 12:00:00,v1,leak,1,0\n")
    load_log(conn, path, LoadOptions(time_zone="Europe/Vienna"))
    ts = searches(conn)["searched_at"][0].tz_convert("UTC")
    assert str(ts) == "2026-07-01 10:00:00+00:00"  # Vienna is UTC+2 in summer


def test_loading_the_same_file_twice_changes_nothing(conn, tmp_path) -> None:
    path = csv_file(tmp_path, "2026-11-02T08:00:00Z,v1,leak,1,0\n")
    load_log(conn, path, LoadOptions())
    again = load_log(conn, path, LoadOptions())
    assert again.skipped and "already loaded" in again.reconciliation()
    assert len(searches(conn)) == 1


def test_overlapping_exports_do_not_double_count(conn, tmp_path) -> None:
    a = csv_file(
        tmp_path,
        "2026-11-02T08:00:00Z,v1,leak,1,0\n2026-11-02T08:00:00Z,v1,leak,1,0\n"
        "2026-11-02T08:05:00Z,v2,bill,1,1\n",
        name="a.csv",
    )
    b = csv_file(
        tmp_path,
        "2026-11-02T08:00:00Z,v1,leak,1,0\n2026-11-02T08:05:00Z,v2,bill,1,1\n"
        "2026-11-02T09:00:00Z,v3,meter,2,1\n",
        name="b.csv",
    )
    load_log(conn, a, LoadOptions())
    second = load_log(conn, b, LoadOptions())
    # Two identical rows in a.csv stay two searches; b.csv repeats one of them and the bill row.
    assert (second.rows_read, second.loaded, second.duplicates) == (3, 1, 2)
    assert len(searches(conn)) == 4
    assert conn.execute("SELECT count(*) FROM duplicates").fetchall()[0][0] == 2


def test_bad_rows_are_kept_with_line_field_and_reason(conn, tmp_path) -> None:
    path = csv_file(
        tmp_path,
        "2026-11-02T08:00:00Z,v1,good,1,0\n"  # line 2
        "yesterday,v1,bad time,1,0\n"  # line 3
        "2026-11-02T08:00:00Z,v1,,1,0\n"  # line 4
        "2026-11-02T08:00:00Z,v1,neg,-1,0\n"  # line 5
        "2026-11-02T08:00:00Z,v1,nan,1,many\n"  # line 6
        "2026-11-02T08:00:00Z,v1,short\n"  # line 7
        "2099-01-01T00:00:00Z,v1,future,1,0\n",
    )  # line 8
    result = load_log(conn, path, LoadOptions())
    assert (result.rows_read, result.loaded, result.rejected) == (7, 1, 6)
    got = {line: (field, reason) for line, field, reason in rejects(conn)}
    assert got[3][0] == "timestamp" and "is not a date and time" in got[3][1]
    assert got[4] == ("query", "the query is missing or empty")
    assert got[5] == ("results", "the result count -1 is negative")
    assert got[6][0] == "clicks" and "not a whole number" in got[6][1]
    assert "fewer fields" in got[7][1]
    assert "in the future" in got[8][1]
    assert result.rows_read == result.loaded + result.rejected + result.duplicates


def test_quoted_fields_with_newlines_and_delimiters(conn, tmp_path) -> None:
    path = csv_file(
        tmp_path,
        '2026-11-02T08:00:00Z,v1,"bill, ""final""\nnotice",1,0\n'
        "2026-11-02T08:01:00Z,v1,after,1,0\n",
    )
    result = load_log(conn, path, LoadOptions())
    assert result.loaded == 2
    rows = searches(conn)
    assert rows["query_text"][0] == 'bill, "final" notice'
    assert list(rows["line"]) == [2, 3]  # record numbers: the quoted newline does not shift them


def test_tsv_semicolon_and_header_spellings(conn, tmp_path) -> None:
    tsv = tmp_path / "log.tsv"
    tsv.write_text("Time\tSearch Term\tHits\n2026-11-02T08:00:00Z\tleak\t2\n", encoding="utf-8")
    semi = tmp_path / "semi.csv"
    semi.write_text("date;keyword;user_id\n2026-11-02T08:00:00Z;meter;u1\n", encoding="utf-8")
    assert load_log(conn, tsv, LoadOptions()).columns == {
        "timestamp": "Time",
        "query": "Search Term",
        "results": "Hits",
    }
    assert load_log(conn, semi, LoadOptions()).loaded == 1


def test_jsonl_gzip_with_bad_lines(conn, tmp_path) -> None:
    path = tmp_path / "log.jsonl.gz"
    lines = [
        json.dumps({"time": "2026-11-02T08:00:00Z", "search_term": "leak", "hits": 2}),
        "not json at all",
        json.dumps({"time": "2026-11-02T08:01:00Z", "search_term": "bill", "hits": "x"}),
        json.dumps(["a", "list"]),
    ]
    with gzip.open(path, "wt", encoding="utf-8") as fh:
        fh.write("\n".join(lines) + "\n")
    result = load_log(conn, path, LoadOptions())
    assert (result.rows_read, result.loaded, result.rejected) == (4, 1, 3)
    got = {line: field for line, field, _ in rejects(conn)}
    assert got == {2: "(line)", 3: "hits", 4: "(line)"}


def test_parquet(conn, tmp_path) -> None:
    path = tmp_path / "log.parquet"
    frame = pd.DataFrame({"ts": pd.to_datetime(["2026-11-02T08:00:00Z"]), "q": ["leak"]})
    frame.to_parquet(path)
    result = load_log(conn, path, LoadOptions())
    assert result.loaded == 1 and searches(conn)["line"][0] == 1


def test_personal_data_is_redacted_before_storage(conn, tmp_path) -> None:
    path = csv_file(
        tmp_path,
        "2026-11-02T08:00:00Z,v1,bill for jane.doe@example.com,1,0\n"
        "2026-11-02T08:01:00Z,v1,card 4111 1111 1111 1111,0,0\n",
    )
    result = load_log(conn, path, LoadOptions())
    stored = " ".join(searches(conn)["query_text"]) + " ".join(searches(conn)["query"])
    assert "jane.doe" not in stored and "4111" not in stored
    assert result.redacted.get("email") == 1
    # Visitor keys are stored as keyed hashes, never as given.
    assert "v1" not in set(searches(conn)["user_key"])


@pytest.mark.parametrize(
    ("body", "message"),
    [
        ("", "the file is empty"),
        ("only,two\n", "no column for query and timestamp"),
    ],
)
def test_unusable_files_name_the_file(tmp_path, conn, body, message) -> None:
    path = tmp_path / "bad.csv"
    path.write_text(body, encoding="utf-8")
    with pytest.raises(InputError, match=message) as err:
        load_log(conn, path, LoadOptions())
    assert str(path) in str(err.value)


def test_header_only_loads_nothing(conn, tmp_path) -> None:
    result = load_log(conn, csv_file(tmp_path, ""), LoadOptions())
    assert (result.rows_read, result.loaded) == (0, 0)


def test_truncated_gzip_is_an_error_and_leaves_nothing(conn, tmp_path) -> None:
    path = tmp_path / "cut.csv.gz"
    data = gzip.compress((HEADER + "2026-11-02T08:00:00Z,v1,leak,1,0\n" * 5000).encode())
    path.write_bytes(data[: len(data) // 2])
    with pytest.raises(InputError, match="gzip"):
        load_log(conn, path, LoadOptions())
    assert conn.execute("SELECT count(*) FROM searches").fetchall()[0][0] == 0
    assert conn.execute("SELECT count(*) FROM log_files").fetchall()[0][0] == 0


def test_latin1_and_utf16(conn, tmp_path) -> None:
    latin = tmp_path / "latin.csv"
    latin.write_bytes((HEADER + "2026-11-02T08:00:00Z,v1,café,1,0\n").encode("latin-1"))
    bad = load_log(conn, latin, LoadOptions())
    assert bad.rejected == 1 and "not valid utf-8" in rejects(conn)[0][2]
    latin2 = tmp_path / "latin2.csv"
    latin2.write_bytes((HEADER + "2026-11-02T08:00:01Z,v1,café,1,0\n").encode("latin-1"))
    assert load_log(conn, latin2, LoadOptions(encoding="latin-1")).loaded == 1
    utf16 = tmp_path / "u16.csv"
    utf16.write_bytes((HEADER + "2026-11-02T08:00:02Z,v1,thé,1,0\n").encode("utf-16"))
    assert load_log(conn, utf16, LoadOptions()).loaded == 1
    assert set(searches(conn)["query"]) == {"café", "thé"}


def test_wrong_delimiter_is_explained(conn, tmp_path) -> None:
    path = tmp_path / "x.csv"
    path.write_text("timestamp query\n2026 leak\n", encoding="utf-8")
    with pytest.raises(InputError, match="pass --delimiter"):
        load_log(conn, path, LoadOptions())
