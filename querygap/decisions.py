"""The owner's decisions on proposals (table ``decisions``): accept, reject or park a rule.

A decision is keyed by (kind, term, replacement) and replaces an earlier one on the same rule.
Rejected rules are not proposed again; accepted ones are listed at later reviews until checked.
Decisions come one at a time or from an edited rules.csv (its ``status`` column; rows still
``proposed`` are left alone).
"""

from __future__ import annotations

import csv
import io
from dataclasses import dataclass
from pathlib import Path

import duckdb

from querygap.errors import ConfigError, InputError
from querygap.proposal_files import RULES_COLUMNS
from querygap.workspace import run, transaction

DECISIONS = ("accepted", "rejected", "parked")
DECISION_KINDS = ("spelling", "synonym", "variant", "content_gap")
DIRECTIONS = ("one-way", "both-ways")


@dataclass(frozen=True)
class Decision:
    kind: str
    term: str
    replacement: str
    decision: str
    direction: str = "one-way"
    note: str = ""


def check_decision(d: Decision, where: str = "") -> Decision:
    """Raise ConfigError (or InputError when ``where`` names a file line) on a bad value."""
    err = InputError if where else ConfigError
    prefix = f"{where}: " if where else ""
    for field, value, allowed in (
        ("kind", d.kind, DECISION_KINDS),
        ("status" if where else "decision", d.decision, DECISIONS),
        ("direction", d.direction, DIRECTIONS),
    ):
        if value not in allowed:
            raise err(f"{prefix}field {field} must be one of {', '.join(allowed)}; got {value!r}")
    if not d.term.strip():
        raise err(f"{prefix}field term is empty")
    if d.kind != "content_gap" and not d.replacement.strip():
        raise err(f"{prefix}field replacement is empty (only content gaps have none)")
    return d


def parse_rules(text: str, source: str) -> list[Decision]:
    """The decided rows of a rules.csv text (``proposed`` rows are skipped)."""
    reader = csv.DictReader(io.StringIO(text.lstrip("\ufeff")))
    missing = [c for c in RULES_COLUMNS if c not in (reader.fieldnames or [])]
    if missing:
        raise InputError(f"{source}:1: rules file lacks column(s) {', '.join(missing)}")
    found = []
    for row in reader:
        status = (row["status"] or "").strip()
        if status == "proposed":
            continue
        found.append(
            check_decision(
                Decision(
                    (row["kind"] or "").strip(),
                    (row["term"] or "").strip(),
                    (row["replacement"] or "").strip(),
                    status,
                    (row["direction"] or "").strip(),
                    (row["note"] or "").strip(),
                ),
                f"{source}:{reader.line_num}",
            )
        )
    return found


def read_rules(path: Path) -> list[Decision]:
    try:
        text = path.read_text(encoding="utf-8")
    except OSError as exc:
        raise InputError(f"{path}: cannot read the rules file ({exc.strerror})") from None
    return parse_rules(text, str(path))


def store_decisions(conn: duckdb.DuckDBPyConnection, decisions: list[Decision]) -> int:
    """Store decisions (each replacing an earlier one on its rule); returns how many."""
    with transaction(conn):
        for d in decisions:  # one row per rule the owner decided on: a handful, not a hot path
            found = run(
                conn,
                "decide_find_proposal",
                {"kind": d.kind, "term": d.term, "suggestion": d.replacement},
            ).fetchall()
            run(
                conn,
                "decide_upsert",
                {
                    "kind": d.kind,
                    "term": d.term,
                    "replacement": d.replacement,
                    "direction": d.direction,
                    "decision": d.decision,
                    "review_id": found[0][0] if found else None,
                    "note": d.note,
                },
            )
    return len(decisions)
