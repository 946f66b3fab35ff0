"""Simulate a rules file before deploying it: apply it to a review's queries and re-score them.

Every unique query of the review window passes through the rules
(:func:`querygap.rules.apply_rules`).
The queries the rules change are re-scored in one batch against the current index, and their new
status uses the review's thresholds (zero: no known term; low: best cosine < ``min_score`` or
coverage < ``min_coverage``). Each changed query gets one outcome:

| before | after | outcome |
| --- | --- | --- |
| zero or low | ok | fixed |
| zero or low | zero or low | still failing |
| ok | zero or low | newly failing |
| ok | ok, another best page, or best cosine lower by more than ``score_margin`` | regressed |
| ok | ok, same best page, cosine not lower by more than ``score_margin`` | unchanged |

``score_margin`` is an absolute difference of cosines (default 0.1; common practice, no source).
A query counts once overall and once for every rule that touched it.
"""

from __future__ import annotations

import dataclasses
import hashlib
import json
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import duckdb
import numpy as np
import pandas as pd

from querygap.analyzer import AnalyzerSettings
from querygap.errors import ConfigError, StageOrderError
from querygap.group_text import joined_runs
from querygap.indexing import Index, load_index
from querygap.rules import Rule, apply_rules, compile_rules, read_rules, select_rules
from querygap.safe_csv import write_csv
from querygap.scoring import score_queries
from querygap.workspace import frame, run, transaction

OUTCOMES = ("fixed", "still failing", "newly failing", "regressed", "unchanged")
DEFAULT_SCORE_MARGIN = 0.1
QUERY_COLUMNS = [
    "simulation_id",
    "query",
    "rewritten",
    "searches",
    "rules",
    "before_status",
    "before_score",
    "before_page",
    "after_status",
    "after_score",
    "after_coverage",
    "after_page",
    "outcome",
]


@dataclass
class SimulationResult:
    """Figures of one simulation, for the terminal, ``--json`` and scheduled jobs."""

    simulation_id: str
    review_id: str
    rules_file: str
    rules_applied: int
    rules_in_file: int
    queries: int
    searches: int
    overall: dict[str, dict[str, int]]  # outcome -> {"queries": n, "searches": n}
    per_rule: list[dict[str, Any]]
    csv_files: list[Path] = field(default_factory=list)

    @property
    def regressions(self) -> int:
        """Changed queries that were ok and got worse (newly failing or regressed)."""
        return self.overall["newly failing"]["queries"] + self.overall["regressed"]["queries"]


def statuses(scores: pd.DataFrame, min_score: float, min_coverage: float) -> np.ndarray:
    """zero / low / ok for score rows (columns n_known, best_score, coverage), as in the review."""
    return np.select(
        [
            scores["n_known"].to_numpy() == 0,
            (scores["best_score"].to_numpy() < min_score)
            | (scores["coverage"].to_numpy() < min_coverage),
        ],
        ["zero", "low"],
        "ok",
    )


def classify(
    before_status: np.ndarray,
    before_score: np.ndarray,
    before_page: np.ndarray,
    after_status: np.ndarray,
    after_score: np.ndarray,
    after_page: np.ndarray,
    score_margin: float = DEFAULT_SCORE_MARGIN,
) -> np.ndarray:
    """The outcome of each changed query (table in the module docstring)."""
    was_ok = before_status == "ok"
    now_ok = after_status == "ok"
    same_page = (
        pd.Series(before_page).fillna("").to_numpy() == pd.Series(after_page).fillna("").to_numpy()
    )
    fell = (before_score - after_score) > score_margin
    return np.select(
        [~was_ok & now_ok, ~was_ok, was_ok & ~now_ok, ~same_page | fell],
        ["fixed", "still failing", "newly failing", "regressed"],
        "unchanged",
    )


def plain_analyzer_index(index: Index) -> Index:
    """The index with stemming and stop words off, for scoring text that is already analyzed."""
    settings = dataclasses.replace(index.settings, analyzer=AnalyzerSettings())
    return dataclasses.replace(index, settings=settings)


