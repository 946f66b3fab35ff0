"""The report at scale: a review of 200,000 unique queries keeps a bounded page.

The workspace is filled directly in DuckDB (no log, no scoring): two weekly reviews of the same
200,000 queries with Zipf-like volumes (searches ~ 20,000 / rank, at least 1), statuses that
change between the weeks, 2,000 clusters and 2,000 proposals.
"""

from __future__ import annotations

import xml.etree.ElementTree as ET
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from plotly.offline import get_plotlyjs
from selectolax.lexbor import LexborHTMLParser as HTMLParser

from querygap.report import write_report
from querygap.report.charts import all_charts
from querygap.report.data import frequency_profile, load_report_data, profile_points
from querygap.report.html import TABLE_ROWS
from querygap.review import export_failing
from querygap.workspace import connect

QUERIES = 200_000

FILL = """
INSERT INTO reviews VALUES
  ('2026-W45', TIMESTAMPTZ '2026-11-02 00:00:00+00', TIMESTAMPTZ '2026-11-09 00:00:00+00',
   'ix', '{}', TIMESTAMPTZ '2026-11-09 01:00:00+00'),
  ('2026-W46', TIMESTAMPTZ '2026-11-09 00:00:00+00', TIMESTAMPTZ '2026-11-16 00:00:00+00',
   'ix', '{}', TIMESTAMPTZ '2026-11-16 01:00:00+00');
CREATE TEMP TABLE q AS
SELECT i, 'query ' || i AS query, greatest(1, 20000 // i)::BIGINT AS searches
FROM range(1, $n + 1) t(i);
INSERT INTO review_queries
SELECT w.review_id, q.query, q.query, q.searches, q.searches,
       CASE WHEN (q.i + w.shift) % 3 = 0 THEN 'zero' WHEN (q.i + w.shift) % 5 = 0 THEN 'low'
            ELSE 'ok' END,
       0.0, 0.0, NULL, 0, 0, 0, 0
FROM q, (VALUES ('2026-W45', 1), ('2026-W46', 0)) w(review_id, shift);
INSERT INTO searches
SELECT 1, row_number() OVER (),
       TIMESTAMPTZ '2026-11-09 00:00:00+00' + to_seconds((k * 7919) % 604800),
       q.query, q.query, NULL, NULL, NULL, NULL, 0, 1
FROM q, range(q.searches) r(k);
INSERT INTO clusters (review_id, cluster_id, label, searches, queries, examples, terms)
SELECT '2026-W46', c, 'query ' || c, 1000 - c // 2, 5, '[]', '[]' FROM range(1, 2001) t(c);
INSERT INTO cluster_members
SELECT '2026-W46', c, 'query ' || c, 10, 'term' || c FROM range(1, 2001) t(c);
INSERT INTO proposals
SELECT '2026-W46', p, 'spelling', 'term' || p, 'fix' || p, 100, 2, 50, 0.5, 1, 'evidence', '{}'
FROM range(1, 2001) t(p);
"""


@pytest.fixture(scope="module")
def big(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, Path]:
    tmp = tmp_path_factory.mktemp("scale")
    db, out = tmp / "big.duckdb", tmp / "2026-W46"
    conn = connect(db)
    for statement in FILL.split(";"):
        if statement.strip():
            conn.execute(statement, {"n": QUERIES} if "$n" in statement else None)
    export_failing(conn, "2026-W46", "ix", out)
    write_report(conn, "2026-W46", out)
    conn.close()
    return db, out


def test_page_size_is_bounded_at_200k_queries(big: tuple[Path, Path]) -> None:
    page = (big[1] / "index.html").read_text(encoding="utf-8")
    # Bound: plotly.js plus 2 MB; one point and row per query would be tens of megabytes.
    assert len(page.encode()) < len(get_plotlyjs().encode()) + 2_000_000


