"""Build the demo's W46 report with hostile queries added to its log (shared by report tests)."""

from __future__ import annotations

from pathlib import Path

from querygap.demo import run_demo
from querygap.logload import LoadOptions, load_log
from querygap.review import run_review
from querygap.settings import ReviewSettings
from querygap.windows import iso_week
from querygap.workspace import connect

# Text a visitor could type that would run in a page that did not escape it.
HOSTILE = [
    "<script>alert(1)</script>",
    "<img src=x onerror=alert(1)>",
    '"></table><b id="injected">bold</b>',
]


def build(tmp: Path) -> tuple[Path, Path]:
    """Run the demo, add three searches of each hostile query to W46, review W46 again.

    Returns the workspace file and the W46 report folder.
    """
    db, out = tmp / "demo.duckdb", tmp / "reports"
    run_demo(db, out, say=lambda _m: None)
    log = tmp / "hostile.csv"
    rows = ["timestamp,visitor_id,query,results,clicks"]
    for i, text in enumerate(HOSTILE):
        quoted = '"' + text.replace('"', '""') + '"'
        rows += [f"2026-11-1{i}T10:0{k}:00+00:00,hv{i}{k},{quoted},0,0" for k in range(3)]
    log.write_text("\n".join(rows) + "\n", encoding="utf-8")
    conn = connect(db)
    load_log(conn, log, LoadOptions())
    window = iso_week("2026-W46")
    run_review(conn, window, ReviewSettings(), out / window.review_id)
    conn.close()
    return db, out / window.review_id
