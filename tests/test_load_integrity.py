"""Nothing lost, nothing twice: a killed load leaves nothing; overlaps are not counted twice.

Also: the command prints the reconciliation, a locked workspace gives one clear line, and memory
stays bounded on a big log.
"""

from __future__ import annotations

import gzip
import json
import os
import re
import signal
import subprocess
import sys
from pathlib import Path

import duckdb
import pytest
from typer.testing import CliRunner

from querygap.cli import app
from querygap.logload import LoadOptions, load_log
from querygap.workspace import connect

sys.path.insert(0, str(Path(__file__).parent / "benchmarks"))
from bench_load_memory import generate_log, peak_rss_of_load  # noqa: E402

REPO = Path(__file__).resolve().parent.parent
HEADER = "timestamp,visitor_id,query,results,clicks\n"
TABLES = ("searches", "rejects", "duplicates", "redactions", "log_files")


def counts(conn: duckdb.DuckDBPyConnection) -> dict[str, int]:
    return {t: conn.execute(f"SELECT count(*) FROM {t}").fetchall()[0][0] for t in TABLES}


def rows(*specs: tuple[str, str, str]) -> str:
    return "".join(f"2026-11-02T{t}Z,{v},{q},1,0\n" for t, v, q in specs)


# A child that loads a file and stops, inside the load's transaction, right after the new
# searches were inserted; the parent then kills it with SIGKILL.
KILLED_CHILD = """
import sys, time
from pathlib import Path
import querygap.logload as logload
from querygap.workspace import connect

real_run = logload.run
def run(conn, name, params=None):
    result = real_run(conn, name, params)
    if name == "store_new_searches":
        n = conn.execute("SELECT count(*) FROM searches").fetchall()[0][0]
        print(f"inside the transaction with {n} searches", flush=True)
        time.sleep(600)
    return result
logload.run = run
conn = connect(Path(sys.argv[2]))
logload.load_log(conn, Path(sys.argv[1]), logload.LoadOptions())
"""


def test_a_load_killed_part_way_leaves_the_workspace_as_before(tmp_path) -> None:
    db = tmp_path / "ws.duckdb"
    small = tmp_path / "small.csv"
    small.write_text(HEADER + rows(("07:00:00", "v1", "leak"), ("07:01:00", "v2", "bill")))
    conn = connect(db)
    load_log(conn, small, LoadOptions())
    before = counts(conn)
    conn.close()
    big = generate_log(tmp_path / "big.csv", 2_000_000)
    child = subprocess.Popen(
        [sys.executable, "-c", KILLED_CHILD, str(big), str(db)],
        stdout=subprocess.PIPE,
        text=True,
        cwd=REPO,
        env={**os.environ, "PYTHONPATH": str(REPO)},
    )
    assert child.stdout is not None
    line = child.stdout.readline()
    inside = re.fullmatch(r"inside the transaction with (\d+) searches\n", line)
    assert inside and int(inside.group(1)) > 1_990_000  # the rows were written, not committed
    os.kill(child.pid, signal.SIGKILL)
    assert child.wait() == -signal.SIGKILL
    conn = connect(db)
    assert counts(conn) == before  # no partial rows, no log_files row
    again = load_log(conn, big, LoadOptions())
    assert (again.rows_read, again.loaded, again.rejected) == (2_000_000, 1_998_000, 2_000)
    after = counts(conn)
    assert after["searches"] == before["searches"] + 1_998_000
    assert after["log_files"] == 2
    conn.close()


@pytest.mark.parametrize(
    ("first", "second", "new", "dupes"),
    [
        # the second export inside the first
        ("ABCD", "BC", 0, 2),
        # the first inside the second
        ("BC", "ABCD", 2, 2),
        # overlapping tails
        ("ABC", "BCDE", 2, 2),
        # the same rows in another order
        ("ABC", "CAB", 0, 3),
        # a search repeated: two copies held, three in the new export -> one new
        ("AAB", "AAAB", 1, 3),
        # disjoint exports
        ("AB", "CD", 2, 0),
    ],
)
def test_overlapping_exports_count_each_search_once(conn, tmp_path, first, second, new, dupes):
    spec = {
        "A": ("08:00:00", "v1", "leak"),
        "B": ("08:01:00", "v2", "bill"),
        "C": ("08:02:00", "v1", "meter"),
        "D": ("08:03:00", "v3", "leak"),
        "E": ("08:04:00", "v3", "move home"),
    }
    a, b = tmp_path / "a.csv", tmp_path / "b.csv"
    a.write_text(HEADER + rows(*(spec[k] for k in first)))
    b.write_text(HEADER + rows(*(spec[k] for k in second)))
    load_log(conn, a, LoadOptions())
    result = load_log(conn, b, LoadOptions())
    assert (result.loaded, result.duplicates) == (new, dupes)
    assert result.rows_read == result.loaded + result.rejected + result.duplicates
    total = conn.execute("SELECT count(*) FROM searches").fetchall()[0][0]
    # Each letter is one search per copy; the union keeps the larger count of each letter.
    union = sum(max(first.count(k), second.count(k)) for k in spec)
    assert total == union


