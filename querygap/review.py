"""A review: index the content, score the window's unique queries, flag them, export.

Stages and their tables: index (terms, doc_rows, doc_terms) -> score (query_scores,
query_top_pages, query_terms; only queries not yet scored against this index) -> sessions
(search_sessions, session_traffic, review_bots) -> flag (reviews, review_queries; bot searches left
out) -> cluster (clusters, cluster_members) and, side by side with it, propose (proposals,
proposal_examples) -> export and report (reports/<review>/).
"""

from __future__ import annotations

import time
from collections.abc import Callable
from concurrent.futures import Future, ThreadPoolExecutor, wait
from dataclasses import dataclass, field
from datetime import datetime
from pathlib import Path
from typing import Any

import duckdb
import pandas as pd

from querygap.clustering import ClusterSettings, run_clusters, top_clusters
from querygap.errors import OutputError, StageOrderError
from querygap.indexing import build_index, load_index
from querygap.proposal_files import write_proposal_files
from querygap.proposals import awaiting_check, propose, top_fixes
from querygap.safe_csv import write_csv, write_query_csv
from querygap.scoring import score_queries, store_scores
from querygap.sessions import SessionSettings, build_sessions, record_review_bots
from querygap.settings import ReviewSettings, validate
from querygap.windows import Window, week_of
from querygap.workspace import frame, run, side_connection, smaller_cache, transaction

FAILING_COLUMNS = [
    "query",
    "searches",
    "status",
    "best_score",
    "coverage",
    "unmatched_terms",
    "top_page",
    "example",
    "unknown_terms",
    "top_page_title",
    "visitors",
    "engine_empty_share",
    "click_share",
]


@dataclass
class ReviewResult:
    """Figures of one review, for the terminal, ``--json`` and the report."""

    review_id: str
    start: datetime
    end: datetime
    index_id: str
    index_reused: bool
    scored_now: int
    totals: dict[str, dict[str, int]]
    disagreements: dict[str, int]
    searches: int
    queries: int
    failing_csv: Path | None = None
    report_html: Path | None = None
    bots: dict[str, int] = field(default_factory=dict)
    clusters: list[dict[str, Any]] = field(default_factory=list)
    clusters_csv: Path | None = None
    checks: list[dict[str, Any]] = field(default_factory=list)  # accepted decisions checked now
    timings: dict[str, float] = field(default_factory=dict)
    fixes: list[dict[str, object]] = field(default_factory=list)  # top fixes, most rescued first
    awaiting: list[dict[str, object]] = field(default_factory=list)  # accepted, not yet checked
    proposal_files: dict[str, Path] = field(default_factory=dict)

    def rate(self, status: str, per: str = "searches") -> float:
        total = self.searches if per == "searches" else self.queries
        return self.totals.get(status, {}).get(per, 0) / total if total else 0.0


def latest_window(conn: duckdb.DuckDBPyConnection, tz: str = "UTC") -> Window:
    """The ISO week of the newest search in the workspace."""
    first, last, n = run(conn, "review_log_span").fetchall()[0]
    if not n:
        raise StageOrderError("no searches are loaded; run 'querygap add-log' first")
    return week_of(last, tz)


#: Clusters carried in a ReviewResult (the terminal and --json show these; clusters.csv has all).
CLUSTERS_IN_RESULT = 20

Progress = Callable[[str], None]


#: DuckDB's share of its memory limit while the clusters and proposals are made side by side:
#: their arrays need the room more than DuckDB's cache of table blocks does.
SIDE_BY_SIDE_CACHE = 1 / 3

#: Queries scored and stored at a time: the score tables of a million queries take about 1 GB
#: as frames, a quarter of that per part keeps the stage's peak memory down.
SCORE_PART = 250_000