def test_tables_show_at_most_the_cap_and_link_the_csv(big: tuple[Path, Path]) -> None:
    db, out = big
    conn = connect(db, read_only=True)
    failing = conn.execute(
        "SELECT count(*) FROM review_queries WHERE review_id = '2026-W46' AND status <> 'ok'"
    ).fetchall()[0][0]
    conn.close()
    tree = HTMLParser((out / "index.html").read_text(encoding="utf-8"))
    for table_id, total in (
        ("failing-table", failing),
        ("clusters-table", 2000),
        ("proposals-table", 2000),
    ):
        table = tree.css_first(f"#{table_id}")
        assert len(table.css("tbody tr")) == TABLE_ROWS == int(table.attributes["data-rows"])
        assert int(table.attributes["data-total"]) == total
    changes = tree.css_first("#changes-table")
    assert len(changes.css("tbody tr")) == TABLE_ROWS < int(changes.attributes["data-total"])
    notes = {n.attributes["data-for"]: n for n in tree.css("p.capped")}
    assert notes["failing-table"].css_first("a").attributes["href"] == "failing_queries.csv"
    assert f"of {failing:,} rows" in notes["failing-table"].text()
    csv = pd.read_csv(out / "changes.csv", keep_default_na=False)
    assert len(csv) == int(changes.attributes["data-total"])
    # The failing table shows the most searched failing queries, in the CSV's order.
    first = [r.css("td")[0].text() for r in tree.css("#failing-table tbody tr")]
    full = pd.read_csv(out / "failing_queries.csv", keep_default_na=False)
    assert first == full["query"].head(TABLE_ROWS).tolist()


def test_profile_chart_and_svg_are_downsampled(big: tuple[Path, Path]) -> None:
    db, out = big
    conn = connect(db, read_only=True)
    data = load_report_data(conn, "2026-W46")
    conn.close()
    assert len(data.profile) == QUERIES
    chart = all_charts(data)["profile"]
    points = sum(len(t.x) for t in chart.figure.data)
    head = int((data.profile["band"] == "head").sum())
    assert points <= min(head, 2000) + 300
    svg = ET.fromstring((out / "charts" / "query_profile.svg").read_text(encoding="utf-8"))
    circles = svg.findall("{http://www.w3.org/2000/svg}circle")
    assert len(circles) == points + 3  # three in the legend
    assert "rank bins" in chart.reading


def test_profile_points_keep_every_query_and_search() -> None:
    # 30 queries with searches 30..1; cap 10 points: the head (5 queries here) one by one, the
    # other 25 in log-spaced bins that cover ranks 6..30 with no gap and no overlap.
    q = pd.DataFrame(
        {
            "query": [f"q{i:02d}" for i in range(30)],
            "example": "",
            "searches": np.arange(30, 0, -1),
            "status": ["zero" if i % 2 else "ok" for i in range(30)],
        }
    )
    p = frequency_profile(q)
    head = int((p["band"] == "head").sum())
    pts = profile_points(p, max_points=10, individual=50, bins=4)
    single, binned = pts[pts["status"] != "bin"], pts[pts["status"] == "bin"]
    assert len(single) == head
    assert single["query"].tolist() == p["query"].head(head).tolist()
    assert binned["rank_from"].iloc[0] == head + 1
    assert binned["rank_to"].iloc[-1] == 30
    assert (binned["rank_from"].to_numpy()[1:] == binned["rank_to"].to_numpy()[:-1] + 1).all()
    assert pts["queries"].sum() == 30
    assert pts["total_searches"].sum() == p["searches"].sum()
    # A bin's failing share, recomputed from the rows it covers.
    b = binned.iloc[1]
    rows = p.iloc[int(b["rank_from"]) - 1 : int(b["rank_to"])]
    fail = rows.loc[rows["status"] != "ok", "searches"].sum() / rows["searches"].sum()
    assert b["failing_share"] == pytest.approx(fail)
    assert b["searches"] == pytest.approx(rows["searches"].mean())
    # Under the cap, one point per query.
    assert len(profile_points(p, max_points=30)) == 30
