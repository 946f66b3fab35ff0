"""indexing.csr_of_sorted and load_index against scipy's own COO -> CSR conversion (the
reference)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import scipy.sparse as sp

from querygap.indexing import IndexSettings, build_index, csr_of_sorted, load_index
from querygap.pageload import ContentOptions, load_content


def _reference(rows: np.ndarray, cols: np.ndarray, vals: np.ndarray, shape: tuple[int, int]):
    # Reference: scipy.sparse.coo_matrix(...).tocsr(), which sorts and sums repeated entries.
    return sp.coo_matrix((vals, (rows, cols)), shape=shape).tocsr()


@pytest.mark.parametrize("order", ["csr", "shuffled", "repeats", "empty"])
def test_csr_of_triples_equals_scipy(order: str) -> None:
    rng = np.random.default_rng(11)
    dense = rng.random((40, 30)) * (rng.random((40, 30)) < 0.2)
    rows, cols = np.nonzero(dense)  # CSR order
    vals = dense[rows, cols]
    if order == "shuffled":
        p = rng.permutation(rows.size)
        rows, cols, vals = rows[p], cols[p], vals[p]
    elif order == "repeats":
        rows, cols, vals = np.r_[rows, rows[:5]], np.r_[cols, cols[:5]], np.r_[vals, vals[:5]]
        p = np.argsort(rows * 30 + cols, kind="stable")
        rows, cols, vals = rows[p], cols[p], vals[p]  # sorted, but with equal neighbours
    elif order == "empty":
        rows, cols, vals = rows[:0], cols[:0], vals[:0]
    got = csr_of_sorted(rows.astype(np.int64), cols.astype(np.int64), vals, (40, 30))
    want = _reference(rows, cols, vals, (40, 30))
    assert got.shape == want.shape and got.has_sorted_indices
    np.testing.assert_array_equal(got.indptr, want.indptr)
    np.testing.assert_array_equal(got.indices, want.indices)
    np.testing.assert_array_equal(got.data, want.data)


def test_a_row_outside_the_shape_is_refused_as_scipy_refuses_it() -> None:
    with pytest.raises(ValueError):
        csr_of_sorted(np.array([0, 5]), np.array([0, 1]), np.ones(2), (3, 3))


def test_the_index_loads_the_same_whatever_order_its_rows_are_stored_in(conn, tmp_path) -> None:
    """index_vectors reads doc_terms in stored order (no ORDER BY); rows stored out of CSR order
    still give the matrix scipy builds from the same triples."""
    pages = tmp_path / "pages.csv"
    pages.write_text(
        "id,title,body\n"
        "a,Water meters,Read your water meter and report the reading\n"
        "b,Bills,Pay your bill online or by direct debit\n"
        "c,Leaks,Report a leak in the street or a burst pipe\n"
        "d,Moving home,Tell us when you move so the meter is read\n",
        encoding="utf-8",
    )
    load_content(conn, pages, ContentOptions(source="site"))
    build_index(conn, IndexSettings())
    conn.execute(
        "CREATE TEMP TABLE shuffled AS SELECT * FROM doc_terms ORDER BY hash(doc_row, term_id)"
    )
    conn.execute("DELETE FROM doc_terms")
    conn.execute("INSERT INTO doc_terms SELECT * FROM shuffled")
    stored = conn.execute("SELECT doc_row, term_id, weight FROM doc_terms").fetchnumpy()
    rows, cols = stored["doc_row"].astype(np.int64), stored["term_id"].astype(np.int64)
    assert not (np.diff(rows * 10_000 + cols) > 0).all()  # the stored order is not CSR order
    got = load_index(conn).vectors
    want = _reference(rows, cols, stored["weight"], got.shape)
    assert got.has_sorted_indices
    np.testing.assert_array_equal(got.indptr, want.indptr)
    np.testing.assert_array_equal(got.indices, want.indices)
    np.testing.assert_array_equal(got.data, want.data)


@pytest.mark.parametrize("as_arrow", [False, True])
def test_pages_analyzed_in_parts_count_as_analyzed_at_once(monkeypatch, as_arrow: bool) -> None:
    # Reference: scikit-learn's CountVectorizer with our analyzer, on the whole texts at once.
    import pyarrow as pa
    from sklearn.feature_extraction.text import CountVectorizer

    import querygap.indexing as indexing
    from querygap.analyzer import analyze

    rng = np.random.default_rng(4)
    words = ["Water", "meter", "bill", "leak", "sewer", "Café", "wi-fi", "c++", "v2.1", "the"]
    pages = pd.DataFrame(
        {
            "doc_id": [f"d{i}" for i in range(40)],
            "title": [" ".join(rng.choice(words, 2)) for _ in range(40)],
            "headings": [" ".join(rng.choice(words, 3)) for _ in range(40)],
            "body": [" ".join(rng.choice(words, rng.integers(0, 12))) for _ in range(40)],
        }
    )
    data = pa.Table.from_pandas(pages) if as_arrow else pages
    settings = IndexSettings(title_weight=0.3, heading_weight=0.7)
    whole, vocab = indexing.field_counts(data, settings)
    monkeypatch.setattr(indexing, "PART_TEXTS", 3)
    monkeypatch.setattr(indexing.os, "cpu_count", lambda: 4)
    parts, vocab_parts = indexing.field_counts(data, settings)
    assert list(vocab_parts) == list(vocab)
    assert (parts != whole).nnz == 0  # the same weighted counts, bit for bit
    counter = CountVectorizer(analyzer=analyze, vocabulary=list(vocab))
    want = (
        counter.transform(pages["body"])
        + 0.3 * counter.transform(pages["title"])
        + 0.7 * counter.transform(pages["headings"])
    )
    np.testing.assert_allclose(parts.toarray(), want.toarray(), rtol=1e-12)