def score_stage(conn: duckdb.DuckDBPyConnection, params: dict[str, object]) -> int:
    """Score and store the window's queries not yet scored against the index; their number.

    The queries are scored and stored ``SCORE_PART`` at a time, in one transaction (all or
    none are stored); one part is stored (by DuckDB, which releases the GIL) while the next is
    scored. A function of its own so the index is freed before the later stages run.
    """
    todo = frame(conn, "review_unscored_queries", params)["query"]
    if len(todo):
        index = load_index(conn)
        index_id = str(params["index_id"])
        with transaction(conn), ThreadPoolExecutor(max_workers=1) as storer:
            storing: Future[None] | None = None
            for start in range(0, len(todo), SCORE_PART):
                tables = score_queries(todo.iloc[start : start + SCORE_PART], index)
                if storing is not None:
                    storing.result()  # the connection serves one statement at a time
                storing = storer.submit(store_scores, conn, index_id, tables)
                del tables
            if storing is not None:
                storing.result()
    return len(todo)


def run_review(
    conn: duckdb.DuckDBPyConnection,
    window: Window,
    settings: ReviewSettings,
    out_dir: Path | None,
    progress: Progress | None = None,
    sessions: SessionSettings | None = None,
    clusters: ClusterSettings | None = None,
) -> ReviewResult:
    """Run the index, score, session, flag and cluster stages for ``window``.

    Writes failing_queries.csv and clusters.csv to ``out_dir`` unless it is None.
    """
    validate(settings)
    say = progress or (lambda _msg: None)
    timings: dict[str, float] = {}
    t0 = time.perf_counter()
    say("index")
    index_id, reused = build_index(conn, settings.index)
    timings["index"] = time.perf_counter() - t0

    t0 = time.perf_counter()
    say("score")
    params = {"start": window.start, "end": window.end, "index_id": index_id}
    scored_now = score_stage(conn, params)
    timings["score"] = time.perf_counter() - t0

    t0 = time.perf_counter()
    say("sessions")
    build_sessions(conn, sessions)
    timings["sessions"] = time.perf_counter() - t0

    t0 = time.perf_counter()
    say("flag")
    with transaction(conn):
        run(conn, "review_clear_queries", {"review_id": window.review_id})
        run(conn, "review_clear", {"review_id": window.review_id})
        run(
            conn,
            "review_record",
            {**params, "review_id": window.review_id, "settings": settings.to_json()},
        )
        run(
            conn,
            "review_flag",
            {
                **params,
                "review_id": window.review_id,
                "min_score": settings.min_score,
                "min_coverage": settings.min_coverage,
            },
        )
        bots = record_review_bots(conn, window)
    timings["flag"] = time.perf_counter() - t0

    t0 = time.perf_counter()
    # Both stages read the flagged queries and write tables of their own, so the clusters are made
    # on a second connection in a thread while the proposals are made here: neither keeps both
    # cores busy alone (DuckDB, numpy and the compiled kernels release the GIL): 82 s -> 71 s at
    # size M. DuckDB's cache gives way meanwhile (smaller_cache): a second week's peak RSS at M
    # 3.8-4.0 -> 2.8 GB. A failing stage rolls back only its own tables; the error surfaces.
    say("cluster + propose")
    side = side_connection(conn)
    with smaller_cache(conn, SIDE_BY_SIDE_CACHE), ThreadPoolExecutor(max_workers=1) as pool:
        clustered = pool.submit(_clusters_on, side, window, index_id, clusters)
        try:
            proposed = propose(conn, window.review_id)
        finally:
            wait([clustered])
            side.close()
        clustered.result()
    result = summarize(conn, window, index_id, reused, scored_now)
    result.timings = timings
    result.fixes = top_fixes(proposed.proposals)
    result.awaiting = awaiting_check(conn, window.review_id, index_id)
    timings["cluster + propose"] = time.perf_counter() - t0
    from querygap.observe import check_accepted  # observe reads this module's thresholds

    t0 = time.perf_counter()
    say("check")
    result.checks = check_accepted(conn, window).to_dict("records")
    timings["check"] = time.perf_counter() - t0
    result.bots = bots
    result.clusters = top_clusters(conn, window.review_id, CLUSTERS_IN_RESULT).to_dict("records")
    if out_dir is not None:
        from querygap.report import prepare_report, write_prepared  # it reads this module's exports

        t0 = time.perf_counter()
        # The report's figures and charts are read on a second connection in a thread while the
        # export files are written; the page, which links the exports present, comes last.
        say("export + report")
        side = side_connection(conn)
        try:
            with ThreadPoolExecutor(max_workers=1) as pool:
                report = pool.submit(prepare_report, side, window.review_id)
                result.failing_csv = export_failing(conn, window.review_id, index_id, out_dir)
                result.proposal_files = write_proposal_files(
                    conn, window.review_id, index_id, out_dir
                )
                result.clusters_csv = export_clusters(conn, window.review_id, out_dir)
                prepared = report.result()
        finally:
            side.close()
        result.report_html = write_prepared(prepared, out_dir)
        timings["export + report"] = time.perf_counter() - t0
    return result


