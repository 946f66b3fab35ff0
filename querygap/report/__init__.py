"""The review report: reports/<review>/index.html, and static copies of its main charts."""

from __future__ import annotations

from pathlib import Path
from typing import NamedTuple

import duckdb

from querygap.report.charts import Chart, all_charts
from querygap.report.data import ReportData, load_report_data
from querygap.report.html import EXPORTS, render_page
from querygap.report.svg import write_svgs
from querygap.safe_csv import write_csv

__all__ = ["PreparedReport", "prepare_report", "write_prepared", "write_report"]


class PreparedReport(NamedTuple):
    """A review's report data and charts, ready to be written."""

    data: ReportData
    charts: dict[str, Chart]


def write_report(conn: duckdb.DuckDBPyConnection, review_id: str, out_dir: Path) -> Path:
    """Write ``out_dir/index.html`` (and ``out_dir/charts/*.svg``) for a flagged review.

    Run it after the exports, so the page links every export file present in ``out_dir``. Also
    writes ``out_dir/changes.csv`` (every row of the page's changes table, which shows at most
    :data:`querygap.report.html.TABLE_ROWS`) when there is a previous window.
    """
    return write_prepared(prepare_report(conn, review_id), out_dir)


def prepare_report(conn: duckdb.DuckDBPyConnection, review_id: str) -> PreparedReport:
    """The report's figures and charts, read from the workspace (no file is written)."""
    data = load_report_data(conn, review_id)
    return PreparedReport(data, all_charts(data))


def write_prepared(report: PreparedReport, out_dir: Path) -> Path:
    """Write the files of :func:`write_report` from a :func:`prepare_report`; the page's path."""
    data, charts = report
    out_dir.mkdir(parents=True, exist_ok=True)
    if data.changes is not None:
        write_csv(data.changes, out_dir / "changes.csv")
    svgs = [p.name for p in write_svgs(charts, out_dir / "charts")]
    present = [name for name, _ in EXPORTS if (out_dir / name).is_file()]
    path = out_dir / "index.html"
    path.write_text(render_page(data, charts, present, svgs), encoding="utf-8")
    return path
