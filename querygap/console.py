"""Terminal output: rich tables for people, plain dicts for ``--json``. Only the CLI calls this."""

from __future__ import annotations

import json
from dataclasses import asdict
from typing import Any

from rich.console import Console
from rich.table import Table
from rich.text import Text

from querygap.logload import LoadResult
from querygap.pageload import ContentResult
from querygap.review import ReviewResult

STATUS_ORDER = ("zero", "low", "ok")


def pct(x: float) -> str:
    return f"{100 * x:.1f}%"


def emit_json(console: Console, payload: Any) -> None:
    console.print_json(json.dumps(payload, default=str))


def load_table(results: list[LoadResult]) -> Table:
    table = Table(title="Logs loaded", title_justify="left")
    for col in ("file", "rows read", "loaded", "rejected", "duplicates", "redacted"):
        table.add_column(col, justify="left" if col == "file" else "right")
    for r in results:
        redacted = ", ".join(f"{n} {k}" for k, n in sorted(r.redacted.items()) if n) or "-"
        if r.skipped:
            table.add_row(Text(r.path), "-", "already loaded", "-", "-", "-")
        else:
            table.add_row(
                Text(r.path),
                f"{r.rows_read:,}",
                f"{r.loaded:,}",
                f"{r.rejected:,}",
                f"{r.duplicates:,}",
                redacted,
            )
    return table


def load_payload(results: list[LoadResult]) -> list[dict[str, Any]]:
    return [asdict(r) | {"reconciliation": r.reconciliation()} for r in results]


def content_payload(result: ContentResult) -> dict[str, Any]:
    return asdict(result) | {"summary": result.summary()}


def review_table(result: ReviewResult) -> Table:
    title = (
        f"Review {result.review_id}: {result.searches:,} searches, "
        f"{result.queries:,} unique queries"
    )
    table = Table(title=title, title_justify="left")
    for col in ("status", "searches", "share of searches", "unique queries", "share of queries"):
        table.add_column(col, justify="left" if col == "status" else "right")
    for status in STATUS_ORDER:
        t = result.totals.get(status, {"searches": 0, "queries": 0})
        table.add_row(
            status,
            f"{t['searches']:,}",
            pct(result.rate(status)),
            f"{t['queries']:,}",
            pct(result.rate(status, "queries")),
        )
    return table


def engine_lines(result: ReviewResult) -> list[str]:
    d = result.disagreements
    if not d.get("engine_searches"):
        return ["The log has no result counts, so the engine's own view is not compared."]
    return [
        f"The content answers {d['content_only_queries']:,} queries "
        f"({d['content_only_searches']:,} searches) for which the engine showed no results: "
        "check the engine's index and analyzer.",
        f"The engine showed results for {d['engine_only_queries']:,} queries "
        f"({d['engine_only_searches']:,} searches) that no page answers well: check what it shows.",
    ]


def review_payload(result: ReviewResult) -> dict[str, Any]:
    payload = asdict(result)
    payload["rates"] = {
        s: {"per_search": result.rate(s), "per_query": result.rate(s, "queries")}
        for s in STATUS_ORDER
    }
    return payload


#: Failing queries the terminal lists (the report lists more, the CSV all).
FAILING_IN_TERMINAL = 10


def failing_table(rows: list[dict[str, Any]], limit: int = FAILING_IN_TERMINAL) -> Table:
    table = Table(title=f"Most searched failing queries (top {limit})", title_justify="left")
    for col in ("query", "searches", "status", "score", "coverage", "missing terms"):
        table.add_column(
            col, justify="right" if col in ("searches", "score", "coverage") else "left"
        )
    for row in rows[:limit]:
        table.add_row(
            Text(str(row["query"])),
            f"{row['searches']:,}",
            row["status"],
            f"{row['best_score']:.2f}",
            pct(row["coverage"]),
            Text(str(row["unmatched_terms"])),
        )
    return table