def _clusters_on(
    conn: duckdb.DuckDBPyConnection,
    window: Window,
    index_id: str,
    settings: ClusterSettings | None,
) -> None:
    """Cluster the review's failing queries in one transaction of ``conn``."""
    with transaction(conn):
        run_clusters(conn, window, index_id, settings)


def summarize(
    conn: duckdb.DuckDBPyConnection, window: Window, index_id: str, reused: bool, scored: int
) -> ReviewResult:
    totals_df = frame(conn, "review_totals", {"review_id": window.review_id})
    totals = {
        row.status: {
            k: int(getattr(row, k))
            for k in (
                "searches",
                "queries",
                "engine_searches",
                "engine_empty",
                "click_searches",
                "clicked",
            )
        }
        for row in totals_df.itertuples(index=False)
    }
    dis = frame(conn, "review_disagreements", {"review_id": window.review_id}).iloc[0]
    return ReviewResult(
        window.review_id,
        window.start,
        window.end,
        index_id,
        reused,
        scored,
        totals,
        {k: int(v) for k, v in dis.items()},
        sum(t["searches"] for t in totals.values()),
        sum(t["queries"] for t in totals.values()),
    )


def failing_queries(
    conn: duckdb.DuckDBPyConnection, review_id: str, index_id: str, limit: int | None = None
) -> pd.DataFrame:
    """The failing queries of a review in the columns of failing_queries.csv, most searched
    first: the first ``limit`` of them (all when None; the terminal shows 10, the report 500)."""
    data = frame(
        conn, "review_failing", {"review_id": review_id, "index_id": index_id, "limit": limit}
    )
    data["engine_empty_share"] = (
        (data["engine_empty"] / data["engine_searches"]).where(data["engine_searches"] > 0).round(3)
    )
    data["click_share"] = (
        (data["clicked"] / data["click_searches"]).where(data["click_searches"] > 0).round(3)
    )
    data["best_score"] = data["best_score"].round(4)
    data["coverage"] = data["coverage"].round(4)
    return data[FAILING_COLUMNS]


def export_clusters(conn: duckdb.DuckDBPyConnection, review_id: str, out_dir: Path) -> Path:
    """Write clusters.csv: every cluster of the review, examples and terms joined by ' | '."""
    out_dir.mkdir(parents=True, exist_ok=True)
    data = top_clusters(conn, review_id)
    data["examples"] = data["examples"].map(" | ".join)
    data["terms"] = data["terms"].map(" ".join)
    return write_csv(data, out_dir / "clusters.csv")


def export_failing(
    conn: duckdb.DuckDBPyConnection, review_id: str, index_id: str, out_dir: Path
) -> Path:
    """Write failing_queries.csv into ``out_dir`` (created if missing).

    DuckDB builds the lines (statement ``review_failing_csv``, the rows and roundings of
    :func:`failing_queries`), so a million failing queries never become a pandas frame.
    """
    try:
        out_dir.mkdir(parents=True, exist_ok=True)
        return write_query_csv(
            conn,
            "review_failing_csv",
            {"review_id": review_id, "index_id": index_id},
            FAILING_COLUMNS,
            out_dir / "failing_queries.csv",
        )
    except OSError as exc:
        raise OutputError(
            f"{out_dir}: cannot write the review's files there ({exc.strerror or exc}); "
            "pass --out with a folder you can write to"
        ) from None
