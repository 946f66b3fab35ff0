"""The review report: its figures, bands, escaping, sections, links and size (no browser)."""

from __future__ import annotations

import xml.etree.ElementTree as ET
from pathlib import Path

import numpy as np
import pandas as pd
import plotly.graph_objects as go
import plotly.io as pio
import pytest
from plotly.offline import get_plotlyjs
from report_demo import HOSTILE, build
from scipy import stats
from selectolax.lexbor import LexborHTMLParser as HTMLParser
from stored_rows import window_searches

from querygap.report.charts import all_charts, zipf_slope
from querygap.report.data import band_rates, daily_rates, frequency_profile, load_report_data
from querygap.report.html import NOT_RUN
from querygap.report.svg import chart_svgs
from querygap.safe_csv import neutralize_cell
from querygap.workspace import connect


@pytest.fixture(scope="module")
def demo(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, Path]:
    return build(tmp_path_factory.mktemp("report"))


@pytest.fixture
def page(demo: tuple[Path, Path]) -> str:
    return (demo[1] / "index.html").read_text(encoding="utf-8")


@pytest.fixture
def csv(demo: tuple[Path, Path]) -> pd.DataFrame:
    return pd.read_csv(demo[1] / "failing_queries.csv", keep_default_na=False)


def test_bands_follow_the_cumulative_share_before_each_query() -> None:
    # Hand-computed from the definition: shares .5 .3 .1 .1, cumulative share before each query
    # 0, .5, .8, .9 -> head (before < .5), middle (before < .8), tail, tail.
    q = pd.DataFrame(
        {
            "query": list("abcd"),
            "example": list("abcd"),
            "searches": [50, 30, 10, 10],
            "status": ["ok", "zero", "low", "ok"],
        }
    )
    p = frequency_profile(q)
    assert p["band"].tolist() == ["head", "middle", "tail", "tail"]
    assert p["rank"].tolist() == [1, 2, 3, 4]
    b = band_rates(p).set_index("band")
    assert b.loc["middle", "rate"] == pytest.approx(1.0)
    assert b.loc["tail", "rate"] == pytest.approx(0.5)
    assert b.loc["head", "failing"] == 0


def test_zipf_slope_matches_scipy_linregress() -> None:
    # Reference: scipy.stats.linregress on ln(rank), ln(searches); an exact power law 1/rank has
    # slope -1 by construction.
    rank = np.arange(1, 501)
    assert zipf_slope(1000.0 / rank) == pytest.approx(-1.0)
    rng = np.random.default_rng(7)
    noisy = np.sort(rng.zipf(1.8, 400).astype(float))[::-1]
    ref = stats.linregress(np.log(np.arange(1, 401)), np.log(noisy)).slope
    assert zipf_slope(noisy) == pytest.approx(ref)


def test_daily_rates_fill_empty_days() -> None:
    counts = pd.DataFrame(
        {"day": [0, 0, 0, 2], "status": ["ok", "zero", "low", "ok"], "searches": [6, 1, 3, 5]}
    )
    d = daily_rates(counts, pd.Timestamp("2026-11-09", tz="UTC").to_pydatetime(), 3)
    assert d["searches"].tolist() == [10, 0, 5]
    assert d["rate"].iloc[0] == pytest.approx(0.4)
    assert np.isnan(d["rate"].iloc[1])
    assert d["rate"].iloc[2] == 0.0


def test_hostile_queries_are_escaped(page: str, csv: pd.DataFrame) -> None:
    for text in HOSTILE:
        assert text in csv["example"].tolist()  # the log really carries them
        assert text not in page
    assert "&lt;script&gt;alert(1)&lt;/script&gt;" in page
    assert "&lt;img src=x onerror=alert(1)&gt;" in page
    tree = HTMLParser(page)
    assert tree.css("img") == []
    assert tree.css("#injected") == []
    # Scripts: plotly.js, one call per chart, the table sorter; none carries a visitor's text.
    scripts = tree.css("script")
    assert len(scripts) == 1 + len(tree.css("div.chart")) + 1
    assert not any("alert(1)" in (s.text() or "") for s in scripts)