def test_the_same_searches_in_another_format_are_recognised(conn, tmp_path) -> None:
    body = rows(("08:00:00", "v1", "leak"), ("08:01:00", "v2", "bill"))
    csv_path = tmp_path / "a.csv"
    csv_path.write_text(HEADER + body)
    gz = tmp_path / "a.jsonl.gz"
    with gzip.open(gz, "wt") as fh:
        for line in body.splitlines():
            ts, visitor, query, results, clicks = line.split(",")
            record = {"timestamp": ts, "visitor_id": visitor, "query": query, "results": 1}
            fh.write(json.dumps(record) + "\n")
    load_log(conn, csv_path, LoadOptions())
    again = load_log(conn, gz, LoadOptions())
    assert (again.rows_read, again.loaded, again.duplicates) == (2, 0, 2)


def test_add_log_prints_the_reconciliation(tmp_path) -> None:
    log = tmp_path / "log.csv"
    log.write_text(
        HEADER
        + rows(("08:00:00", "v1", "leak"), ("08:01:00", "v2", "bill"))
        + "yesterday,v1,bad,1,0\n"
    )
    overlap = tmp_path / "overlap.csv"
    overlap.write_text(HEADER + rows(("08:01:00", "v2", "bill"), ("08:02:00", "v3", "meter")))
    db = tmp_path / "ws.duckdb"
    result = CliRunner().invoke(app, ["add-log", str(log), str(overlap), "--db", str(db)])
    assert result.exit_code == 0, result.output
    assert f"{log}: 3 rows read = 2 loaded + 1 rejected + 0 already loaded" in result.output
    assert f"{overlap}: 2 rows read = 1 loaded + 0 rejected + 1 already loaded" in result.output
    again = CliRunner().invoke(app, ["add-log", str(log), "--db", str(db)])
    assert f"{log}: already loaded (same content as file 1); nothing changed" in again.output
    as_json = CliRunner().invoke(app, ["add-log", str(overlap), "--db", str(db), "--json"])
    assert json.loads(as_json.output)[0]["skipped"] is True


def test_a_locked_workspace_gives_one_clear_line(tmp_path) -> None:
    db = tmp_path / "ws.duckdb"
    connect(db).close()
    log = tmp_path / "log.csv"
    log.write_text(HEADER + rows(("08:00:00", "v1", "leak")))
    holder = subprocess.Popen(
        [
            sys.executable,
            "-c",
            "import sys, time, duckdb; c = duckdb.connect(sys.argv[1]); print('held', flush=True);"
            " time.sleep(600)",
            str(db),
        ],
        stdout=subprocess.PIPE,
        text=True,
    )
    try:
        assert holder.stdout is not None and holder.stdout.readline().strip() == "held"
        done = subprocess.run(
            [sys.executable, "-m", "querygap", "add-log", str(log), "--db", str(db)],
            capture_output=True,
            text=True,
            cwd=REPO,
            env={**os.environ, "PYTHONPATH": str(REPO), "COLUMNS": "80"},
            timeout=120,
        )
    finally:
        os.kill(holder.pid, signal.SIGKILL)
        holder.wait()
    assert done.returncode == 1
    assert "Traceback" not in done.stderr
    assert done.stderr.splitlines() == [
        f"Error: workspace {db} is in use by another process; wait for it to finish, "
        "or pass --db with another file"
    ]


def test_memory_stays_bounded_on_a_big_log(tmp_path) -> None:
    log = generate_log(tmp_path / "big.csv", 300_000)
    figures = peak_rss_of_load(log, tmp_path / "ws.duckdb")
    assert "300,000 rows read = 299,700 loaded + 300 rejected" in figures["reconciliation"]
    # A generous bound (common practice, no source): the load must not hold the whole log as
    # Python objects; measured about 290 MiB of growth for this 12 MiB log.
    assert figures["growth_mib"] < 1024, figures
