"""Named SQL statements kept in the project's ``sql/`` folder.

A file holds blocks that each open with ``-- name: <statement_name>``. The comment lines right under
the name line document the statement; among them, ``-- $param: meaning`` declares a parameter. The
statement text follows. DuckDB binds ``$param`` from a dict.

The loader refuses, with ``file:line``: a block without a name, a duplicate name (across all
files), and a ``$param`` used in the statement but not declared (or declared and not used).
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from functools import cache
from pathlib import Path

from querygap.errors import SchemaError

SQL_DIR = Path(__file__).resolve().parent.parent / "sql"

_NAME = re.compile(r"^--\s*name:\s*([a-z_][a-z0-9_]*)\s*$")
_PARAM_DECL = re.compile(r"^--\s*\$([a-z_][a-z0-9_]*)\s*:")
# A $name outside quotes. Statements in sql/ keep string literals free of '$'.
_PARAM_USE = re.compile(r"\$([a-z_][a-z0-9_]*)")


@dataclass(frozen=True)
class Statement:
    """One named statement: its text, documentation, declared parameters and origin."""

    name: str
    sql: str
    doc: str
    params: frozenset[str]
    origin: str  # "file.sql:line"


def parse_sql_text(text: str, source: str) -> dict[str, Statement]:
    """Parse the named statements of one SQL file's text (``source`` names it in errors)."""
    statements: dict[str, Statement] = {}
    blocks: list[tuple[str, int, list[str]]] = []
    current: tuple[str, int, list[str]] | None = None
    for lineno, line in enumerate(text.splitlines(), start=1):
        match = _NAME.match(line.strip())
        if match:
            current = (match.group(1), lineno, [])
            blocks.append(current)
        elif current is None:
            if line.strip() and not line.strip().startswith("--"):
                raise SchemaError(f"{source}:{lineno}: SQL before the first '-- name:' line")
        else:
            current[2].append(line)
    for name, lineno, lines in blocks:
        origin = f"{source}:{lineno}"
        if name in statements:
            raise SchemaError(f"{origin}: statement name '{name}' is used twice in {source}")
        doc_lines: list[str] = []
        declared: set[str] = set()
        body_start = 0
        for i, line in enumerate(lines):
            stripped = line.strip()
            if stripped.startswith("--"):
                decl = _PARAM_DECL.match(stripped)
                if decl:
                    declared.add(decl.group(1))
                doc_lines.append(stripped[2:].strip())
                body_start = i + 1
            elif stripped:
                break
            else:
                body_start = i + 1
        body = "\n".join(lines[body_start:]).strip()
        if not body:
            raise SchemaError(f"{origin}: statement '{name}' has no SQL")
        code = "\n".join(ln.split("--", 1)[0] for ln in body.splitlines())
        used = set(_PARAM_USE.findall(code))
        if used - declared:
            missing = ", ".join(sorted(used - declared))
            raise SchemaError(
                f"{origin}: statement '{name}' uses undeclared parameter(s) {missing}"
            )
        if declared - used:
            extra = ", ".join(sorted(declared - used))
            raise SchemaError(f"{origin}: statement '{name}' declares unused parameter(s) {extra}")
        statements[name] = Statement(name, body, "\n".join(doc_lines), frozenset(declared), origin)
    return statements


def parse_sql_file(path: Path) -> dict[str, Statement]:
    """Read one SQL file and parse its named statements."""
    return parse_sql_text(path.read_text(encoding="utf-8"), path.name)


@cache
def all_statements(sql_dir: Path = SQL_DIR) -> dict[str, Statement]:
    """Every named statement of the stage files in ``sql_dir`` (not the schema folder)."""
    if not sql_dir.is_dir():
        raise SchemaError(
            f"SQL folder {sql_dir} is missing: reinstall querygap with 'pip install -e .'"
        )
    found: dict[str, Statement] = {}
    for path in sorted(sql_dir.glob("*.sql")):
        for name, stmt in parse_sql_file(path).items():
            if name in found:
                raise SchemaError(
                    f"{stmt.origin}: statement name '{name}' is already defined at "
                    f"{found[name].origin}"
                )
            found[name] = stmt
    return found


def statement(name: str) -> Statement:
    """The statement called ``name``; an unknown name is a programming error."""
    stmts = all_statements()
    if name not in stmts:
        raise SchemaError(f"no SQL statement named '{name}' in {SQL_DIR}")
    return stmts[name]
