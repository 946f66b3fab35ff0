"""Terminal output of the check commands (simulate, observe): rich tables and JSON payloads."""

from __future__ import annotations

import math
from dataclasses import asdict
from typing import Any

from rich.table import Table
from rich.text import Text

from querygap.observe import ObservationResult
from querygap.simulate import OUTCOMES, SimulationResult

#: Exit status of a check that ran but found a problem a scheduled job should act on.
EXIT_PROBLEM = 3


def _pct(value: Any) -> str:
    if value is None or (isinstance(value, float) and math.isnan(value)):
        return "-"
    return f"{100 * value:.1f}%"


def simulation_table(result: SimulationResult, limit: int = 30) -> Table:
    """Rules that changed a query, most searches first; columns are searches by outcome."""
    table = Table(
        title=f"Simulation of {result.rules_file} on {result.review_id} "
        f"({result.rules_applied} of {result.rules_in_file} rules applied)",
        title_justify="left",
    )
    for col in ("line", "kind", "rule", "queries", "searches", *OUTCOMES):
        table.add_column(col, justify="left" if col in ("kind", "rule") else "right")
    rows = sorted(
        (r for r in result.per_rule if r["queries"]), key=lambda r: (-r["searches"], r["line"])
    )
    for r in rows[:limit]:
        arrow = "<->" if r["direction"] == "both-ways" else "->"
        table.add_row(
            str(r["line"]),
            r["kind"],
            Text(f"{r['term']} {arrow} {r['replacement']}"),
            f"{r['queries']:,}",
            f"{r['searches']:,}",
            *(f"{r[o.replace(' ', '_') + '_searches']:,}" for o in OUTCOMES),
        )
    table.add_row(
        "",
        "",
        "all changed queries (each once)",
        f"{sum(v['queries'] for v in result.overall.values()):,}",
        f"{sum(v['searches'] for v in result.overall.values()):,}",
        *(f"{result.overall[o]['searches']:,}" for o in OUTCOMES),
        style="bold",
    )
    return table


def simulation_lines(result: SimulationResult) -> list[str]:
    quiet = sum(1 for r in result.per_rule if r["effect"] == "matched no query")
    none = [
        f"{r['term']} -> {r['replacement']}" for r in result.per_rule if r["effect"] == "no effect"
    ]
    lines = [
        f"{result.queries:,} unique queries ({result.searches:,} searches) in {result.review_id}; "
        f"{quiet} applied rules matched no query.",
    ]
    if none:
        lines.append(
            f"No effect under the analyzer (term and replacement analyze alike): {', '.join(none)}"
        )
    worse = result.regressions
    lines.append(
        f"{worse} changed queries got worse (newly failing or regressed): check them in "
        "simulation.csv before you deploy."
        if worse
        else "No query that was ok got worse."
    )
    lines.extend(f"Written: {p}" for p in result.csv_files)
    return lines


def simulation_payload(result: SimulationResult) -> dict[str, Any]:
    payload = asdict(result)
    payload["regressions"] = result.regressions
    return payload


def observation_table(result: ObservationResult, limit: int = 40) -> Table:
    title = (
        f"Before {result.before.start:%Y-%m-%d} to {result.before.end:%Y-%m-%d} against after "
        f"{result.after.start:%Y-%m-%d} to {result.after.end:%Y-%m-%d} "
        "(engine failure = no results)"
    )
    table = Table(title=title, title_justify="left")
    for col in (
        "rule",
        "searches before/after",
        "engine failure before",
        "after",
        "difference [95% interval]",
        "p",
        "clicks before/after",
        "content failure before/after",
        "verdict",
    ):
        table.add_column(col, justify="left" if col in ("rule", "verdict") else "right")
    rows = [
        r
        for r in result.rows
        if r["scope"] == "rule" and r["before_searches"] + r["after_searches"]
    ]
    rows.sort(key=lambda r: -(r["before_searches"] + r["after_searches"]))
    others = [r for r in result.rows if r["scope"] != "rule"]
    for r in [*rows[:limit], *others]:
        label = f"{r['term']} -> {r['replacement']}" if r["scope"] == "rule" else f"({r['scope']})"
        diff = r["difference"]
        interval = (
            "-"
            if diff is None
            else f"{100 * diff:+.1f} [{100 * r['newcombe_lower']:+.1f}, "
            f"{100 * r['newcombe_upper']:+.1f}]"
        )
        p = r["p_value"]
        verdict = (
            r["verdict"] if r["verdict"] != "not enough data" else "not enough searches to tell"
        )
        table.add_row(
            Text(label),
            f"{r['before_searches']:,}/{r['after_searches']:,}",
            _pct(r["failure_before"]),
            _pct(r["failure_after"]),
            interval,
            "-" if p is None else f"{p:.2g}",
            f"{_pct(r['clicks_before'])}/{_pct(r['clicks_after'])}",
            f"{_pct(r['content_failure_before'])}/{_pct(r['content_failure_after'])}",
            verdict if r["scope"] == "rule" else "",
        )
    return table


def observation_lines(result: ObservationResult) -> list[str]:
    v = result.verdicts
    lines = [
        f"Rules: {v.get('fixed', 0)} fixed, {v.get('not fixed', 0)} not fixed, "
        f"{v.get('not enough data', 0)} without enough searches to tell.",
    ]
    if not sum(v.values()):
        lines.append(
            "No rule was observed: the rules file has no accepted rule (mark rules accepted in "
            "its status column, or pass --not-rejected)."
        )
    if result.bot_searches:
        lines.append(f"{result.bot_searches:,} bot searches left out.")
    lines.extend(f"Warning: {w}" for w in result.warnings)
    return lines


def observation_payload(result: ObservationResult) -> dict[str, Any]:
    payload = asdict(result)
    payload["before"] = {"start": result.before.start, "end": result.before.end}
    payload["after"] = {"start": result.after.start, "end": result.after.end}
    return payload
