"""Read everything the report shows for one review into plain frames (no HTML, no charts).

Tables read: reviews, review_queries, searches, query_scores, query_terms, documents (through
:func:`querygap.review.failing_queries`), and, when they exist and hold rows for the review, the
tables of the later stages: ``clusters`` (with ``cluster_members`` and ``proposals`` for each
cluster's best fix), ``proposals``, ``decision_checks`` and the latest of ``simulations`` (with its
``simulation_rules``). A missing or empty table gives ``None``, which the page shows as "not run
for this review".
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import datetime, timedelta

import duckdb
import numpy as np
import pandas as pd

from querygap.errors import StageOrderError
from querygap.review import failing_queries
from querygap.workspace import frame

#: Frequency bands by cumulative share of searches (common practice, no source): the most searched
#: queries that together make the first 50% of searches are the head, the next 30% the middle,
#: the remaining 20% the tail.
BAND_LIMITS = (("head", 0.5), ("middle", 0.8), ("tail", 1.0))
FAILING = ("zero", "low")
#: The later stages' tables and the named statement reading each for one review.
OPTIONAL_TABLES = {
    "clusters": "report_clusters",
    "proposals": "report_proposals",
    "decision_checks": "report_checks",
}


@dataclass
class Totals:
    """Headline figures of one review: searches and unique queries in all and per status."""

    review_id: str
    searches: int
    queries: int
    by_status: dict[str, tuple[int, int]]  # status -> (searches, unique queries)

    def failing_searches(self) -> int:
        return sum(self.by_status.get(s, (0, 0))[0] for s in FAILING)

    def failing_queries(self) -> int:
        return sum(self.by_status.get(s, (0, 0))[1] for s in FAILING)

    def rate(self, status: str | None = None) -> float:
        """Share of searches with ``status`` (``None``: zero or low), 0 when there are none."""
        n = self.failing_searches() if status is None else self.by_status.get(status, (0, 0))[0]
        return n / self.searches if self.searches else 0.0


#: Failing queries the page lists, most searched first (failing_queries.csv holds them all).
FAILING_ROWS = 500


@dataclass
class ReportData:
    review_id: str
    start: datetime
    end: datetime
    index_id: str
    totals: Totals
    previous: Totals | None
    daily: pd.DataFrame  # day, date, searches, zero, low, failing, rate
    profile: pd.DataFrame  # rank, query, example, searches, status, share, cum_share, band
    bands: pd.DataFrame  # band, queries, searches, failing, rate
    failing: pd.DataFrame  # the first FAILING_ROWS rows of failing_queries.csv
    changes: pd.DataFrame | None  # query, example, searches, previous_searches, status, change
    clusters: pd.DataFrame | None
    proposals: pd.DataFrame | None
    checks: pd.DataFrame | None
    simulation: dict[str, object] | None = None  # simulation_id, rules_file, not_rejected, ...
    simulation_rules: pd.DataFrame | None = None


def totals_of(conn: duckdb.DuckDBPyConnection, review_id: str) -> Totals:
    """The review's searches and unique queries, in all and per status."""
    df = frame(conn, "review_totals", {"review_id": review_id})
    by = {r.status: (int(r.searches), int(r.queries)) for r in df.itertuples(index=False)}
    return Totals(
        review_id,
        sum(v[0] for v in by.values()),
        sum(v[1] for v in by.values()),
        by,
    )


def daily_rates(counts: pd.DataFrame, start: datetime, days: int) -> pd.DataFrame:
    """Searches and failure rate per day; rate = (zero + low) / searches of that day.

    ``counts`` has columns day, status, searches; days without searches get rate NaN.
    """
    wide = counts.pivot_table(
        index="day", columns="status", values="searches", aggfunc="sum", fill_value=0
    )
    wide = wide.reindex(index=range(days), columns=["zero", "low", "ok"], fill_value=0)
    out = pd.DataFrame({"day": wide.index})
    out["date"] = [(start + timedelta(days=int(d))).date() for d in out["day"]]
    out["zero"] = wide["zero"].to_numpy()
    out["low"] = wide["low"].to_numpy()
    out["searches"] = wide.sum(axis=1).to_numpy()
    out["failing"] = out["zero"] + out["low"]
    out["rate"] = (out["failing"] / out["searches"]).where(out["searches"] > 0)
    return out


