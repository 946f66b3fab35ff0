"""Observe a change: compare searches before it with searches after it, per rule and overall.

For each rule, the targeted searches are those whose query contains the rule's term (whole
analyzer terms, :func:`querygap.rules.targeted`). Scopes: each rule; ``all`` searches; and
``not targeted`` (searches no rule targets: a control group, since before/after assumes nothing
else changed). Per scope and side, with bot searches (``search_sessions.is_bot``) left out:

- engine failure rate = searches with results = 0 / searches whose log row has a result count;
- click-through rate = searches with clicks > 0 / searches whose log row has a click count;
- content failure rate = searches whose query scores zero or low against the current index,
  with the thresholds of the newest review (the same index on both sides, no rules applied: it
  shows whether the mix of queries changed), reported beside the others.

The verdict uses the engine failure rate: difference d = after - before with the Newcombe (1998)
hybrid score interval, and the two-sided p-value of the pooled two-proportion z-test
(:func:`querygap.stats.two_proportion_test`). Where the z-test's normal approximation is not
trusted (fewer than 5 expected failures or successes on a side, ``enough_data`` false) the
p-value comes from Fisher's exact test instead (REFERENCES.md: "else exact methods";
``exact=False`` reports "not enough data" there). Verdicts:

- ``not enough data`` when a side has fewer than ``min_searches`` (default 30; common practice,
  no source) searches with a result count, or the test cannot be trusted;
- ``fixed`` when d < 0 and p < ``alpha``;
- ``not fixed`` otherwise.
"""

from __future__ import annotations

import hashlib
import json
from collections import Counter
from dataclasses import dataclass, field
from datetime import date, datetime, timedelta
from pathlib import Path
from typing import Any

import duckdb
import numpy as np
import pandas as pd
from scipy import stats as scipy_stats

from querygap.errors import ConfigError
from querygap.indexing import Index, load_index
from querygap.rules import Rule, analyzed_text, read_rules, select_rules, targeted
from querygap.scoring import score_queries, store_scores
from querygap.settings import ReviewSettings
from querygap.stats import two_proportion_test
from querygap.windows import Window, iso_week, zone
from querygap.workspace import frame, run, transaction

DEFAULT_DAYS = 7
DEFAULT_MIN_SEARCHES = 30  # per side; common practice, no source
DEFAULT_ALPHA = 0.05
VERDICTS = ("fixed", "not fixed", "not enough data")
COUNTS = ("searches", "engine", "empty", "click_rows", "clicked", "content_failing")
RULE_COLUMNS = [
    "observation_id",
    "scope",
    "line",
    "kind",
    "term",
    "replacement",
    "before_searches",
    "after_searches",
    "before_engine",
    "before_empty",
    "after_engine",
    "after_empty",
    "before_click_rows",
    "before_clicked",
    "after_click_rows",
    "after_clicked",
    "before_content_failing",
    "after_content_failing",
    "failure_before",
    "failure_after",
    "difference",
    "newcombe_lower",
    "newcombe_upper",
    "p_value",
    "test",
    "verdict",
    "reason",
]


@dataclass
class ObservationResult:
    """Figures of one observation, for the terminal, ``--json`` and scheduled jobs."""

    observation_id: str
    change_at: datetime
    before: Window
    after: Window
    rules_file: str
    bot_searches: int
    warnings: list[str]
    rows: list[dict[str, Any]]  # one per scope (rules, then all, then not targeted)
    verdicts: dict[str, int] = field(default_factory=dict)

    @property
    def not_fixed(self) -> int:
        return self.verdicts.get("not fixed", 0)


def change_instant(text: str, tz: str = "UTC") -> datetime:
    """Midnight at the start of day ``text`` (YYYY-MM-DD) in ``tz``."""
    try:
        day = date.fromisoformat(text)
    except ValueError:
        raise ConfigError(
            f"--change-date: '{text}' is not a date; write it like 2026-11-16"
        ) from None
    return datetime.combine(day, datetime.min.time(), zone(tz))


