"""The report page: one self-contained HTML file (plotly.js inlined once, no network fetch).

Every text that comes from the log, the content or another stage goes through :func:`html.escape`;
the only scripts are plotly.js, plotly's figure calls (whose JSON escapes ``</``) and the small
table-sorting script below, which reads cells but never builds markup from them.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from datetime import UTC, datetime, timedelta
from html import escape

import pandas as pd
import plotly.io as pio
from plotly.offline import get_plotlyjs

from querygap.report.charts import Chart, pct
from querygap.report.data import BAND_LIMITS, FAILING_ROWS, ReportData, Totals

NOT_RUN = "not run for this review"

CSS = """
:root { --ink:#1a1a1a; --muted:#555; --rule:#d0d0d0; --band:#f4f4f4; --accent:#0072B2; }
* { box-sizing: border-box; }
body { font-family: system-ui, -apple-system, "Segoe UI", Roboto, Helvetica, Arial, sans-serif;
       color: var(--ink); margin: 0 auto; max-width: 1120px; padding: 1rem 1.5rem 3rem;
       line-height: 1.45; font-size: 15px; }
h1 { font-size: 1.6rem; margin: .5rem 0 .2rem; }
h2 { font-size: 1.2rem; margin: 2rem 0 .4rem; border-bottom: 2px solid var(--rule); }
p.lede, p.reading, .muted { color: var(--muted); }
p.reading { margin: .2rem 0 1rem; font-style: italic; }
nav ul { list-style: none; padding: 0; display: flex; flex-wrap: wrap; gap: .3rem 1rem; }
a { color: var(--accent); }
.cards { display: grid; grid-template-columns: repeat(auto-fit, minmax(170px, 1fr)); gap: .6rem; }
.card { border: 1px solid var(--rule); border-radius: 6px; padding: .6rem .8rem; }
.card .value { font-size: 1.5rem; font-weight: 600; }
.card .label, .card .delta { font-size: .85rem; color: var(--muted); }
.scroll { max-height: 32rem; overflow: auto; border: 1px solid var(--rule); }
table { border-collapse: collapse; width: 100%; font-size: .9rem; }
th, td { padding: .25rem .5rem; border-bottom: 1px solid var(--rule); text-align: left;
         vertical-align: top; }
th { background: var(--band); position: sticky; top: 0; cursor: pointer; }
td.num, th.num { text-align: right; font-variant-numeric: tabular-nums; }
td.query { overflow-wrap: break-word; word-break: normal; }
td.wide { min-width: 24rem; }
td.date { white-space: nowrap; }
h3 { font-size: 1rem; margin: 1.2rem 0 .3rem; }
.notrun { padding: .6rem .8rem; background: var(--band); border-left: 4px solid var(--rule); }
.status-zero { color: #b34a00; font-weight: 600; }
.status-low { color: #8a5a00; }
footer { margin-top: 3rem; font-size: .85rem; color: var(--muted); }
@media print {
  body { max-width: none; font-size: 11pt; padding: 0; }
  nav, .modebar, .modebar-container { display: none !important; }
  .scroll { max-height: none; overflow: visible; border: none; }
  section, .chart, tr { break-inside: avoid; }
  h2 { break-after: avoid; }
  a { color: inherit; text-decoration: none; }
  th { position: static; }
}
"""

# Sort a table by a clicked header: numbers by data-v, text by content; no markup is built.
SORT_JS = """
document.querySelectorAll('table.sortable').forEach(function (table) {
  table.querySelectorAll('th').forEach(function (th, col) {
    th.addEventListener('click', function () {
      var body = table.tBodies[0];
      var rows = Array.prototype.slice.call(body.rows);
      var down = th.getAttribute('aria-sort') !== 'descending';
      table.querySelectorAll('th').forEach(function (h) { h.removeAttribute('aria-sort'); });
      th.setAttribute('aria-sort', down ? 'descending' : 'ascending');
      rows.sort(function (a, b) {
        var x = a.cells[col], y = b.cells[col];
        var u = x.getAttribute('data-v'), v = y.getAttribute('data-v');
        var r = (u !== null && v !== null) ? parseFloat(u) - parseFloat(v)
              : x.textContent.localeCompare(y.textContent);
        return down ? -r : r;
      });
      rows.forEach(function (row) { body.appendChild(row); });
    });
  });
});
"""

EXPORTS = (
    ("failing_queries.csv", "failing queries, one row per unique query"),
    ("proposals.csv", "proposed fixes with their evidence"),
    ("rules.csv", "the rules file to edit and feed to a check"),
    ("gaps.md", "content gaps for writers"),
    ("gaps.csv", "content gaps as a table"),
    ("clusters.csv", "clusters of failing queries"),
    ("changes.csv", "failing queries new, recurring and resolved since the previous window"),
)

FAILING_TABLE = [
    ("query", "query", "text"),
    ("example", "typed as", "text"),
    ("searches", "searches", "int"),
    ("status", "status", "status"),
    ("best_score", "best cosine", "float"),
    ("coverage", "coverage", "pct"),
    ("unmatched_terms", "missing terms", "text"),
    ("top_page_title", "best page", "text"),
    ("visitors", "visitors", "int"),
]


def _missing(v: object) -> bool:
    return v is None or (isinstance(v, float) and math.isnan(v)) or v is pd.NA or v is pd.NaT


def cell(value: object, kind: str) -> str:
    """One ``<td>``: numbers right-aligned with a ``data-v`` sort key, everything escaped."""
    if _missing(value):
        return '<td class="num" data-v="-1">–</td>' if kind in NUMERIC else "<td></td>"
    if kind == "int":
        return f'<td class="num" data-v="{int(value)}">{int(value):,}</td>'  # type: ignore[call-overload]
    if kind == "float":
        return f'<td class="num" data-v="{float(value)}">{float(value):.3f}</td>'  # type: ignore[arg-type]
    if kind == "conf":
        return f'<td class="num" data-v="{float(value)}">{float(value):.2f}</td>'  # type: ignore[arg-type]
    if kind == "points":  # a difference of two shares, in percentage points
        return f'<td class="num" data-v="{float(value)}">{100 * float(value):+.1f} pts</td>'  # type: ignore[arg-type]
    if kind == "pvalue":
        v = float(value)  # type: ignore[arg-type]
        return f'<td class="num" data-v="{v}">{"< 0.001" if v < 0.001 else f"{v:.3f}"}</td>'
    if kind == "pct":
        return f'<td class="num" data-v="{float(value)}">{pct(float(value))}</td>'  # type: ignore[arg-type]
    text = escape(str(value))
    if kind == "status":
        return f'<td class="status-{text}">{text}</td>'
    if kind == "date":
        return f'<td class="date">{text}</td>'
    if kind == "wide":
        return f'<td class="query wide">{text}</td>'
    return f'<td class="query">{text}</td>'


NUMERIC = ("int", "float", "pct", "conf", "points", "pvalue")
#: Most rows any table of the page shows; the CSV files hold them all.
TABLE_ROWS = 500


def table(
    df: pd.DataFrame,
    columns: Sequence[tuple[str, str, str]],
    table_id: str,
    limit: int = TABLE_ROWS,
    full: str | None = None,
    total: int | None = None,
) -> str:
    """A sortable table of ``df``'s first ``limit`` rows, ``columns`` as (column, header, kind).

    When rows are left out, a note above the table says how many it shows of how many and links
    ``full`` (the export holding them all) when given. ``data-rows`` is the number of rows shown,
    ``data-total`` the number of rows of ``df``, or ``total`` when ``df`` holds only the first
    of that many.
    """
    cols = [c for c in columns if c[0] in df.columns]
    total = len(df) if total is None else total
    shown = df.iloc[:limit]
    head = "".join(
        f'<th class="num">{escape(h)}</th>' if k in NUMERIC else f"<th>{escape(h)}</th>"
        for _, h, k in cols
    )
    values = [shown[c].tolist() for c, _, _ in cols]
    body = "\n".join(
        "<tr>" + "".join(cell(v[i], k) for v, (_, _, k) in zip(values, cols, strict=True)) + "</tr>"
        for i in range(len(shown))
    )
    note = ""
    if len(shown) < total:
        where = (
            f' All {total:,} are in <a href="{escape(full)}">{escape(full)}</a>.' if full else ""
        )
        note = (
            f'<p class="muted capped" data-for="{table_id}">Showing the first {len(shown):,} of '
            f"{total:,} rows.{where}</p>"
        )
    return (
        f'{note}<div class="scroll"><table class="sortable" id="{table_id}" '
        f'data-rows="{len(shown)}" data-total="{total}">'
        f"<thead><tr>{head}</tr></thead><tbody>\n{body}\n</tbody></table></div>"
    )


def chart_block(chart: Chart | None) -> str:
    if chart is None:
        return ""
    div = pio.to_html(
        chart.figure,
        full_html=False,
        include_plotlyjs=False,
        div_id=f"chart-{chart.key}",
        config={"displaylogo": False, "responsive": True},
    )
    reading = f'<p class="reading">{escape(chart.reading)}</p>'
    return f'<div class="chart" data-chart="{chart.key}">{div}{reading}</div>'


def _delta(now: float, before: float | None, points: bool) -> str:
    if before is None:
        return "no previous window"
    if points:
        d = 100 * (now - before)
        return f"{d:+.1f} points vs {pct(before)}"
    change = (now - before) / before if before else float("nan")
    return f"{change:+.1%} vs {before:,.0f}" if before else f"vs {before:,.0f}"


def headline(now: Totals, before: Totals | None) -> str:
    """Cards: searches, unique queries and failure rates, each against the previous window."""
    p = before
    cards = [
        (
            "searches",
            f"{now.searches:,}",
            _delta(now.searches, p and p.searches, False),
            now.searches,
        ),
        (
            "unique queries",
            f"{now.queries:,}",
            _delta(now.queries, p and p.queries, False),
            now.queries,
        ),
        (
            "failing searches (zero or low)",
            pct(now.rate()),
            _delta(now.rate(), p.rate() if p else None, True),
            now.failing_searches(),
        ),
        (
            "zero: nothing matches",
            pct(now.rate("zero")),
            _delta(now.rate("zero"), p.rate("zero") if p else None, True),
            now.by_status.get("zero", (0, 0))[0],
        ),
        (
            "low: matches poorly",
            pct(now.rate("low")),
            _delta(now.rate("low"), p.rate("low") if p else None, True),
            now.by_status.get("low", (0, 0))[0],
        ),
    ]
    html = "".join(
        f'<div class="card" data-figure="{escape(label)}" data-searches="{n}">'
        f'<div class="value">{value}</div><div class="label">{escape(label)}</div>'
        f'<div class="delta">{escape(delta)}</div></div>'
        for label, value, delta, n in cards
    )
    failing = (
        f"{now.failing_searches():,} failing searches from {now.failing_queries():,} unique queries"
    )
    prev = f"; previous window {escape(before.review_id)}" if before else ""
    return f'<div class="cards">{html}</div><p class="muted">{failing}{prev}.</p>'


def _not_run(what: str) -> str:
    return f'<p class="notrun">{escape(what)}: {NOT_RUN}.</p>'


CLUSTERS_TABLE = [
    ("label", "cluster", "text"),
    ("searches", "failing searches", "int"),
    ("queries", "queries", "int"),
    ("previous_searches", "previous window", "int"),
    ("change", "change", "int"),
    ("best_fix", "best fix", "text"),
    ("fix_rescued", "rescued by the fix", "int"),
    ("searches_with_fix", "searches with a fix", "int"),
    ("fixes", "fixes", "int"),
]

PROPOSALS_TABLE = [
    ("kind", "kind", "text"),
    ("term", "term", "text"),
    ("suggestion", "suggestion", "text"),
    ("searches", "searches", "int"),
    ("rescued", "rescued", "int"),
    ("confidence", "confidence", "conf"),
    ("evidence", "evidence", "wide"),
]


def fix_text(kind: object, term: object, suggestion: object) -> str | None:
    """A proposal as one phrase: 'spelling: recieve → receive', 'content gap: solar'."""
    if _missing(kind):
        return "none proposed"
    if kind == "content_gap" or not suggestion:
        return f"content gap: {term}"
    return f"{kind}: {term} → {suggestion}"


def clusters_section(data: ReportData, chart: Chart | None) -> str:
    if data.clusters is None:
        return _not_run("Clustering")
    c = data.clusters.copy()
    if "fix_kind" in c:
        c["best_fix"] = [
            fix_text(k, t, s)
            for k, t, s in zip(c["fix_kind"], c["fix_term"], c["fix_suggestion"], strict=True)
        ]
    note = (
        '<p class="muted">Each cluster is named after its most searched query. Best fix: of '
        "the proposals for the terms the cluster's queries were "
        "grouped on, the one that rescues most searches. Rescued by the fix counts every "
        "failing search holding its term, in this cluster or another; searches with a fix: the "
        "cluster's searches whose term has a spelling, synonym or variant proposal.</p>"
    )
    return (
        chart_block(chart) + note + table(c, CLUSTERS_TABLE, "clusters-table", full="clusters.csv")
    )


def proposals_section(data: ReportData) -> str:
    if data.proposals is None:
        return _not_run("Proposals")
    p = data.proposals.copy()
    p["kind"] = p["kind"].astype(str).str.replace("_", " ", regex=False)
    intro = (
        '<p class="muted">The best candidate for each term, most rescued searches first. '
        "Rescued: searches whose query scores ok when re-scored with the fix applied. "
        "Confidence runs from 0 to 1.</p>"
    )
    return intro + table(p, PROPOSALS_TABLE, "proposals-table", full="proposals.csv")


CHECKS_TABLE = [
    ("kind", "kind", "text"),
    ("term", "term", "text"),
    ("replacement", "replacement", "text"),
    ("decided_at", "decided", "date"),
    ("before_searches", "searches before", "int"),
    ("after_searches", "searches after", "int"),
    ("failure_before", "failing before", "pct"),
    ("failure_after", "failing after", "pct"),
    ("difference", "difference", "points"),
    ("p_value", "p-value", "pvalue"),
    ("verdict", "verdict", "text"),
    ("reason", "reason", "text"),
]

SIMULATION_TABLE = [
    ("line", "line", "int"),
    ("kind", "kind", "text"),
    ("term", "term", "text"),
    ("replacement", "replacement", "text"),
    ("status", "status", "text"),
    ("effect", "effect", "text"),
    ("queries", "queries", "int"),
    ("searches", "searches", "int"),
    ("fixed_searches", "fixed", "int"),
    ("still_failing_searches", "still failing", "int"),
    ("newly_failing_searches", "newly failing", "int"),
    ("regressed_searches", "regressed", "int"),
]


def checks_section(data: ReportData) -> str:
    if data.checks is None and data.simulation is None:
        return _not_run("Fix check") + (
            '<p class="muted">Decisions accepted with querygap decide are checked at the first '
            "review after them; querygap simulate re-scores this review's queries with the rules "
            "of rules.csv applied.</p>"
        )
    parts = []
    if data.checks is not None:
        checks = data.checks.copy()
        if "decided_at" in checks:
            checks["decided_at"] = pd.to_datetime(checks["decided_at"]).dt.strftime("%Y-%m-%d")
        parts.append(
            "<h3>Accepted decisions, before and after</h3>"
            '<p class="muted">Failure rates of the searches each decision targets, in equal '
            "windows before and after it was decided.</p>"
            + table(checks, CHECKS_TABLE, "checks-table")
        )
    else:
        parts.append(
            _not_run("Check of accepted decisions")
            + '<p class="muted">Decisions accepted with querygap decide are checked at the '
            "first review after them.</p>"
        )
    sim = data.simulation
    if sim is not None and data.simulation_rules is not None:
        which = "every rule not rejected" if sim.get("not_rejected") else "accepted rules only"
        parts.append(
            "<h3>Latest simulation of a rules file</h3>"
            f'<p class="muted">{escape(str(sim.get("rules_file", "")))} ({escape(which)}), '
            f"re-scored against this review's queries. Searches per outcome.</p>"
            + table(data.simulation_rules, SIMULATION_TABLE, "simulation-table")
        )
    else:
        parts.append(
            _not_run("Simulation of a rules file")
            + '<p class="muted">querygap simulate re-scores this review\'s queries with the '
            "rules of rules.csv applied.</p>"
        )
    return "".join(parts)


def changes_section(data: ReportData, chart: Chart | None) -> str:
    if data.changes is None or data.previous is None:
        return '<p class="notrun">No review of the previous window of the same length.</p>'
    cols = [
        ("change", "change", "text"),
        ("query", "query", "text"),
        ("example", "typed as", "text"),
        ("searches", "searches", "int"),
        ("previous_searches", f"searches in {data.previous.review_id}", "int"),
        ("status", "status", "status"),
        ("previous_status", f"status in {data.previous.review_id}", "status"),
    ]
    # Most searched first (in either window), so a capped table keeps the changes that matter.
    weight = data.changes[["searches", "previous_searches"]].max(axis=1)
    rows = data.changes.assign(_w=weight).sort_values(
        ["_w", "change", "query"], ascending=[False, True, True], kind="stable"
    )
    intro = '<p class="muted">Most searched first, in this window or the previous one.</p>'
    return chart_block(chart) + intro + table(rows, cols, "changes-table", full="changes.csv")


def bands_table(data: ReportData) -> str:
    cols = [
        ("band", "band", "text"),
        ("queries", "unique queries", "int"),
        ("searches", "searches", "int"),
        ("failing", "failing searches", "int"),
        ("rate", "failure rate", "pct"),
    ]
    return table(data.bands, cols, "bands-table")


def exports_list(present: Sequence[str], svgs: Sequence[str]) -> str:
    items = [
        f'<li><a href="{escape(name)}">{escape(name)}</a>: {escape(what)}</li>'
        for name, what in EXPORTS
        if name in present
    ]
    items += [
        f'<li><a href="charts/{escape(n)}">charts/{escape(n)}</a>: static chart for slides</li>'
        for n in svgs
    ]
    return "<ul>" + "".join(items) + "</ul>"


def _window_text(data: ReportData) -> str:
    last = data.end - timedelta(seconds=1)
    return f"{data.start:%a %d %b %Y} to {last:%a %d %b %Y}"


def render_page(
    data: ReportData,
    charts: dict[str, Chart],
    exports: Sequence[str],
    svgs: Sequence[str],
    now: datetime | None = None,
) -> str:
    """The whole page as a string."""
    made = (now or datetime.now(UTC)).strftime("%Y-%m-%d %H:%M UTC")
    head_limit, mid_limit = (int(100 * lim) for _, lim in BAND_LIMITS[:2])
    sections = [
        ("headline", "This window in figures", headline(data.totals, data.previous)),
        ("per-day", "Failing searches per day", chart_block(charts.get("daily"))),
        (
            "clusters",
            "Clusters of failing searches",
            clusters_section(data, charts.get("clusters")),
        ),
        ("proposals", "Proposed fixes", proposals_section(data)),
        (
            "profile",
            "Head, middle and tail",
            f'<p class="muted">Queries ranked by searches. Head: the most searched queries that '
            f"make the first {head_limit}% of searches; middle: the next "
            f"{mid_limit - head_limit}%; tail: the rest.</p>"
            + chart_block(charts.get("profile"))
            + chart_block(charts.get("bands"))
            + bands_table(data),
        ),
        (
            "changes",
            "New, recurring and resolved failures",
            changes_section(data, charts.get("changes")),
        ),
        (
            "failing",
            "Failing queries",
            f'<p class="muted">The rows of failing_queries.csv, most searched first '
            f"({data.totals.failing_queries():,} unique queries). Click a header to sort.</p>"
            + table(
                data.failing,
                FAILING_TABLE,
                "failing-table",
                limit=FAILING_ROWS,
                full="failing_queries.csv",
                total=data.totals.failing_queries(),
            ),
        ),
        ("checks", "Fix check", checks_section(data)),
        ("files", "Files in this folder", exports_list(exports, svgs)),
    ]
    nav = "".join(f'<li><a href="#{key}">{escape(title)}</a></li>' for key, title, _ in sections)
    body = "\n".join(
        f'<section id="{key}"><h2>{escape(title)}</h2>\n{content}\n</section>'
        for key, title, content in sections
    )
    static = (
        "Static copies of the main charts (SVG, drawn by querygap without a browser) are in "
        "charts/."
        if svgs
        else "No static charts were written."
    )
    return f"""<!DOCTYPE html>
<html lang="en">
<head>
<meta charset="utf-8">
<meta name="viewport" content="width=device-width, initial-scale=1">
<title>Failing searches, {escape(data.review_id)}</title>
<style>{CSS}</style>
<script>{get_plotlyjs()}</script>
</head>
<body>
<header>
<h1>Failing searches, {escape(data.review_id)}</h1>
<p class="lede">{escape(_window_text(data))}. Scored against index {escape(data.index_id)}.</p>
<nav><ul>{nav}</ul></nav>
</header>
{body}
<footer>
<p>Made by querygap on {made}. The page works offline: it fetches nothing. {static}
Colours follow the Okabe-Ito palette.</p>
</footer>
<script>{SORT_JS}</script>
</body>
</html>
"""
