"""The report's charts: plotly figures, each with a title, labelled axes and a computed reading.

Colours are the Okabe-Ito palette (Okabe and Ito, "Color Universal Design", 2008), which stays
distinguishable under the common forms of colour blindness.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from html import escape

import numpy as np
import pandas as pd
import plotly.graph_objects as go

from querygap.report.data import ReportData, profile_points

OKABE_ITO = {
    "black": "#000000",
    "orange": "#E69F00",
    "sky": "#56B4E9",
    "green": "#009E73",
    "yellow": "#F0E442",
    "blue": "#0072B2",
    "vermillion": "#D55E00",
    "purple": "#CC79A7",
}
STATUS_COLOURS = {
    "zero": OKABE_ITO["vermillion"],
    "low": OKABE_ITO["orange"],
    "ok": OKABE_ITO["blue"],
}
CHANGE_COLOURS = {
    "new": OKABE_ITO["vermillion"],
    "recurring": OKABE_ITO["orange"],
    "resolved": OKABE_ITO["green"],
    "not searched": OKABE_ITO["sky"],
}
FONT = "system-ui, -apple-system, 'Segoe UI', Roboto, Helvetica, Arial, sans-serif"


@dataclass
class Chart:
    """One chart: its anchor id, title, axis labels, one-line reading and plotly figure."""

    key: str
    title: str
    x_label: str
    y_label: str
    reading: str
    figure: go.Figure
    data: dict[str, object] = field(default_factory=dict)  # plain series for the static export


def _layout(fig: go.Figure, title: str, x_label: str, y_label: str, **kw: object) -> go.Figure:
    fig.update_layout(
        title={"text": title, "x": 0.01},
        xaxis_title=x_label,
        yaxis_title=y_label,
        template="simple_white",
        font={"family": FONT, "size": 13},
        margin={"l": 70, "r": 20, "t": 50, "b": 60},
        height=360,
        legend={"orientation": "h", "y": -0.25},
        **kw,
    )
    return fig


def pct(x: float) -> str:
    """A share as a percentage with one decimal: 0.1234 -> '12.3%'."""
    return f"{100 * x:.1f}%"


def daily_chart(data: ReportData) -> Chart:
    """Stacked bars: share of each day's searches that were zero and low, in percent."""
    d = data.daily
    labels = [f"{pd.Timestamp(x):%a %d %b}" for x in d["date"]]
    zero = (d["zero"] / d["searches"]).where(d["searches"] > 0).fillna(0) * 100
    low = (d["low"] / d["searches"]).where(d["searches"] > 0).fillna(0) * 100
    fig = go.Figure(
        [
            go.Bar(name="zero", x=labels, y=zero.round(2), marker_color=STATUS_COLOURS["zero"]),
            go.Bar(name="low", x=labels, y=low.round(2), marker_color=STATUS_COLOURS["low"]),
        ]
    )
    title = "Failing searches per day"
    x_label, y_label = "day of the window", "share of the day's searches (%)"
    _layout(fig, title, x_label, y_label, barmode="stack")
    rated = d.dropna(subset=["rate"])
    if rated.empty:
        reading = "No searches in this window."
    else:
        top = rated.loc[rated["rate"].idxmax()]
        low_day = rated.loc[rated["rate"].idxmin()]
        reading = (
            f"Failures peaked on {pd.Timestamp(top['date']):%A %d %b} at {pct(top['rate'])} "
            f"of searches and were lowest on {pd.Timestamp(low_day['date']):%A} at "
            f"{pct(low_day['rate'])}; the window's rate is {pct(data.totals.rate())}."
        )
    series = {"labels": labels, "zero": zero.tolist(), "low": low.tolist()}
    return Chart("daily", title, x_label, y_label, reading, fig, series)


def zipf_slope(searches: np.ndarray) -> float:
    """Least-squares slope of ln(searches) on ln(rank); Zipf's law predicts about -1."""
    if len(searches) < 2:
        return float("nan")
    rank = np.arange(1, len(searches) + 1)
    return float(np.polyfit(np.log(rank), np.log(searches), 1)[0])


