"""Static SVG copies of the main charts, for slides, drawn from the data without a browser.

A plotly PNG/SVG export needs kaleido and a Chrome; these few shapes (bars and a log-log scatter)
are simple enough to draw directly, so the export works offline with no extra package.
Every text is XML-escaped.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from html import escape
from pathlib import Path

import numpy as np

from querygap.report.charts import OKABE_ITO, STATUS_COLOURS, Chart

W, H = 800, 450
LEFT, RIGHT, TOP, BOTTOM = 80, 20, 50, 90


def _frame(title: str, x_label: str, y_label: str, body: list[str]) -> str:
    cy = TOP + (H - TOP - BOTTOM) / 2
    head = [
        f'<svg xmlns="http://www.w3.org/2000/svg" width="{W}" height="{H}" '
        f'viewBox="0 0 {W} {H}" font-family="Helvetica, Arial, sans-serif" font-size="13">',
        f'<rect width="{W}" height="{H}" fill="#ffffff"/>',
        f'<text x="{LEFT}" y="28" font-size="17" font-weight="bold">{escape(title)}</text>',
        f'<text x="{LEFT + (W - LEFT - RIGHT) / 2}" y="{H - 12}" text-anchor="middle">'
        f"{escape(x_label)}</text>",
        f'<text x="18" y="{cy}" text-anchor="middle" transform="rotate(-90 18 {cy})">'
        f"{escape(y_label)}</text>",
        f'<line x1="{LEFT}" y1="{H - BOTTOM}" x2="{W - RIGHT}" y2="{H - BOTTOM}" stroke="#000"/>',
        f'<line x1="{LEFT}" y1="{TOP}" x2="{LEFT}" y2="{H - BOTTOM}" stroke="#000"/>',
    ]
    return "\n".join([*head, *body, "</svg>"]) + "\n"


def _nice_max(value: float) -> float:
    """The smallest of 1, 2, 2.5, 5 x 10^k that is at least ``value`` (1 when value <= 0)."""
    if value <= 0:
        return 1.0
    k = 10 ** math.floor(math.log10(value))
    return next(m * k for m in (1, 2, 2.5, 5, 10) if m * k >= value)


def bar_svg(
    title: str,
    x_label: str,
    y_label: str,
    labels: Sequence[str],
    series: Sequence[tuple[str, Sequence[float], str]],
) -> str:
    """Stacked vertical bars: ``series`` is [(name, values, colour), ...], one value per label."""
    n = max(1, len(labels))
    totals = [sum(s[1][i] for s in series) for i in range(len(labels))]
    top = _nice_max(max(totals, default=0.0))
    plot_w, plot_h = W - LEFT - RIGHT, H - TOP - BOTTOM
    slot = plot_w / n
    body = []
    for tick in range(5):
        v = top * tick / 4
        y = H - BOTTOM - plot_h * tick / 4
        body.append(f'<line x1="{LEFT - 4}" y1="{y:.1f}" x2="{LEFT}" y2="{y:.1f}" stroke="#000"/>')
        body.append(f'<text x="{LEFT - 7}" y="{y + 4:.1f}" text-anchor="end">{v:g}</text>')
    for i, label in enumerate(labels):
        x = LEFT + slot * i + slot * 0.15
        base = H - BOTTOM
        for _name, values, colour in series:
            h = plot_h * values[i] / top
            base -= h
            body.append(
                f'<rect x="{x:.1f}" y="{base:.1f}" width="{slot * 0.7:.1f}" height="{h:.1f}" '
                f'fill="{colour}"/>'
            )
        body.append(
            f'<text x="{x + slot * 0.35:.1f}" y="{H - BOTTOM + 18}" text-anchor="middle">'
            f"{escape(label)}</text>"
        )
    if len(series) > 1:
        for j, (name, _values, colour) in enumerate(series):
            x = W - RIGHT - 110 * (len(series) - j)
            body.append(f'<rect x="{x}" y="{TOP - 12}" width="12" height="12" fill="{colour}"/>')
            body.append(f'<text x="{x + 17}" y="{TOP - 2}">{escape(name)}</text>')
    return _frame(title, x_label, y_label, body)


def loglog_svg(
    title: str,
    x_label: str,
    y_label: str,
    x: Sequence[float],
    y: Sequence[float],
    colours: Sequence[str],
) -> str:
    """Points on log10 axes with a tick at each power of ten; values must be positive."""
    plot_w, plot_h = W - LEFT - RIGHT, H - TOP - BOTTOM
    x_hi = math.ceil(math.log10(max(max(x, default=1), 10)))
    y_hi = math.ceil(math.log10(max(max(y, default=1), 10)))
    body = []
    for k in range(x_hi + 1):
        px = LEFT + plot_w * k / x_hi
        body.append(
            f'<text x="{px:.1f}" y="{H - BOTTOM + 18}" text-anchor="middle">{10**k:,}</text>'
        )
    for k in range(y_hi + 1):
        py = H - BOTTOM - plot_h * k / y_hi
        body.append(f'<text x="{LEFT - 7}" y="{py + 4:.1f}" text-anchor="end">{10**k:,}</text>')
    for xv, yv, colour in zip(x, y, colours, strict=True):
        px = LEFT + plot_w * math.log10(xv) / x_hi
        py = H - BOTTOM - plot_h * math.log10(yv) / y_hi
        body.append(f'<circle cx="{px:.1f}" cy="{py:.1f}" r="2.5" fill="{colour}" opacity="0.7"/>')
    for j, (name, colour) in enumerate(STATUS_COLOURS.items()):
        xx = W - RIGHT - 240 + 80 * j
        body.append(f'<circle cx="{xx}" cy="{TOP - 6}" r="5" fill="{colour}"/>')
        body.append(f'<text x="{xx + 9}" y="{TOP - 2}">{escape(name)}</text>')
    return _frame(title, x_label, y_label, body)


def chart_svgs(charts: dict[str, Chart]) -> dict[str, str]:
    """SVG text of the daily, frequency-profile and band charts, by file name."""
    out: dict[str, str] = {}
    if "daily" in charts:
        c = charts["daily"]
        d = c.data
        out["failing_per_day.svg"] = bar_svg(
            c.title,
            c.x_label,
            c.y_label,
            d["labels"],  # type: ignore[arg-type]
            [("zero", d["zero"], STATUS_COLOURS["zero"]), ("low", d["low"], STATUS_COLOURS["low"])],  # type: ignore[list-item]
        )
    if "profile" in charts:
        c = charts["profile"]
        d = c.data
        # Failing queries drawn last, so the ok ones do not hide them.
        status = np.asarray(d["status"])
        order = np.argsort(status != "ok", kind="stable")
        colours = np.asarray(d["colour"])[order].tolist()
        out["query_profile.svg"] = loglog_svg(
            c.title,
            c.x_label,
            c.y_label,
            np.asarray(d["rank"])[order].tolist(),
            np.asarray(d["searches"])[order].tolist(),
            colours,
        )
    if "bands" in charts:
        c = charts["bands"]
        d = c.data
        out["failure_by_band.svg"] = bar_svg(
            c.title,
            c.x_label,
            c.y_label,
            d["labels"],  # type: ignore[arg-type]
            [("failing", d["rate"], OKABE_ITO["vermillion"])],  # type: ignore[list-item]
        )
    return out


def write_svgs(charts: dict[str, Chart], folder: Path) -> list[Path]:
    """Write the static charts into ``folder`` (created); returns the paths written."""
    folder.mkdir(parents=True, exist_ok=True)
    paths = []
    for name, text in chart_svgs(charts).items():
        path = folder / name
        path.write_text(text, encoding="utf-8")
        paths.append(path)
    return paths