def fixes_table(fixes: list[dict[str, Any]]) -> Table:
    """The top fixes of a review with the searches each rescued when re-scored."""
    table = Table(title="Top fixes (searches rescued when re-scored)", title_justify="left")
    for col in ("kind", "term", "suggestion", "searches", "rescued", "confidence"):
        table.add_column(
            col, justify="right" if col in ("searches", "rescued", "confidence") else "left"
        )
    for f in fixes:
        table.add_row(
            f["kind"],
            Text(str(f["term"])),
            Text(str(f["suggestion"])),
            f"{f['searches']:,}",
            f"{f['rescued']:,}",
            f"{f['confidence']:.2f}",
        )
    return table


def awaiting_table(rows: list[dict[str, Any]]) -> Table:
    """Accepted decisions that still await a check, with this review's failing searches."""
    table = Table(title="Accepted fixes awaiting a check", title_justify="left")
    for col in (
        "kind",
        "term",
        "replacement",
        "decided in",
        "failing searches now",
        "searches now",
    ):
        table.add_column(col, justify="right" if "searches" in col else "left")
    for r in rows:
        table.add_row(
            r["kind"],
            Text(str(r["term"])),
            Text(str(r["replacement"])),
            str(r["decided_in"] or "-"),
            f"{r['failing_searches']:,}",
            f"{r['searches']:,}",
        )
    return table


def bot_line(result: ReviewResult) -> str:
    """One line on the machine traffic left out of the review's counts."""
    b = result.bots
    if not b:
        return "Sessions were not built, so no bot searches were left out."
    line = (
        f"Left out as bots: {b['bot_searches']:,} searches from {b['bot_keys']:,} "
        f"{'key' if b['bot_keys'] == 1 else 'keys'} "
        "(machine-rate sessions; SELECT * FROM session_traffic WHERE verdict = 'bot')."
    )
    if b.get("suspect_searches"):
        line += (
            f" Counted but suspect: {b['suspect_searches']:,} searches from "
            f"{b['suspect_keys']:,} keys."
        )
    return line


def cluster_table(clusters: list[dict[str, Any]], limit: int = 10) -> Table:
    """The most searched clusters of failing queries."""
    table = Table(title=f"Clusters of failing queries (top {limit})", title_justify="left")
    for col in ("#", "label", "searches", "queries", "previous", "change", "terms", "examples"):
        numeric = col in ("#", "searches", "queries", "previous", "change")
        table.add_column(col, justify="right" if numeric else "left")
    for c in clusters[:limit]:
        previous, change = c.get("previous_searches"), c.get("change")
        table.add_row(
            str(c["cluster_id"]),
            Text(str(c["label"])),
            f"{c['searches']:,}",
            f"{c['queries']:,}",
            "-" if previous is None else f"{previous:,}",
            "-" if change is None else f"{change:+,}",
            Text(" ".join(c["terms"][:3])),
            Text("; ".join(c["examples"][:3])),
        )
    return table


def checks_table(rows: list[dict[str, Any]]) -> Table:
    """Accepted fixes checked at this review: failure rate before and after, and the verdict."""
    table = Table(title="Accepted fixes, checked against the log", title_justify="left")
    for col in (
        "kind",
        "term",
        "replacement",
        "before",
        "after",
        "failing before",
        "failing after",
        "p",
        "verdict",
    ):
        numeric = col in ("before", "after", "failing before", "failing after", "p")
        table.add_column(col, justify="right" if numeric else "left")
    for r in rows:

        def share(x: Any) -> str:
            return "-" if x is None or x != x else pct(float(x))

        p = r.get("p_value")
        table.add_row(
            r["kind"],
            Text(str(r["term"])),
            Text(str(r["replacement"])),
            f"{int(r['before_searches']):,}",
            f"{int(r['after_searches']):,}",
            share(r.get("failure_before")),
            share(r.get("failure_after")),
            "-" if p is None or p != p else f"{float(p):.3g}",
            Text(str(r["verdict"])),
        )
    return table


def files_table(files: dict[str, Any]) -> Table:
    """Where the review's files are."""
    table = Table(title="Files of this review", title_justify="left", show_header=False)
    table.add_column("what")
    table.add_column("path")
    for name, path in files.items():
        if path:
            table.add_row(name, Text(str(path)))
    return table