def share_colour(share: float) -> str:
    """A colour between Okabe-Ito blue (share 0) and vermillion (share 1), as #rrggbb."""
    a = np.array([0x00, 0x72, 0xB2], dtype=float)
    b = np.array([0xD5, 0x5E, 0x00], dtype=float)
    r, g, bl = np.round(a + (b - a) * min(max(float(share), 0.0), 1.0)).astype(int)
    return f"#{r:02x}{g:02x}{bl:02x}"


def profile_chart(data: ReportData) -> Chart:
    """Rank against searches on log-log axes, coloured by status.

    One marker per unique query, up to the cap of :func:`querygap.report.data.profile_points`;
    beyond it the head keeps one marker per query and the rest are log-spaced rank bins, coloured
    by their failing share.
    """
    p = data.profile
    points = profile_points(p)
    fig = go.Figure()
    for status in ("ok", "low", "zero"):
        part = points[points["status"] == status]
        fig.add_trace(
            go.Scatter(
                name=status,
                x=part["rank"],
                y=part["searches"],
                mode="markers",
                marker={"color": STATUS_COLOURS[status], "size": 5, "opacity": 0.8},
                text=part["query"].map(escape),  # plotly reads tags in text
                hovertemplate="%{text}<br>rank %{x}, %{y} searches<extra></extra>",
            )
        )
    binned = points[points["status"] == "bin"]
    if len(binned):
        hover = [
            f"ranks {r.rank_from:,}–{r.rank_to:,} ({r.queries:,} queries)<br>"
            f"{r.total_searches:,.0f} searches, {pct(r.failing_share)} failing"
            for r in binned.itertuples(index=False)
        ]
        fig.add_trace(
            go.Scatter(
                name="rank bin (colour: failing share)",
                x=binned["rank"],
                y=binned["searches"],
                mode="markers",
                marker={
                    "symbol": "square",
                    "size": 6,
                    "color": binned["failing_share"],
                    "cmin": 0,
                    "cmax": 1,
                    "colorscale": [[0, STATUS_COLOURS["ok"]], [1, STATUS_COLOURS["zero"]]],
                    "colorbar": {"title": {"text": "failing share"}, "len": 0.6},
                },
                text=hover,
                hovertemplate="%{text}<br>mean %{y:.2f} searches per query<extra></extra>",
            )
        )
    title = "How searches spread over queries (Zipf's law)"
    x_label, y_label = "rank of the query (1 = most searched, log scale)", "searches (log scale)"
    _layout(fig, title, x_label, y_label)
    fig.update_xaxes(type="log", dtick=1)  # a tick at each power of ten
    fig.update_yaxes(type="log", dtick=1)
    b = data.bands.set_index("band")
    slope = zipf_slope(p["searches"].to_numpy(dtype=float))
    n = len(p)
    if n == 0:
        reading = "No queries in this window."
    else:
        reading = (
            f"{b.loc['head', 'queries']:,} of {n:,} unique queries "
            f"({pct(b.loc['head', 'queries'] / n)}) make half of all searches; "
            f"{b.loc['tail', 'queries']:,} make the last fifth. "
            f"Fitted slope {slope:.2f} (Zipf's law predicts about -1)."
        )
        if len(binned):
            reading += (
                f" The {len(points) - len(binned):,} most searched queries are drawn one by one, "
                f"the other {n - len(points) + len(binned):,} as {len(binned):,} rank bins "
                "at their mean searches per query."
            )
    colours = [
        STATUS_COLOURS[s] if s in STATUS_COLOURS else share_colour(f)
        for s, f in zip(points["status"], points["failing_share"], strict=True)
    ]
    series = {
        "rank": points["rank"].tolist(),
        "searches": points["searches"].tolist(),
        "status": points["status"].tolist(),
        "colour": colours,
    }
    return Chart("profile", title, x_label, y_label, reading, fig, series)