def test_plotly_figure_json_cannot_close_its_script() -> None:
    fig = go.Figure(go.Bar(x=["</script><script>alert(1)</script>"], y=[1]))
    div = pio.to_html(fig, full_html=False, include_plotlyjs=False)
    assert div.lower().count("</script") == 1


def test_sections_and_not_run_notes(page: str) -> None:
    tree = HTMLParser(page)
    ids = [s.attributes["id"] for s in tree.css("section")]
    for key in (
        "headline",
        "per-day",
        "clusters",
        "proposals",
        "profile",
        "changes",
        "failing",
        "checks",
        "files",
    ):
        assert key in ids
    for key in ("checks",):  # clusters and proposals run in every review now
        assert NOT_RUN in tree.css_first(f"section#{key}").text()
    for chart in ("daily", "profile", "bands", "changes"):
        reading = tree.css_first(f'div[data-chart="{chart}"] p.reading').text()
        assert len(reading) > 20


def test_failing_table_equals_the_csv(page: str, csv: pd.DataFrame) -> None:
    tree = HTMLParser(page)
    table = tree.css_first("#failing-table")
    rows = table.css("tbody tr")
    assert len(rows) == len(csv) == int(table.attributes["data-rows"])
    queries = [neutralize_cell(r.css("td")[0].text()) for r in rows]
    examples = [neutralize_cell(r.css("td")[1].text()) for r in rows]
    searches = [int(r.css("td")[2].attributes["data-v"]) for r in rows]
    assert queries == csv["query"].astype(str).tolist()
    assert examples == csv["example"].astype(str).tolist()  # the CSV neutralises formulas
    assert searches == csv["searches"].tolist()
    card = tree.css_first('div.card[data-figure="failing searches (zero or low)"]')
    assert int(card.attributes["data-searches"]) == csv["searches"].sum()


def test_headline_rates_against_the_previous_week(demo: tuple[Path, Path]) -> None:
    conn = connect(demo[0], read_only=True)
    data = load_report_data(conn, "2026-W46")
    conn.close()
    assert data.previous is not None and data.previous.review_id == "2026-W45"
    assert data.totals.searches == data.profile["searches"].sum() == data.daily["searches"].sum()
    failing = data.profile.loc[data.profile["status"] != "ok", "searches"].sum()
    assert data.totals.rate() == pytest.approx(failing / data.totals.searches)


def test_size_and_plotly_once(page: str, demo: tuple[Path, Path]) -> None:
    js = get_plotlyjs()
    assert page.count(js[:300]) == 1
    assert len(page.encode()) < len(js.encode()) + 1_500_000
    assert "https://cdn" not in page.replace(js, "")
    assert "<link" not in page


def test_exports_are_linked_when_present(demo: tuple[Path, Path]) -> None:
    db, out = demo
    tree = HTMLParser((out / "index.html").read_text(encoding="utf-8"))
    links = [a.attributes["href"] for a in tree.css("section#files a")]
    for name in ("failing_queries.csv", "proposals.csv", "rules.csv", "gaps.md", "clusters.csv"):
        assert name in links
    assert all((out / link).is_file() for link in links)


def test_static_svgs_are_valid_and_escaped(demo: tuple[Path, Path]) -> None:
    conn = connect(demo[0], read_only=True)
    data = load_report_data(conn, "2026-W46")
    conn.close()
    svgs = chart_svgs(all_charts(data))
    assert set(svgs) == {"failing_per_day.svg", "query_profile.svg", "failure_by_band.svg"}
    ns = "{http://www.w3.org/2000/svg}"
    profile = ET.fromstring(svgs["query_profile.svg"])
    points = profile.findall(f"{ns}circle")
    assert len(points) == len(data.profile) + 3  # one per query, three in the legend
    daily = ET.fromstring(svgs["failing_per_day.svg"])
    assert len(daily.findall(f"{ns}rect")) == 1 + 2 * 7 + 2  # background, 7 days x 2, legend


