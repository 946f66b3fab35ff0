"""End to end on the bundled demo: the known failures are flagged, the known good queries are not.

The demo's generator records its ground truth in demo_logs/truth.json (invented data, used here
only to check that the pipeline finds what the scenario planted).
"""

from __future__ import annotations

import csv
import json
from pathlib import Path

import pytest

from querygap.analyzer import analyze
from querygap.demo import DEMO_DIR, run_demo

TRUTH = json.loads((DEMO_DIR / "truth.json").read_text(encoding="utf-8"))


@pytest.fixture(scope="module")
def demo(tmp_path_factory: pytest.TempPathFactory):
    root = tmp_path_factory.mktemp("demo")
    result, rows = run_demo(root / "ws.duckdb", root / "reports", say=lambda _m: None)
    return result, rows, root


def test_demo_loads_every_row(demo) -> None:
    result, _, _ = demo
    import duckdb

    conn = duckdb.connect(str(demo[2] / "ws.duckdb"), read_only=True)
    files = conn.execute(
        "SELECT path, rows_read, rows_loaded, rows_rejected, rows_duplicate "
        "FROM log_files ORDER BY path"
    ).fetchall()
    conn.close()
    for path, read, loaded, rejected, dupes in files:
        assert read == loaded + rejected + dupes
        assert read == TRUTH["row_counts"][Path(path).name]


def test_known_failures_are_flagged_and_good_queries_are_not(demo) -> None:
    _, rows, _ = demo
    failing = {r["query"]: r for r in rows}
    planted = {t: TRUTH["spelling"][t] for t in TRUTH["spelling_frequent"]}
    planted |= TRUTH["synonym"] | TRUTH["variant"]
    for term, site_form in planted.items():
        if analyze(term) == analyze(site_form):
            continue  # e.g. "prepayment" = "pre-payment": the analyzer joins hyphens on purpose
        hits = [q for q in failing if term in q.split()]
        assert hits, f"no failing query contains the planted failure term {term!r}"
    good = [q.lower() for q in TRUTH["good_queries"]]
    flagged_good = [q for q in good if q in failing]
    # Two broad or stop-word queries are known exceptions (README, "Statuses"); allow at most 2.
    assert len(flagged_good) <= 2, flagged_good


def test_hyphen_variants_show_as_engine_misses(demo) -> None:
    # The engine (the demo's simulated one) splits on hyphens; our analyzer joins them, so the
    # content answers "prepayment" although the engine showed nothing: a disagreement to report.
    result, rows, _ = demo
    joined = [t for t, site in TRUTH["variant"].items() if analyze(t) == analyze(site)]
    assert joined, "the demo plants hyphen variants"
    assert not any(t in r["query"].split() for r in rows for t in joined)
    assert result.disagreements["content_only_queries"] >= len(joined)


def test_failing_queries_csv_columns(demo) -> None:
    result, rows, root = demo
    path = root / "reports" / result.review_id / "failing_queries.csv"
    with path.open(encoding="utf-8", newline="") as fh:
        reader = csv.DictReader(fh)
        header = reader.fieldnames or []
        data = list(reader)
    assert header[:7] == [
        "query",
        "searches",
        "status",
        "best_score",
        "coverage",
        "unmatched_terms",
        "top_page",
    ]
    assert {r["status"] for r in data} <= {"zero", "low"}
    assert (
        len(data) == len(rows) == result.totals["zero"]["queries"] + result.totals["low"]["queries"]
    )
    assert sum(int(r["searches"]) for r in data) == (
        result.totals["zero"]["searches"] + result.totals["low"]["searches"]
    )


def test_rerunning_a_review_changes_nothing(demo, tmp_path) -> None:
    import duckdb

    from querygap.review import run_review
    from querygap.settings import ReviewSettings
    from querygap.windows import iso_week
    from querygap.workspace import connect

    result, _, root = demo
    conn = connect(root / "ws.duckdb")
    before = conn.execute("SELECT count(*), sum(searches) FROM review_queries").fetchall()
    again = run_review(conn, iso_week(result.review_id), ReviewSettings(), tmp_path)
    after = conn.execute("SELECT count(*), sum(searches) FROM review_queries").fetchall()
    conn.close()
    assert before == after
    assert again.index_reused and again.scored_now == 0
    assert again.totals == result.totals
    del duckdb


STAGE_TABLES = {
    "clusters": "cluster_id",
    "cluster_members": "query",
    "proposals": "proposal_id",
    "proposal_examples": "proposal_id, query, other_query",
}


def stage_rows(conn, review_id: str) -> dict[str, list[tuple]]:
    return {
        table: conn.execute(
            f"SELECT * FROM {table} WHERE review_id = ? ORDER BY {order}", [review_id]
        ).fetchall()
        for table, order in STAGE_TABLES.items()
    }


def test_clusters_and_proposals_made_side_by_side_equal_those_made_in_turn(demo, tmp_path) -> None:
    import shutil

    from querygap.clustering import run_clusters
    from querygap.proposals import propose
    from querygap.windows import iso_week
    from querygap.workspace import connect, transaction

    result, _, root = demo
    shutil.copy(root / "ws.duckdb", tmp_path / "ws.duckdb")
    conn = connect(tmp_path / "ws.duckdb")
    side_by_side = stage_rows(conn, result.review_id)
    with transaction(conn):
        run_clusters(conn, iso_week(result.review_id), result.index_id)
    propose(conn, result.review_id)
    in_turn = stage_rows(conn, result.review_id)
    conn.close()
    assert all(side_by_side[t] for t in ("clusters", "cluster_members", "proposals"))
    assert side_by_side == in_turn


