"""failing_queries.csv written by DuckDB (review_failing_csv) equals the pandas writer's file.

The reference is the file ``safe_csv.write_csv`` makes from ``review.failing_queries``: Python's
csv module (QUOTE_MINIMAL, CR LF) over pandas' rounding (numpy's round: scale, round half to
even, scale back) and numpy's shortest float text. Cells are hostile on purpose: formula
triggers (OWASP CSV injection), commas, quotes, line breaks, non-ASCII text, rounding ties.
"""

from __future__ import annotations

from pathlib import Path

import duckdb
import numpy as np
import pyarrow as pa
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from querygap.review import export_failing, failing_queries
from querygap.safe_csv import write_csv
from querygap.workspace import connect, run

CELLS = ["=1+1", "+x", "-y", "@z", "\tq", "\rq", "a,b", 'say "hi"', "line\nbreak", "x\r\ny",
         "é ü", "'quoted", "", " lead", "plain", "c++ & c#"]  # fmt: skip


def fill(conn: duckdb.DuckDBPyConnection, rows: list[dict[str, object]]) -> None:
    """One review 'r' of index 'ix' with the given failing (or ok) queries, terms and pages."""
    for i, row in enumerate(rows):
        query = f"{row['query']}#{i}"  # unique per review
        conn.execute(
            "INSERT INTO review_queries VALUES ('r', ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)",
            [query, row["example"], row["searches"], row["visitors"], row["status"],
             row["best_score"], row["coverage"], row["best_doc"], row["engine_searches"],
             row["engine_empty"], row["click_searches"], row["clicked"]],
        )  # fmt: skip
        for pos, (term, df, in_best) in enumerate(row["terms"]):  # type: ignore[arg-type]
            conn.execute(
                "INSERT INTO query_terms VALUES ('ix', ?, ?, ?, ?, ?)",
                [query, 5 - pos, term, df, in_best],  # positions stored out of order
            )
        if row["best_doc"] is not None and row["page"] is not None:
            url, title = row["page"]  # type: ignore[misc]
            conn.execute(
                "INSERT INTO documents VALUES (?, 's', ?, ?, '', '', 'h', 'present', now(), now()) "
                "ON CONFLICT DO NOTHING",
                [row["best_doc"], url, title],
            )


def compare(conn: duckdb.DuckDBPyConnection, folder: Path) -> None:
    made = export_failing(conn, "r", "ix", folder / "duckdb")
    folder.joinpath("pandas").mkdir(parents=True, exist_ok=True)
    ref = write_csv(failing_queries(conn, "r", "ix"), folder / "pandas" / "failing_queries.csv")
    assert made.read_bytes() == ref.read_bytes()


def row(text: str, i: int, score: float, share: tuple[int, int], status: str) -> dict[str, object]:
    return {
        "query": text, "example": text + " typed", "searches": 10 - i % 4, "visitors": i,
        "status": status, "best_score": score, "coverage": 1 - score,
        "best_doc": None if i % 5 == 0 else f"doc{i % 3}", "engine_searches": share[1],
        "engine_empty": share[0], "click_searches": share[1] * (i % 2), "clicked": share[0] // 2,
        "terms": [(text, 0, False), ("word", 3, True), (text + "2", 1, False)],
        "page": None if i % 7 == 0 else (f"https://x.example/{text}", text if i % 2 else ""),
    }  # fmt: skip


def test_hostile_cells_and_rounding_ties_give_the_same_bytes(
    conn: duckdb.DuckDBPyConnection, tmp_path: Path
) -> None:
    # 0.00005 and 0.12345 sit on rounding ties at 4 places after scaling; 1/16 = 0.0625 and
    # 5/8 at 3 places (numpy rounds them to even; round-half-up would differ).
    scores = [0.00005, 0.12345, 1.0, 0.0, 0.5, 1 / 3, 0.99995, 2.5e-4]
    shares = [(1, 16), (5, 8), (0, 5), (2, 3), (0, 0), (7, 7), (1, 8), (3, 16)]
    rows = [
        row(text, i, scores[i % len(scores)], shares[i % len(shares)], ("zero", "low", "ok")[i % 3])
        for i, text in enumerate(CELLS * 2)
    ]
    fill(conn, rows)
    compare(conn, tmp_path)
    text = (tmp_path / "duckdb" / "failing_queries.csv").read_text(encoding="utf-8")
    assert "'=1+1" in text and '"say ""hi""' in text  # neutralised and quoted, as write_csv does


def test_no_failing_query_gives_the_header_only(
    conn: duckdb.DuckDBPyConnection, tmp_path: Path
) -> None:
    compare(conn, tmp_path)
    assert (tmp_path / "duckdb" / "failing_queries.csv").read_bytes().count(b"\r\n") == 1


_TEXT = st.text(st.sampled_from(list("ab,\"'\r\n\t=+-@ é#")), max_size=8)


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(
    st.lists(
        st.tuples(_TEXT, st.floats(0, 1), st.integers(0, 20), st.integers(0, 20)),
        min_size=1,
        max_size=12,
    )
)
def test_any_cells_give_the_same_bytes(
    tmp_path_factory: pytest.TempPathFactory, cells: list[tuple[str, float, int, int]]
) -> None:
    conn = connect(None)
    rows = [
        row(text, i, score, (min(a, b), max(a, b)), ("zero", "low")[i % 2])
        for i, (text, score, a, b) in enumerate(cells)
    ]
    fill(conn, rows)
    compare(conn, tmp_path_factory.mktemp("any"))
    conn.close()


def test_csv_round_is_numpy_round_and_its_text(conn: duckdb.DuckDBPyConnection) -> None:
    # numpy (reference library): np.round(x, d) and the shortest text of the result, on every
    # multiple of 1e-4 in [0, 1], the halves between them and random values.
    rng = np.random.default_rng(7)
    grid = np.arange(20_001) / 20_000
    values = np.concatenate([grid, (np.arange(2_001) + 0.5) / 2_000, rng.random(20_000)])
    conn.register("vals", pa.table({"x": values}))
    run(conn, "csv_macros")
    for places in (3, 4):
        got = conn.execute(
            f"SELECT csv_number(csv_round(x, {places})) AS s FROM vals"
        ).fetchnumpy()["s"]
        assert list(got) == [str(v) for v in np.round(values, places)]
