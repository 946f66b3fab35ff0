"""Shared fixtures: an in-memory workspace built from sql/, small input files, a wide console."""

from __future__ import annotations

from collections.abc import Iterator
from pathlib import Path

import duckdb
import pytest

from querygap.workspace import connect

DATA = Path(__file__).parent / "data"
REPO = Path(__file__).resolve().parent.parent


@pytest.fixture
def conn() -> Iterator[duckdb.DuckDBPyConnection]:
    """A fresh in-memory workspace; closed after the test."""
    c = connect(None)
    yield c
    c.close()


@pytest.fixture
def db_path(tmp_path: Path) -> Path:
    return tmp_path / "ws.duckdb"


@pytest.fixture(autouse=True)
def _wide_terminal(monkeypatch: pytest.MonkeyPatch) -> None:
    """Rich tables must not wrap unpredictably in CLI tests."""
    monkeypatch.setenv("COLUMNS", "200")
    monkeypatch.setenv("NO_COLOR", "1")


def write(path: Path, text: str, encoding: str = "utf-8") -> Path:
    path.write_text(text, encoding=encoding)
    return path


# Hypothesis: no per-example deadline. The suite shares 2 cores with other work, and a deadline
# there only measures the machine's load, not the code.
from hypothesis import settings as _hypothesis_settings  # noqa: E402

_hypothesis_settings.register_profile("querygap", deadline=None)
_hypothesis_settings.load_profile("querygap")

# The benchmarks are run by hand (python tests/benchmarks/run.py), never by the default suite.
collect_ignore = ["benchmarks"]