@pytest.mark.parametrize("failing", ["run_clusters", "propose"])
def test_a_failing_cluster_or_proposal_stage_stops_the_review(
    demo, tmp_path, monkeypatch, failing: str
) -> None:
    import shutil

    import querygap.review as review
    from querygap.settings import ReviewSettings
    from querygap.windows import iso_week
    from querygap.workspace import connect

    result, _, root = demo
    shutil.copy(root / "ws.duckdb", tmp_path / "ws.duckdb")
    conn = connect(tmp_path / "ws.duckdb")
    before = stage_rows(conn, result.review_id)
    calls = []

    def broken(stage_conn, *args, **kwargs):
        calls.append(failing)
        if failing == "run_clusters":  # inside the stage's transaction: rolled back
            stage_conn.execute("DELETE FROM cluster_members")
            stage_conn.execute("DELETE FROM clusters")
        raise RuntimeError(f"{failing} broke")

    monkeypatch.setattr(review, failing, broken)
    with pytest.raises(RuntimeError, match=f"{failing} broke"):
        review.run_review(conn, iso_week(result.review_id), ReviewSettings(), tmp_path / "out")
    after = stage_rows(conn, result.review_id)
    conn.close()
    assert calls == [failing]
    # The broken stage left its tables as they were; the other one ran to its end (a rerun
    # stores the same rows).
    assert after == before
    assert not (tmp_path / "out" / "failing_queries.csv").exists()


def test_proposals_refuse_a_review_of_another_index_or_none(demo, tmp_path) -> None:
    import shutil

    from querygap.errors import StageOrderError
    from querygap.proposals import propose
    from querygap.workspace import connect

    result, _, root = demo
    shutil.copy(root / "ws.duckdb", tmp_path / "ws.duckdb")
    conn = connect(tmp_path / "ws.duckdb")
    with pytest.raises(StageOrderError, match="does not exist"):
        propose(conn, "1999-W01")
    conn.execute(
        "UPDATE reviews SET index_id = 'elsewhere' WHERE review_id = ?", [result.review_id]
    )
    with pytest.raises(StageOrderError, match=f"against index elsewhere.*is {result.index_id}"):
        propose(conn, result.review_id)
    conn.execute("UPDATE indexes SET current = false")
    with pytest.raises(StageOrderError, match="no index yet"):
        propose(conn, result.review_id)
    conn.close()


def test_files_of_a_review_equal_those_written_in_turn(demo, tmp_path) -> None:
    # The review reads the report's figures on a second connection while it writes the exports;
    # written in turn afterwards, every file is the same.
    import difflib
    import re
    import shutil

    from querygap.proposal_files import write_proposal_files
    from querygap.report import write_report
    from querygap.review import export_clusters, export_failing
    from querygap.workspace import connect

    result, _, root = demo
    shutil.copy(root / "ws.duckdb", tmp_path / "ws.duckdb")
    conn = connect(tmp_path / "ws.duckdb")
    again = tmp_path / "again"
    export_failing(conn, result.review_id, result.index_id, again)
    write_proposal_files(conn, result.review_id, result.index_id, again)
    export_clusters(conn, result.review_id, again)
    write_report(conn, result.review_id, again)
    conn.close()
    side_by_side = root / "reports" / result.review_id
    names = sorted(p.relative_to(again).as_posix() for p in again.rglob("*") if p.is_file())
    assert "failing_queries.csv" in names and "index.html" in names
    assert names == sorted(
        p.relative_to(side_by_side).as_posix() for p in side_by_side.rglob("*") if p.is_file()
    )
    # The page says when it was made, to the minute: the one line allowed to differ.
    made = re.compile(rb"Made by querygap on \d{4}-\d\d-\d\d \d\d:\d\d UTC")
    for name in names:
        mine, theirs = (again / name).read_bytes(), (side_by_side / name).read_bytes()
        if name == "index.html":
            assert made.search(mine) and made.search(theirs)
            mine, theirs = made.sub(b"", mine), made.sub(b"", theirs)
        if mine != theirs:  # name the file and show where the two differ
            diff = difflib.unified_diff(
                theirs.decode(errors="replace").splitlines(),
                mine.decode(errors="replace").splitlines(),
                "side by side",
                "in turn",
                n=0,
                lineterm="",
            )
            pytest.fail(f"{name} differs:\n" + "\n".join(line[:400] for line in list(diff)[:20]))


def test_duckdb_cache_gives_way_while_clusters_and_proposals_are_made(demo, tmp_path, monkeypatch):
    import shutil

    import querygap.review as review
    from querygap.settings import ReviewSettings
    from querygap.windows import iso_week
    from querygap.workspace import connect

    result, _, root = demo
    shutil.copy(root / "ws.duckdb", tmp_path / "ws.duckdb")
    conn = connect(tmp_path / "ws.duckdb")
    seen = []
    propose = review.propose

    def watched(stage_conn, *args, **kwargs):
        seen.append(stage_conn.execute("SELECT current_setting('memory_limit')").fetchall()[0][0])
        return propose(stage_conn, *args, **kwargs)

    def limit_bytes(text: str) -> float:
        number, unit = text.split()
        return float(number) * {"KiB": 2**10, "MiB": 2**20, "GiB": 2**30}[unit]

    monkeypatch.setattr(review, "propose", watched)
    outside = conn.execute("SELECT current_setting('memory_limit')").fetchall()[0][0]
    review.run_review(conn, iso_week(result.review_id), ReviewSettings(), None)
    after = conn.execute("SELECT current_setting('memory_limit')").fetchall()[0][0]
    conn.close()
    assert after == outside
    assert len(seen) == 1
    assert limit_bytes(seen[0]) < limit_bytes(outside) / 2
