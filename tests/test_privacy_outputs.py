"""Personal data from a log reaches no table and no output file; outputs are safe to open."""

from __future__ import annotations

import csv
import os
from pathlib import Path

import duckdb
import pytest
from typer.testing import CliRunner

from querygap.cli import app
from querygap.safe_csv import FORMULA_TRIGGERS

# Reserved example values: example.org (RFC 2606), 192.0.2.0/24 (RFC 5737), 2001:db8::/32
# (RFC 3849), +44 20 7946 0xxx (Ofcom drama numbers); card numbers are the well-known Luhn-valid
# test numbers (REFERENCES.md, "Check values").
PII = {
    "email": "jane.doe@example.org",
    "phone_intl": "+44 20 7946 0958",
    "phone_local": "020 7946 0123",
    "card_spaced": "4111 1111 1111 1111",
    "card_plain": "378282246310005",
    "ipv4": "192.0.2.44",
    "ipv6": "2001:db8:85a3::8a2e:370:7334",
    "custom": "KV-ACC-884213",
}
VISITORS = ["visitor-q7x2m9", "visitor-z3k8p1"]
ATTACKS = ['=HYPERLINK("http://evil.example","x")', "+cmd|' /C calc'!A0", "@SUM(1+1)", "-2+3"]

SITE = {
    "bills.html": "<title>Bills</title><main><p>Pay your water bill online or by post.</p></main>",
    "leaks.html": "<title>Leaks</title><main><p>Report a leak in the street or at home.</p></main>",
    "meters.html": "<title>Meters</title><main><p>Read your water meter each quarter.</p></main>",
}


def write_log(path: Path) -> Path:
    lines = ["timestamp,visitor_id,query,results,clicks"]
    texts = [f"bill for {PII['email']}", f"call {PII['phone_intl']}", f"{PII['phone_local']}"]
    texts += [f"card {PII['card_spaced']}", f"pay {PII['card_plain']}", f"from {PII['ipv4']}"]
    texts += [f"router {PII['ipv6']}", f"account {PII['custom']}", "pay bill", "leak"]
    texts += ATTACKS
    for i, text in enumerate(texts):
        quoted = '"' + text.replace('"', '""') + '"'
        lines.append(f"2026-11-03T08:{i:02d}:00Z,{VISITORS[i % 2]},{quoted},{i % 3},0")
    # Rejected rows carry personal data too.
    lines.append(f"yesterday,{VISITORS[0]},mail {PII['email']},1,0")
    lines.append(f"2026-11-03T09:00:00Z,{VISITORS[1]},{PII['ipv4']},1,0,extra-field")
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return path


@pytest.fixture
def reviewed(tmp_path: Path) -> tuple[Path, Path, str]:
    """A workspace after add-log, add-pages and review through the CLI; its reports folder."""
    site = tmp_path / "site"
    site.mkdir()
    for name, html in SITE.items():
        (site / name).write_text(html, encoding="utf-8")
    db, reports = tmp_path / "ws.duckdb", tmp_path / "reports"
    log = write_log(tmp_path / "log.csv")
    runner = CliRunner()
    outputs = []
    for args in (
        ["add-log", str(log), "--redact-pattern", r"account=KV-ACC-\d+"],
        ["add-pages", str(site)],
        ["review", "--out", str(reports)],
    ):
        result = runner.invoke(app, [*args, "--db", str(db)])
        assert result.exit_code == 0, result.output
        outputs.append(result.output)
    return db, reports, "\n".join(outputs)


def exported_texts(db: Path, folder: Path) -> dict[str, str]:
    conn = duckdb.connect(str(db), read_only=True)
    conn.execute(f"EXPORT DATABASE '{folder}' (FORMAT csv)")
    conn.close()
    return {str(p): p.read_text(encoding="utf-8", errors="replace") for p in folder.iterdir()}


