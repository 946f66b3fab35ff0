"""The bundled demo: Kestrel Valley Water, an invented utility, and three weeks of its searches.

``querygap demo`` recreates a workspace, loads demo_logs/ (logs and site), reviews the week
before the demo's change (2026-W46, with W45 as its previous week) and writes reports/2026-W46/.
"""

from __future__ import annotations

from collections.abc import Callable
from pathlib import Path
from typing import Any

from querygap.errors import InputError
from querygap.logload import LoadOptions, load_log
from querygap.pageload import ContentOptions, load_content
from querygap.review import ReviewResult, failing_queries, run_review
from querygap.settings import ReviewSettings
from querygap.windows import iso_week
from querygap.workspace import connect

DEMO_DIR = Path(__file__).resolve().parent.parent / "demo_logs"
DEMO_WEEKS = ("2026-W45", "2026-W46")


def demo_files(demo_dir: Path = DEMO_DIR) -> tuple[list[Path], Path]:
    """The demo's log files (in week order) and its site folder."""
    logs = sorted(p for p in demo_dir.glob("searches-*") if p.is_file())
    site = demo_dir / "site"
    if not logs or not site.is_dir():
        raise InputError(f"{demo_dir}: the demo data is missing; run python demo_logs/generate.py")
    return logs, site


def run_demo(
    db: Path, out_dir: Path, say: Callable[[str], Any] = print, demo_dir: Path = DEMO_DIR
) -> tuple[ReviewResult, list[dict[str, Any]]]:
    """Run the demo from scratch; returns the W46 review and its failing queries."""
    logs, site = demo_files(demo_dir)
    for suffix in ("", ".wal"):
        Path(str(db) + suffix).unlink(missing_ok=True)
    conn = connect(db)
    for path in logs:
        say(load_log(conn, path, LoadOptions()).reconciliation())
    say(
        load_content(
            conn,
            site,
            ContentOptions(source="site", base_url="https://help.kestrelvalley.example/"),
        ).summary()
    )
    settings = ReviewSettings()
    result = None
    for week in DEMO_WEEKS:
        window = iso_week(week)
        result = run_review(conn, window, settings, out_dir / window.review_id)
    assert result is not None
    rows = failing_queries(conn, result.review_id, result.index_id).to_dict("records")
    conn.close()
    return result, rows