def test_later_stage_sections_show_the_stored_rows(demo: tuple[Path, Path]) -> None:
    db, out = demo
    conn = connect(db, read_only=True)
    clusters = conn.execute(
        "SELECT label FROM clusters WHERE review_id = '2026-W46' ORDER BY searches DESC, label"
    ).fetchall()
    fixes = conn.execute(
        "SELECT count(*) FROM proposals WHERE review_id = '2026-W46' AND rank = 1"
    ).fetchall()[0][0]
    conn.close()
    tree = HTMLParser((out / "index.html").read_text(encoding="utf-8"))
    rows = tree.css("#clusters-table tbody tr")
    assert [r.css("td")[0].text() for r in rows] == [c[0] for c in clusters]
    assert len(tree.css("#proposals-table tbody tr")) == fixes > 0
    assert NOT_RUN not in tree.css_first("section#clusters").text()


def test_daily_counts_match_the_searches_counted_by_pandas(demo: tuple[Path, Path]) -> None:
    # Reference: pandas on the stored rows; day = floor((searched_at - window start) / 1 day),
    # bot searches left out, each search counted under its query's status.
    conn = connect(demo[0], read_only=True)
    data = load_report_data(conn, "2026-W46")
    rows = conn.execute(
        "SELECT s.searched_at, q.status FROM searches s "
        "JOIN review_queries q ON q.review_id = '2026-W46' AND q.query = s.query "
        "LEFT JOIN search_sessions b ON b.file_id = s.file_id AND b.line = s.line "
        "WHERE s.searched_at >= ? AND s.searched_at < ? AND NOT coalesce(b.is_bot, false)",
        [data.start, data.end],
    ).df()
    conn.close()
    at = pd.to_datetime(rows["searched_at"], utc=True)
    day = ((at - pd.Timestamp(data.start)) // pd.Timedelta(days=1)).astype(int)
    want = pd.crosstab(day, rows["status"]).reindex(range(len(data.daily)), fill_value=0)
    assert len(rows) > 0 and want.to_numpy().sum() == data.daily["searches"].sum()
    assert data.daily["zero"].tolist() == want.get("zero", 0 * want.iloc[:, 0]).tolist()
    assert data.daily["low"].tolist() == want.get("low", 0 * want.iloc[:, 0]).tolist()
    assert data.daily["searches"].tolist() == want.sum(axis=1).tolist()


def test_flagged_counts_match_the_searches_counted_by_pandas(demo: tuple[Path, Path]) -> None:
    # Reference: pandas on the stored rows of the window, bot searches left out: per query the
    # searches, distinct visitors (user key, else session key), the engine and click counts, and
    # the example (the text typed most often, ties alphabetical).
    conn = connect(demo[0], read_only=True)
    rows = window_searches(
        conn,
        "2026-W46",
        "s.query, s.query_text, coalesce(s.user_key, s.session_key) AS who, s.results, s.clicks",
    )
    rows = rows[~rows["bot"]]
    got = conn.execute(
        "SELECT query, example, searches, visitors, engine_searches, engine_empty, "
        "click_searches, clicked FROM review_queries WHERE review_id = '2026-W46' ORDER BY query"
    ).df()
    conn.close()
    g = rows.groupby("query")
    want = pd.DataFrame(
        {
            "searches": g.size(),
            "visitors": g["who"].nunique(),
            "engine_searches": g["results"].count(),
            "engine_empty": g["results"].agg(lambda r: int((r == 0).sum())),
            "click_searches": g["clicks"].count(),
            "clicked": g["clicks"].agg(lambda c: int((c > 0).sum())),
        }
    ).sort_index()
    typed = rows.groupby(["query", "query_text"]).size().rename("n").reset_index()
    typed = typed.sort_values(["query", "n", "query_text"], ascending=[True, False, True])
    want["example"] = typed.drop_duplicates("query").set_index("query")["query_text"]
    assert want["engine_searches"].sum() > 0 and want["click_searches"].sum() > 0
    got = got.set_index("query")
    assert got.index.tolist() == want.index.tolist()
    for column in ["searches", "visitors", "engine_searches", "engine_empty", "click_searches"]:
        assert got[column].tolist() == want[column].tolist(), column
    assert got["clicked"].tolist() == want["clicked"].tolist()
    assert got["example"].tolist() == want["example"].tolist()