def test_no_personal_item_or_raw_visitor_id_in_any_table_or_output(reviewed, tmp_path) -> None:
    db, reports, terminal = reviewed
    files = exported_texts(db, tmp_path / "export")
    files |= {str(p): p.read_text(encoding="utf-8") for p in reports.rglob("*") if p.is_file()}
    files["terminal"] = terminal
    assert any("searches" in name for name in files) and any("failing" in n for n in files)
    assert "[email]" in files[str(tmp_path / "export" / "searches.csv")]  # the rows are there
    digits_only = {k: "".join(c for c in v if c.isdigit()) for k, v in PII.items()}
    for name, text in files.items():
        squeezed = "".join(c for c in text if c.isdigit())
        for kind, item in PII.items():
            assert item not in text, (kind, name)
            if kind.startswith(("card", "phone")):
                assert digits_only[kind] not in squeezed.replace(" ", ""), (kind, name)
        for visitor in VISITORS:
            assert visitor not in text, (visitor, name)


def test_redaction_counts_are_recorded(reviewed) -> None:
    db, _, terminal = reviewed
    conn = duckdb.connect(str(db), read_only=True)
    kinds = dict(conn.execute("SELECT kind, items FROM redactions").fetchall())
    conn.close()
    assert kinds == {"email": 1, "phone": 2, "card": 2, "ipv4": 1, "ipv6": 1, "account": 1}


def test_failing_queries_csv_neutralises_formula_attacks(reviewed) -> None:
    _, reports, _ = reviewed
    (path,) = reports.rglob("failing_queries.csv")
    with path.open(newline="", encoding="utf-8") as fh:
        table = list(csv.reader(fh))
    cells = [cell for row in table for cell in row]
    # Numbers are written as numbers; every text cell that a spreadsheet would run is quoted.
    numeric = {c for c in cells if c.lstrip("-").replace(".", "", 1).isdigit()}
    assert not [c for c in cells if c.startswith(FORMULA_TRIGGERS) and c not in numeric]
    examples = {row[table[0].index("example")] for row in table[1:]}
    for attack in ATTACKS:
        assert "'" + attack in examples, attack


def test_review_to_an_unwritable_folder_is_one_clear_error(reviewed, tmp_path) -> None:
    db, _, _ = reviewed
    blocker = tmp_path / "a-file"
    blocker.write_text("not a folder")
    result = CliRunner().invoke(app, ["review", "--db", str(db), "--out", str(blocker)])
    assert result.exit_code == 1
    assert result.output.startswith(f"Error: {blocker}/2026-W45: cannot write the review's files")
    assert "Traceback" not in result.output


@pytest.mark.skipif(os.geteuid() == 0, reason="root ignores file modes")
def test_review_to_a_read_only_folder_is_one_clear_error(reviewed, tmp_path) -> None:
    db, _, _ = reviewed
    locked = tmp_path / "locked"
    locked.mkdir()
    locked.chmod(0o555)
    result = CliRunner().invoke(app, ["review", "--db", str(db), "--out", str(locked)])
    assert result.exit_code == 1 and "Permission denied" in result.output


def test_a_workspace_in_a_place_that_cannot_hold_one_is_one_clear_error(tmp_path) -> None:
    blocker = tmp_path / "a-file"
    blocker.write_text("x")
    log = write_log(tmp_path / "log.csv")
    result = CliRunner().invoke(app, ["add-log", str(log), "--db", str(blocker / "ws.duckdb")])
    assert result.exit_code == 1
    assert result.output.startswith(f"Error: cannot create workspace {blocker / 'ws.duckdb'}")
    not_a_workspace = tmp_path / "junk.duckdb"
    not_a_workspace.write_bytes(b"this is not a database" * 100)
    result = CliRunner().invoke(app, ["add-log", str(log), "--db", str(not_a_workspace)])
    assert result.exit_code == 1 and result.output.startswith("Error: ")
    assert "Traceback" not in result.output


@pytest.mark.skipif(os.geteuid() == 0, reason="root ignores file modes")
def test_a_read_only_workspace_folder_is_one_clear_error(tmp_path) -> None:
    locked = tmp_path / "locked"
    locked.mkdir()
    locked.chmod(0o555)
    log = write_log(tmp_path / "log.csv")
    result = CliRunner().invoke(app, ["add-log", str(log), "--db", str(locked / "ws.duckdb")])
    assert result.exit_code == 1 and result.output.startswith("Error: cannot open workspace")