def observation_windows(
    change_at: datetime,
    before_week: str | None = None,
    after_week: str | None = None,
    days: int = DEFAULT_DAYS,
    tz: str = "UTC",
) -> tuple[Window, Window]:
    """The before and after windows: ``days`` days each side of the change, or ISO weeks."""
    if days < 1:
        raise ConfigError(f"--days must be a whole number >= 1; got {days}")
    span = timedelta(days=days)
    before = (
        iso_week(before_week, tz)
        if before_week
        else Window(f"before {change_at:%Y-%m-%d}", change_at - span, change_at)
    )
    after = (
        iso_week(after_week, tz)
        if after_week
        else Window(f"after {change_at:%Y-%m-%d}", change_at, change_at + span)
    )
    if before.end > change_at:
        raise ConfigError(
            f"--before-week {before.review_id} ends after the change date {change_at:%Y-%m-%d}"
        )
    if after.start < change_at:
        raise ConfigError(
            f"--after-week {after.review_id} starts before the change date {change_at:%Y-%m-%d}"
        )
    return before, after


def weekday_counts(window: Window, tz: str = "UTC") -> dict[str, int]:
    """How many of each weekday (Mon..Sun) a window covers, counting days that start in it."""
    z = zone(tz)
    first = window.start.astimezone(z).date()
    last = (window.end.astimezone(z) - timedelta(microseconds=1)).date()
    names = ("Mon", "Tue", "Wed", "Thu", "Fri", "Sat", "Sun")
    days = Counter(
        names[(first + timedelta(days=i)).weekday()] for i in range((last - first).days + 1)
    )
    return {name: days.get(name, 0) for name in names}


def window_warnings(before: Window, after: Window, tz: str = "UTC") -> list[str]:
    """Warnings when the windows differ in length or weekday mix (compare rates, not counts)."""
    found = []
    if abs(before.days - after.days) > 1e-9:
        found.append(
            f"the windows differ in length ({before.days:g} days before, {after.days:g} after): "
            "compare rates, not counts"
        )
    b, a = weekday_counts(before, tz), weekday_counts(after, tz)
    if b != a:
        diff = ", ".join(f"{d} {b[d]} vs {a[d]}" for d in b if b[d] != a[d])
        found.append(f"the windows hold a different mix of weekdays ({diff})")
    return found


def ensure_scored(conn: duckdb.DuckDBPyConnection, index: Index, windows: list[Window]) -> int:
    """Score (and store) the windows' queries not yet scored against ``index``; return how many."""
    todo = pd.concat(
        [
            frame(
                conn,
                "review_unscored_queries",
                {"start": w.start, "end": w.end, "index_id": index.index_id},
            )["query"]
            for w in windows
        ]
    ).drop_duplicates()
    if len(todo):
        with transaction(conn):
            store_scores(conn, index.index_id, score_queries(todo, index))
    return len(todo)


def thresholds(conn: duckdb.DuckDBPyConnection) -> tuple[float, float]:
    """min_score and min_coverage of the newest review, or the defaults."""
    latest = frame(conn, "checks_latest_review")
    if latest.empty:
        return ReviewSettings.min_score, ReviewSettings.min_coverage
    raw = json.loads(latest["settings"].iloc[0])
    return float(raw["min_score"]), float(raw["min_coverage"])


def side_counts(conn: duckdb.DuckDBPyConnection, window: Window, index: Index) -> pd.DataFrame:
    low, cover = thresholds(conn)
    data = frame(
        conn,
        "checks_window_queries",
        {
            "start": window.start,
            "end": window.end,
            "index_id": index.index_id,
            "min_score": low,
            "min_coverage": cover,
        },
    )
    data["content_failing"] = np.where(data["content_failing"].fillna(False), data["searches"], 0)
    return data.astype(dict.fromkeys(COUNTS, np.int64))


def fisher_p(x1: np.ndarray, n1: np.ndarray, x2: np.ndarray, n2: np.ndarray) -> np.ndarray:
    """Two-sided p-values of Fisher's exact test for each 2x2 table (one call per scope)."""
    out = np.full(x1.shape, np.nan)
    for i in range(x1.size):  # one call per rule, not per search or query
        if n1[i] > 0 and n2[i] > 0:
            table = [[x1[i], n1[i] - x1[i]], [x2[i], n2[i] - x2[i]]]
            out[i] = scipy_stats.fisher_exact(table, alternative="two-sided").pvalue
    return out