def frequency_profile(queries: pd.DataFrame) -> pd.DataFrame:
    """Rank the queries by searches (1 = most searched) and assign each a band.

    share = searches / total searches; cum_share = the running sum of share in rank order. A query
    is in the first band whose limit its cumulative share *before* it has not reached, so the head
    always holds at least the top query.
    """
    df = queries.sort_values(["searches", "query"], ascending=[False, True]).reset_index(drop=True)
    total = df["searches"].sum()
    df.insert(0, "rank", np.arange(1, len(df) + 1))
    df["share"] = df["searches"] / total if total else 0.0
    df["cum_share"] = df["share"].cumsum()
    before = (df["cum_share"] - df["share"]).to_numpy()
    limits = np.array([limit for _, limit in BAND_LIMITS])
    idx = np.searchsorted(limits, before + 1e-12, side="left").clip(0, len(limits) - 1)
    df["band"] = np.array([name for name, _ in BAND_LIMITS])[idx]
    return df


def band_rates(profile: pd.DataFrame) -> pd.DataFrame:
    """Per band: unique queries, searches, failing searches and rate = failing / searches."""
    failing = profile["searches"].where(profile["status"].isin(FAILING), 0)
    g = profile.assign(failing=failing).groupby("band", sort=False)
    out = g.agg(queries=("query", "size"), searches=("searches", "sum"), failing=("failing", "sum"))
    out = out.reindex([name for name, _ in BAND_LIMITS], fill_value=0).reset_index()
    out["rate"] = (out["failing"] / out["searches"]).where(out["searches"] > 0)
    return out


def profile_points(
    profile: pd.DataFrame, max_points: int = 5000, individual: int = 2000, bins: int = 300
) -> pd.DataFrame:
    """The frequency profile cut to at most about ``max_points`` points for the chart.

    Up to ``max_points`` queries every query is one point. Beyond that, the head (capped at
    ``individual`` queries) keeps one point per query and the rest is cut into ``bins``
    log-spaced rank bins. A bin's point sits at the geometric mean of its first and last rank,
    at the mean searches per query of the bin (so it lies on the rank-frequency curve), and
    carries its failing share = zero or low searches / searches of the bin.

    Returns rank, rank_from, rank_to, queries, searches (per query), total_searches,
    failing_share, status ('zero', 'low', 'ok', or 'bin' for a bin) and query (the text of a
    single query, '' for a bin).
    """
    n = len(profile)
    searches = profile["searches"].to_numpy(dtype=float)
    failing = np.where(profile["status"].isin(FAILING).to_numpy(), searches, 0.0)
    if n <= max_points:
        keep = n
    else:
        head = int((profile["band"] == "head").sum()) if "band" in profile else 0
        keep = max(1, min(head, individual))
    top = profile.iloc[:keep]
    single = pd.DataFrame(
        {
            "rank": top["rank"].to_numpy(dtype=float),
            "rank_from": top["rank"].to_numpy(),
            "rank_to": top["rank"].to_numpy(),
            "queries": 1,
            "searches": searches[:keep],
            "total_searches": searches[:keep],
            "failing_share": np.divide(
                failing[:keep], searches[:keep], out=np.zeros(keep), where=searches[:keep] > 0
            ),
            "status": top["status"].astype(str).to_numpy(),
            "query": top["query"].astype(str).to_numpy(),
        }
    )
    if keep >= n:
        return single
    # Bin edges as 0-based positions: log-spaced ranks keep+1 .. n, each bin at least one query.
    edges = np.unique(np.round(np.geomspace(keep + 1, n + 1, bins + 1)).astype(np.int64)) - 1
    starts, ends = edges[:-1], edges[1:]
    total = np.add.reduceat(searches[keep:], starts - keep)
    fail = np.add.reduceat(failing[keep:], starts - keep)
    count = ends - starts
    binned = pd.DataFrame(
        {
            "rank": np.sqrt((starts + 1.0) * ends),
            "rank_from": starts + 1,
            "rank_to": ends,
            "queries": count,
            "searches": total / count,
            "total_searches": total,
            "failing_share": np.divide(fail, total, out=np.zeros(len(total)), where=total > 0),
            "status": "bin",
            "query": "",
        }
    )
    return pd.concat([single, binned], ignore_index=True)