def review_thresholds(settings_json: str) -> tuple[float, float]:
    """min_score and min_coverage from a review's settings JSON."""
    raw = json.loads(settings_json)
    return float(raw["min_score"]), float(raw["min_coverage"])


def simulate_queries(
    review: pd.DataFrame,
    rules: list[Rule],
    index: Index,
    min_score: float,
    min_coverage: float,
    score_margin: float = DEFAULT_SCORE_MARGIN,
) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Apply ``rules`` to a review's queries and classify the changed ones (pure computation).

    Returns the changed queries (columns of :data:`QUERY_COLUMNS` without ``simulation_id``,
    plus ``row``) and the rule touches (``row``, ``rule`` = position in ``rules``).
    """
    applied = apply_rules(review["query"], rules, index.settings.analyzer, index.terms)
    changed = np.flatnonzero(applied.changed.to_numpy())
    rewritten = applied.rewritten.iloc[changed].reset_index(drop=True)
    scored = score_queries(rewritten, plain_analyzer_index(index)).scores
    before = review.iloc[changed].reset_index(drop=True)
    after_status = statuses(scored, min_score, min_coverage)
    outcome = classify(
        before["status"].to_numpy(),
        before["best_score"].to_numpy(np.float64),
        before["best_doc"].to_numpy(object),
        after_status,
        scored["best_score"].to_numpy(np.float64),
        scored["best_doc"].to_numpy(object),
        score_margin,
    )
    touches = applied.touches
    lines = pd.Series([r.line for r in rules], dtype=np.int64)
    touched_row = touches["row"].to_numpy()
    by_row = np.argsort(touched_row, kind="stable")  # each row's rules keep their order
    rule_lines = joined_runs(
        touched_row[by_row],
        lines.to_numpy()[touches["rule"].to_numpy()][by_row].astype(str).astype(object),
    )
    queries = pd.DataFrame(
        {
            "row": changed,
            "query": before["query"],
            "rewritten": rewritten,
            "searches": before["searches"].astype(np.int64),
            "rules": rule_lines.reindex(changed).fillna("").to_numpy(),
            "before_status": before["status"],
            "before_score": before["best_score"],
            "before_page": before["best_doc"],
            "after_status": after_status,
            "after_score": scored["best_score"],
            "after_coverage": scored["coverage"],
            "after_page": scored["best_doc"],
            "outcome": outcome,
        }
    )
    return queries, touches


def outcome_counts(queries: pd.DataFrame) -> dict[str, dict[str, int]]:
    grouped = queries.groupby("outcome")["searches"].agg(["size", "sum"])
    return {
        o: {
            "queries": int(grouped["size"].get(o, 0)),
            "searches": int(grouped["sum"].get(o, 0)),
        }
        for o in OUTCOMES
    }


def per_rule_table(
    rules: list[Rule], queries: pd.DataFrame, touches: pd.DataFrame, no_effect: list[int]
) -> pd.DataFrame:
    """One row per applied rule: changed queries and searches by outcome."""
    joined = touches.merge(queries[["row", "searches", "outcome"]], on="row", how="inner")
    wide = joined.pivot_table(
        index="rule", columns="outcome", values="searches", aggfunc=["size", "sum"], fill_value=0
    )
    table = pd.DataFrame(
        {
            "line": [r.line for r in rules],
            "kind": [r.kind for r in rules],
            "term": [r.term for r in rules],
            "replacement": [r.replacement for r in rules],
            "direction": [r.direction for r in rules],
            "status": [r.status for r in rules],
        }
    )
    table["effect"] = "applied"
    positions = np.arange(len(rules))
    total_q = joined.groupby("rule").size().reindex(positions, fill_value=0)
    total_s = joined.groupby("rule")["searches"].sum().reindex(positions, fill_value=0)
    table.loc[total_q.to_numpy() == 0, "effect"] = "matched no query"
    table.loc[no_effect, "effect"] = "no effect"
    table["queries"] = total_q.to_numpy(np.int64)
    table["searches"] = total_s.to_numpy(np.int64)
    for outcome in OUTCOMES:
        key = outcome.replace(" ", "_")
        for agg, suffix in (("size", "queries"), ("sum", "searches")):
            column = (agg, outcome)
            values = wide[column] if column in wide.columns else pd.Series(dtype=np.int64)
            table[f"{key}_{suffix}"] = values.reindex(positions, fill_value=0).to_numpy(np.int64)
    return table


def simulate(
    conn: duckdb.DuckDBPyConnection,
    rules_path: Path,
    review_id: str,
    out_dir: Path | None,
    not_rejected: bool = False,
    score_margin: float = DEFAULT_SCORE_MARGIN,
) -> SimulationResult:
    """Simulate the rules file on review ``review_id``; store and export the result."""
    if not 0.0 <= score_margin <= 1.0:
        raise ConfigError(f"--score-margin must be a number from 0 to 1; got {score_margin!r}")
    all_rules = read_rules(rules_path)
    rules = select_rules(all_rules, not_rejected)
    found = frame(conn, "checks_review", {"review_id": review_id})
    if found.empty:
        raise StageOrderError(
            f"no review {review_id} in the workspace; run 'querygap review --week {review_id}' "
            "(or --from/--to) first"
        )
    row = found.iloc[0]
    index = load_index(conn)
    if index.index_id != row["index_id"]:
        raise StageOrderError(
            f"review {review_id} was scored against index {row['index_id']}, but the current "
            f"index is {index.index_id} (content or settings changed); rerun the review first"
        )
    min_score, min_coverage = review_thresholds(row["settings"])
    review = frame(conn, "checks_review_queries", {"review_id": review_id})
    queries, touches = simulate_queries(review, rules, index, min_score, min_coverage, score_margin)
    no_effect = compile_rules(rules, index.settings.analyzer, index.terms).no_effect
    rule_table = per_rule_table(rules, queries, touches, no_effect)

    sha = hashlib.sha256(Path(rules_path).read_bytes()).hexdigest()
    simulation_id = f"{review_id}:{sha[:12]}:{'not-rejected' if not_rejected else 'accepted'}"
    query_rows = queries.drop(columns="row").assign(simulation_id=simulation_id)[QUERY_COLUMNS]
    rule_rows = rule_table.assign(simulation_id=simulation_id)
    rule_rows = rule_rows[["simulation_id", *rule_table.columns]]
    params = {"simulation_id": simulation_id}
    with transaction(conn):
        run(conn, "checks_clear_simulation_rules", params)
        run(conn, "checks_clear_simulation_queries", params)
        run(conn, "checks_clear_simulation", params)
        run(
            conn,
            "checks_record_simulation",
            {
                **params,
                "review_id": review_id,
                "index_id": index.index_id,
                "rules_file": str(rules_path),
                "rules_sha256": sha,
                "not_rejected": not_rejected,
                "score_margin": score_margin,
            },
        )
        for name, view, data in (
            ("checks_store_simulation_queries", "sim_queries_df", query_rows),
            ("checks_store_simulation_rules", "sim_rules_df", rule_rows),
        ):
            conn.register(view, data)
            try:
                run(conn, name)
            finally:
                conn.unregister(view)

    result = SimulationResult(
        simulation_id,
        review_id,
        str(rules_path),
        len(rules),
        len(all_rules),
        len(review),
        int(review["searches"].sum()),
        outcome_counts(queries),
        rule_table.to_dict("records"),
    )
    if out_dir is not None:
        out_dir.mkdir(parents=True, exist_ok=True)
        export = query_rows.drop(columns="simulation_id").sort_values(
            ["outcome", "searches", "query"], ascending=[True, False, True]
        )
        result.csv_files = [
            write_csv(export, out_dir / "simulation.csv"),
            write_csv(rule_table, out_dir / "simulation_rules.csv"),
        ]
    return result