def band_chart(data: ReportData) -> Chart:
    """Failure rate (zero or low searches / searches) per frequency band, in percent."""
    b = data.bands
    rate = (b["rate"].fillna(0) * 100).round(2)
    labels = [f"{r.band} ({r.queries:,} queries)" for r in b.itertuples(index=False)]
    fig = go.Figure(
        go.Bar(
            x=labels,
            y=rate,
            marker_color=OKABE_ITO["vermillion"],  # one colour: the bars are all failure rates
            text=[f"{v:.1f}%" for v in rate],
            textposition="outside",
            showlegend=False,
        )
    )
    title = "Failure rate by band"
    x_label, y_label = (
        "band (head: first 50% of searches, middle: next 30%, tail: last 20%)",
        ("failing searches (%)"),
    )
    _layout(fig, title, x_label, y_label)
    if b["searches"].sum() == 0:
        reading = "No searches in this window."
    else:
        worst = b.loc[b["rate"].fillna(-1).idxmax()]
        best = b.loc[b["rate"].fillna(2).idxmin()]
        reading = (
            f"The {worst['band']} fails most: {pct(worst['rate'])} of its searches, "
            f"against {pct(best['rate'])} in the {best['band']}."
        )
    return Chart(
        "bands", title, x_label, y_label, reading, fig, {"labels": labels, "rate": rate.tolist()}
    )


def changes_chart(data: ReportData) -> Chart | None:
    """Unique failing queries new, recurring, resolved or not searched since the previous window."""
    if data.changes is None or data.previous is None:
        return None
    order = ["new", "recurring", "resolved", "not searched"]
    counts = data.changes["change"].value_counts().reindex(order, fill_value=0)
    fig = go.Figure(
        go.Bar(
            x=order,
            y=counts.to_numpy(),
            marker_color=[CHANGE_COLOURS[k] for k in order],
            text=[f"{v:,}" for v in counts],
            textposition="outside",
            showlegend=False,
        )
    )
    title = f"Failing queries since {data.previous.review_id}"
    x_label, y_label = "change", "unique queries"
    _layout(fig, title, x_label, y_label)
    reading = (
        f"{counts['new']:,} queries fail for the first time, {counts['recurring']:,} failed in "
        f"{data.previous.review_id} too, {counts['resolved']:,} were fixed and "
        f"{counts['not searched']:,} were not searched this time."
    )
    return Chart(
        "changes",
        title,
        x_label,
        y_label,
        reading,
        fig,
        {"labels": order, "count": counts.tolist()},
    )


def clusters_chart(data: ReportData, top: int = 15) -> Chart | None:
    """Horizontal bars: failing searches of the largest clusters, and those a proposal reaches.

    The second bar is the cluster's searches whose key term has a spelling, synonym or variant
    proposal (column searches_with_fix), drawn when the column is there.
    """
    c = data.clusters
    if c is None or "searches" not in c or "label" not in c:
        return None
    c = c.sort_values("searches", ascending=False).head(top).iloc[::-1]
    labels = c["label"].astype(str).map(escape).tolist()  # plotly reads tags in text
    fig = go.Figure(
        go.Bar(
            name="failing searches",
            y=labels,
            x=c["searches"],
            orientation="h",
            marker_color=OKABE_ITO["vermillion"],
        )
    )
    if "searches_with_fix" in c:
        fig.add_trace(
            go.Bar(
                name="of them, with a proposed fix for their term",
                y=labels,
                x=c["searches_with_fix"],
                orientation="h",
                marker_color=OKABE_ITO["green"],
                width=0.45,  # drawn inside the bar of all its failing searches
            )
        )
    title = f"The {len(c)} largest clusters of failing searches"
    x_label, y_label = "failing searches in the window", "cluster"
    _layout(fig, title, x_label, y_label, barmode="overlay")
    fig.update_layout(height=max(360, 28 * len(c) + 120))
    total = int(data.clusters["searches"].sum())
    share = c["searches"].sum() / total if total else 0.0
    reading = (
        f"The largest cluster, \u201c{c['label'].iloc[-1]}\u201d, "
        f"holds {int(c['searches'].iloc[-1]):,} "
        f"failing searches; these {len(c)} clusters hold {pct(share)} of the clustered ones."
    )
    if "searches_with_fix" in data.clusters and total:
        reached = int(data.clusters["searches_with_fix"].sum())
        reading += f" Proposed fixes reach {reached:,} of them ({pct(reached / total)})."
    return Chart("clusters", title, x_label, y_label, reading, fig)


def all_charts(data: ReportData) -> dict[str, Chart]:
    """Every chart the page shows, by key; charts whose stage did not run are left out."""
    charts = [
        daily_chart(data),
        profile_chart(data),
        band_chart(data),
        changes_chart(data),
        clusters_chart(data),
    ]
    return {c.key: c for c in charts if c is not None}