def verdicts(
    counts: pd.DataFrame, alpha: float, min_searches: int, exact: bool = True
) -> pd.DataFrame:
    """Rates, interval, p-value and verdict for rows of before_/after_ engine counts."""
    x1 = counts["before_empty"].to_numpy(np.float64)
    n1 = counts["before_engine"].to_numpy(np.float64)
    x2 = counts["after_empty"].to_numpy(np.float64)
    n2 = counts["after_engine"].to_numpy(np.float64)
    test = two_proportion_test(x1, n1, x2, n2, alpha=alpha)
    enough = np.asarray(test.enough_data, dtype=bool)
    exact_p = fisher_p(x1, n1, x2, n2)
    p_value = np.where(enough, np.asarray(test.p_value, dtype=np.float64), exact_p)
    volume = (n1 >= min_searches) & (n2 >= min_searches)
    trusted = volume & (enough | exact)
    difference = np.asarray(test.difference, dtype=np.float64)
    verdict = np.select(
        [~trusted, (difference < 0) & (p_value < alpha)], ["not enough data", "fixed"], "not fixed"
    )
    reason = np.select(
        [
            ~volume,
            ~trusted,
            verdict == "fixed",
        ],
        [
            np.char.add(
                np.char.add("not enough searches to tell: ", n1.astype(np.int64).astype(str)),
                np.char.add(
                    " before, ",
                    np.char.add(
                        n2.astype(np.int64).astype(str), f" after (at least {min_searches} each)"
                    ),
                ),
            ),
            "not enough searches to tell: fewer than 5 expected failures or successes a side",
            f"the engine failure rate fell (p < {alpha:g})",
        ],
        np.where(
            difference < 0, f"the fall is not significant at {alpha:g}", "the rate did not fall"
        ),
    )
    return pd.DataFrame(
        {
            "failure_before": np.asarray(test.p1, dtype=np.float64),
            "failure_after": np.asarray(test.p2, dtype=np.float64),
            "difference": difference,
            "newcombe_lower": np.asarray(test.newcombe_lower, dtype=np.float64),
            "newcombe_upper": np.asarray(test.newcombe_upper, dtype=np.float64),
            "p_value": np.where(volume & (n1 > 0) & (n2 > 0), p_value, np.nan),
            "test": np.where(~trusted, "none", np.where(enough, "z", "exact")),
            "verdict": verdict,
            "reason": reason,
        },
        index=counts.index,
    )


def compare(
    before: pd.DataFrame,
    after: pd.DataFrame,
    rules: list[Rule],
    index: Index,
    alpha: float = DEFAULT_ALPHA,
    min_searches: int = DEFAULT_MIN_SEARCHES,
    exact: bool = True,
) -> pd.DataFrame:
    """Per scope (rules, all, not targeted): before/after counts, rates and verdict (pure)."""
    sides = pd.concat([before.assign(side="before"), after.assign(side="after")], ignore_index=True)
    queries = pd.Series(sides["query"].unique(), dtype=object)
    hits = targeted(analyzed_text(queries, index.settings.analyzer), rules, index.settings.analyzer)
    hits["query"] = queries.to_numpy()[hits["row"].to_numpy()]
    per_rule = hits.merge(sides, on="query").groupby(["rule", "side"])[list(COUNTS)].sum()
    untouched = sides[~sides["query"].isin(hits["query"])]
    scopes = [
        per_rule,
        sides.groupby("side")[list(COUNTS)].sum().assign(rule=-1).set_index("rule", append=True),
        untouched.groupby("side")[list(COUNTS)]
        .sum()
        .assign(rule=-2)
        .set_index("rule", append=True),
    ]
    scopes[1] = scopes[1].reorder_levels(["rule", "side"])
    scopes[2] = scopes[2].reorder_levels(["rule", "side"])
    long = pd.concat(scopes)
    wide = long.unstack("side", fill_value=0)
    wide.columns = [f"{side}_{name}" for name, side in wide.columns]
    order = [*range(len(rules)), -1, -2]
    wide = wide.reindex(order, fill_value=0)
    for column in (f"{s}_{c}" for s in ("before", "after") for c in COUNTS):
        if column not in wide.columns:
            wide[column] = 0
    wide = wide.astype(np.int64)
    by_rule = dict(enumerate(rules))
    wide["scope"] = ["rule"] * len(rules) + ["all", "not targeted"]
    wide["line"] = [by_rule[i].line for i in range(len(rules))] + [0, 0]
    wide["kind"] = [by_rule[i].kind for i in range(len(rules))] + ["", ""]
    wide["term"] = [by_rule[i].term for i in range(len(rules))] + ["", ""]
    wide["replacement"] = [by_rule[i].replacement for i in range(len(rules))] + ["", ""]
    result = pd.concat([wide, verdicts(wide, alpha, min_searches, exact)], axis=1)
    for side in ("before", "after"):
        result[f"clicks_{side}"] = result[f"{side}_clicked"] / result[f"{side}_click_rows"].where(
            lambda s: s > 0
        )
        result[f"content_failure_{side}"] = result[f"{side}_content_failing"] / result[
            f"{side}_searches"
        ].where(lambda s: s > 0)
    return result.reset_index(drop=True)