def optional_tables(conn: duckdb.DuckDBPyConnection) -> dict[str, list[str]]:
    """The later-stage tables present in the workspace, with their columns."""
    df = frame(conn, "report_optional_tables")
    return {r.table_name: list(r.columns) for r in df.itertuples(index=False)}


def _optional(
    conn: duckdb.DuckDBPyConnection, present: dict[str, list[str]], table: str, review_id: str
) -> pd.DataFrame | None:
    if "review_id" not in present.get(table, []):
        return None
    df = frame(conn, OPTIONAL_TABLES[table], {"review_id": review_id})
    return df.drop(columns="review_id") if len(df) else None


def latest_simulation(
    conn: duckdb.DuckDBPyConnection, present: dict[str, list[str]], review_id: str
) -> tuple[dict[str, object] | None, pd.DataFrame | None]:
    """The review's most recent simulation and its rules, or (None, None) when there is none."""
    if "review_id" not in present.get("simulations", []) or "simulation_rules" not in present:
        return None, None
    sim = frame(conn, "report_latest_simulation", {"review_id": review_id})
    if sim.empty:
        return None, None
    head = sim.iloc[0].to_dict()
    rules = frame(conn, "report_simulation_rules", {"simulation_id": head["simulation_id"]})
    return head, rules


def load_report_data(conn: duckdb.DuckDBPyConnection, review_id: str) -> ReportData:
    """Everything the page shows for ``review_id``; the review must have been flagged."""
    rows = frame(conn, "report_review", {"review_id": review_id})
    if rows.empty:
        raise StageOrderError(f"review {review_id} has not run; run 'querygap review' first")
    review = rows.iloc[0]
    start = review["window_start"].to_pydatetime()
    end = review["window_end"].to_pydatetime()
    days = max(1, int(np.ceil((end - start).total_seconds() / 86400)))
    prev_rows = frame(conn, "report_previous_review", {"review_id": review_id})
    previous_id = str(prev_rows["review_id"].iloc[0]) if len(prev_rows) else None
    profile = frequency_profile(frame(conn, "report_profile", {"review_id": review_id}))
    present = optional_tables(conn)
    simulation, simulation_rules = latest_simulation(conn, present, review_id)
    return ReportData(
        review_id=review_id,
        start=start,
        end=end,
        index_id=str(review["index_id"]),
        totals=totals_of(conn, review_id),
        previous=totals_of(conn, previous_id) if previous_id else None,
        daily=daily_rates(
            frame(conn, "report_daily", {"review_id": review_id, "start": start, "end": end}),
            start,
            days,
        ),
        profile=profile,
        bands=band_rates(profile),
        failing=failing_queries(conn, review_id, str(review["index_id"]), FAILING_ROWS),
        changes=(
            frame(conn, "report_changes", {"review_id": review_id, "previous_id": previous_id})
            if previous_id
            else None
        ),
        clusters=_optional(conn, present, "clusters", review_id),
        proposals=_optional(conn, present, "proposals", review_id),
        checks=_optional(conn, present, "decision_checks", review_id),
        simulation=simulation,
        simulation_rules=simulation_rules,
    )
