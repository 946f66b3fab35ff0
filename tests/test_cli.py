"""The command line: exit codes, one-line errors, every command documented in the README."""

from __future__ import annotations

import json
from pathlib import Path

from typer.testing import CliRunner

from querygap.cli import app

runner = CliRunner()
README = (Path(__file__).resolve().parent.parent / "README.md").read_text(encoding="utf-8")


def test_every_command_has_help_and_is_in_the_readme() -> None:
    for command in app.registered_commands:
        name = command.name or command.callback.__name__
        assert command.callback.__doc__, f"{name} has no help text"
        assert f"querygap {name}" in README, f"README does not mention 'querygap {name}'"


def test_missing_file_is_one_line_error(tmp_path: Path) -> None:
    result = runner.invoke(
        app, ["add-log", str(tmp_path / "nope.csv"), "--db", str(tmp_path / "w.duckdb")]
    )
    assert result.exit_code == 1
    assert result.output.strip() == f"Error: {tmp_path / 'nope.csv'}: no such file"


def test_bad_week_is_one_line_error(tmp_path: Path) -> None:
    result = runner.invoke(app, ["review", "--week", "2026-46", "--db", str(tmp_path / "w.duckdb")])
    assert result.exit_code == 1
    assert (
        result.output.strip()
        == "Error: --week: '2026-46' is not an ISO week; write it like 2026-W46"
    )


def test_review_before_loading_anything(tmp_path: Path) -> None:
    result = runner.invoke(app, ["review", "--db", str(tmp_path / "w.duckdb")])
    assert result.exit_code == 1
    assert result.output.strip() == "Error: no searches are loaded; run 'querygap add-log' first"


def test_bad_threshold_names_the_option(tmp_path: Path) -> None:
    log = tmp_path / "log.csv"
    log.write_text("timestamp,query\n2026-11-02T08:00:00Z,leak\n", encoding="utf-8")
    db = str(tmp_path / "w.duckdb")
    assert runner.invoke(app, ["add-log", str(log), "--db", db]).exit_code == 0
    result = runner.invoke(app, ["review", "--db", db, "--min-coverage", "1.5"])
    assert result.exit_code == 1
    assert (
        result.output.strip() == "Error: --min-coverage must be a number from 0.0 to 1.0; got 1.5"
    )


def test_load_and_review_json(tmp_path: Path) -> None:
    log = tmp_path / "log.csv"
    log.write_text(
        "timestamp,query\n2026-11-02T08:00:00Z,leak report\n2026-11-02T08:01:00Z,solar panels\n",
        encoding="utf-8",
    )
    site = tmp_path / "site"
    site.mkdir()
    (site / "leak.md").write_text(
        "# Report a leak\n\nTell us about a leak on your pipe.\n", encoding="utf-8"
    )
    (site / "bill.md").write_text("# Pay a bill\n\nPay your bill online.\n", encoding="utf-8")
    db = str(tmp_path / "w.duckdb")
    loaded = runner.invoke(app, ["add-log", str(log), "--db", db, "--json"])
    assert loaded.exit_code == 0, loaded.output
    assert json.loads(loaded.output)[0]["loaded"] == 2
    assert runner.invoke(app, ["add-pages", str(site), "--db", db]).exit_code == 0
    out = tmp_path / "reports"
    reviewed = runner.invoke(app, ["review", "--db", db, "--json", "--out", str(out)])
    assert reviewed.exit_code == 0, reviewed.output
    payload = json.loads(reviewed.output)
    assert payload["review_id"] == "2026-W45"
    assert payload["totals"]["zero"]["queries"] == 1  # "solar panels": no page has either word
    assert payload["totals"]["ok"]["queries"] == 1
    assert (out / "2026-W45" / "failing_queries.csv").exists()


def test_checks_and_files_tables_render_log_text_literally() -> None:
    from rich.console import Console

    from querygap import console as out

    row = {
        "kind": "synonym",
        "term": "[b]sewer",
        "replacement": "wastewater",
        "before_searches": 79,
        "after_searches": 90,
        "failure_before": 1.0,
        "failure_after": 0.0,
        "p_value": 1e-18,
        "verdict": "fixed",
    }
    rec = Console(width=200, record=True)
    rec.print(out.checks_table([row]))
    rec.print(out.files_table({"report (open this)": "reports/2026-W46/index.html", "none": None}))
    text = rec.export_text()
    assert "[b]sewer" in text and "100.0%" in text and "0.0%" in text and "fixed" in text
    assert "reports/2026-W46/index.html" in text and "none" not in text