def observe_rules(
    conn: duckdb.DuckDBPyConnection,
    rules: list[Rule],
    before: Window,
    after: Window,
    alpha: float = DEFAULT_ALPHA,
    min_searches: int = DEFAULT_MIN_SEARCHES,
    exact: bool = True,
) -> tuple[pd.DataFrame, int, list[str]]:
    """Compare the windows for ``rules``: (table of :func:`compare`, bot searches, warnings)."""
    if not 0.0 < alpha < 1.0:
        raise ConfigError(f"--alpha must lie strictly between 0 and 1; got {alpha!r}")
    if min_searches < 1:
        raise ConfigError(f"--min-searches must be a whole number >= 1; got {min_searches!r}")
    index = load_index(conn)
    ensure_scored(conn, index, [before, after])
    warnings = window_warnings(before, after)
    bots = 0
    for window in (before, after):
        found = frame(conn, "checks_bot_searches", {"start": window.start, "end": window.end})
        bots += int(found["bots"].iloc[0])
        if not int(found["session_rows"].iloc[0]) and window is before:
            warnings.append(
                "table search_sessions is empty, so bot searches are not left out of the rates"
            )
    left, right = side_counts(conn, before, index), side_counts(conn, after, index)
    for window, side in ((before, left), (after, right)):
        if side.empty:
            warnings.append(
                f"no searches in the window {window.start:%Y-%m-%d} to {window.end:%Y-%m-%d}"
            )
    return compare(left, right, rules, index, alpha, min_searches, exact), bots, warnings


def observe(
    conn: duckdb.DuckDBPyConnection,
    rules_path: Path | None,
    change_at: datetime,
    before: Window,
    after: Window,
    not_rejected: bool = False,
    alpha: float = DEFAULT_ALPHA,
    min_searches: int = DEFAULT_MIN_SEARCHES,
    exact: bool = True,
) -> ObservationResult:
    """Observe the rules of ``rules_path`` (or the accepted decisions) across a change; store it."""
    if rules_path is not None:
        rules = select_rules(read_rules(rules_path), not_rejected)
        digest = hashlib.sha256(Path(rules_path).read_bytes()).hexdigest()[:12]
    else:
        rules = decision_rules(conn)
        digest = "decisions"
    table, bots, warnings = observe_rules(conn, rules, before, after, alpha, min_searches, exact)
    observation_id = (
        f"{change_at:%Y-%m-%d}:{before.start:%Y-%m-%d}_{before.end:%Y-%m-%d}:"
        f"{after.start:%Y-%m-%d}_{after.end:%Y-%m-%d}:{digest}"
    )
    stored = table.assign(observation_id=observation_id)[RULE_COLUMNS]
    with transaction(conn):
        run(conn, "checks_clear_observation_rules", {"observation_id": observation_id})
        run(conn, "checks_clear_observation", {"observation_id": observation_id})
        run(
            conn,
            "checks_record_observation",
            {
                "observation_id": observation_id,
                "change_at": change_at,
                "before_start": before.start,
                "before_end": before.end,
                "after_start": after.start,
                "after_end": after.end,
                "rules_file": str(rules_path or ""),
                "bot_searches": bots,
                "warnings": "\n".join(warnings),
            },
        )
        conn.register("obs_rules_df", stored)
        try:
            run(conn, "checks_store_observation_rules")
        finally:
            conn.unregister("obs_rules_df")
    rule_rows = table[table["scope"] == "rule"]
    return ObservationResult(
        observation_id,
        change_at,
        before,
        after,
        str(rules_path or ""),
        bots,
        warnings,
        table.replace({np.nan: None}).to_dict("records"),
        {v: int((rule_rows["verdict"] == v).sum()) for v in VERDICTS},
    )


