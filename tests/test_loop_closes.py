"""The loop closes: an accepted decision is checked automatically at the next review."""

from __future__ import annotations

from pathlib import Path

from querygap.demo import run_demo
from querygap.review import run_review
from querygap.settings import ReviewSettings
from querygap.windows import iso_week
from querygap.workspace import connect


def test_accepted_decision_is_checked_at_the_next_review(tmp_path: Path) -> None:
    # Invented demo data: "sewer" -> "wastewater" is deployed in the demo engine from 2026-11-16.
    run_demo(tmp_path / "ws.duckdb", tmp_path / "r", say=lambda _m: None)
    conn = connect(tmp_path / "ws.duckdb")
    conn.execute(
        "INSERT INTO decisions VALUES ('synonym', 'sewer', 'wastewater', 'one-way', 'accepted',"
        " '2026-W46', TIMESTAMPTZ '2026-11-16 00:00:00+00', '')"
    )
    result = run_review(conn, iso_week("2026-W47"), ReviewSettings(), tmp_path / "r" / "w47")
    stored = conn.execute(
        "SELECT term FROM decision_checks WHERE review_id = '2026-W47'"
    ).fetchall()
    conn.close()
    assert [c["term"] for c in result.checks] == ["sewer"]
    assert stored == [("sewer",)]