def decision_rules(conn: duckdb.DuckDBPyConnection) -> list[Rule]:
    """The accepted decisions as rules; ``line`` numbers them from 1 in decision order."""
    found = frame(conn, "checks_accepted_decisions")
    return [
        Rule(r.kind, r.term, r.replacement, r.direction, "accepted", line=i + 1)
        for i, r in enumerate(found.itertuples(index=False))
    ]


DECISION_COLUMNS = [
    "review_id",
    "kind",
    "term",
    "replacement",
    "decided_at",
    "before_start",
    "before_end",
    "after_start",
    "after_end",
    "before_searches",
    "after_searches",
    "failure_before",
    "failure_after",
    "difference",
    "newcombe_lower",
    "newcombe_upper",
    "p_value",
    "verdict",
    "reason",
    "checked_at",
]


def check_accepted(
    conn: duckdb.DuckDBPyConnection,
    window: Window,
    alpha: float = DEFAULT_ALPHA,
    min_searches: int = DEFAULT_MIN_SEARCHES,
) -> pd.DataFrame:
    """Observe every accepted decision at review ``window``; store and return decision_checks.

    A decision is taken to be live from its ``decided_at``. Its after window runs from the later
    of ``decided_at`` and the review's start to the review's end; its before window is as long
    and ends at ``decided_at``. Decisions made at or after the review's end are not checked yet.
    """
    found = frame(conn, "checks_accepted_decisions")
    found = found[pd.to_datetime(found["decided_at"], utc=True) < pd.Timestamp(window.end)]
    parts = []
    for decided_at, group in found.groupby("decided_at", sort=True):
        change = pd.Timestamp(decided_at).to_pydatetime()
        after = Window(window.review_id, max(change, window.start), window.end)
        before = Window("before", change - (after.end - after.start), change)
        rules = [
            Rule(r.kind, r.term, r.replacement, r.direction, "accepted", line=i + 1)
            for i, r in enumerate(group.itertuples(index=False))
        ]
        table, _, _ = observe_rules(conn, rules, before, after, alpha, min_searches)
        table = table[table["scope"] == "rule"].copy()
        table["decided_at"] = change
        for name, value in (
            ("before_start", before.start),
            ("before_end", before.end),
            ("after_start", after.start),
            ("after_end", after.end),
        ):
            table[name] = value
        parts.append(table)
    checked = (
        pd.concat(parts, ignore_index=True)
        if parts
        else pd.DataFrame(
            columns=[c for c in DECISION_COLUMNS if c not in ("review_id", "checked_at")]
        )
    )
    checked["review_id"] = window.review_id
    checked["checked_at"] = pd.Timestamp.now(tz="UTC")
    checked = checked[DECISION_COLUMNS]
    with transaction(conn):
        run(conn, "checks_clear_decision_checks", {"review_id": window.review_id})
        if len(checked):
            conn.register("decision_checks_df", checked)
            try:
                run(conn, "checks_store_decision_checks")
            finally:
                conn.unregister("decision_checks_df")
    return checked.reset_index(drop=True)
