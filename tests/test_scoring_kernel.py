"""The compiled top-k kernel against the numpy path and against scikit-learn's cosine."""

from __future__ import annotations

import dataclasses

import numpy as np
import pandas as pd
import pytest
import scipy.sparse as sp
from index_helpers import index_of_pages
from sklearn.metrics.pairwise import cosine_similarity
from sklearn.preprocessing import normalize

from querygap import scoring_kernel
from querygap.indexing import Index
from querygap.scoring import measure_terms, query_terms, score_queries
from querygap.scoring_kernel import top_k_scores

needs_numba = pytest.mark.skipif(not scoring_kernel.HAVE_NUMBA, reason="numba is not installed")


def random_problem(seed: int, n_q: int = 300, n_t: int = 200, n_d: int = 400):
    """Unit query rows and page rows with random non-negative weights (no ties: continuous)."""
    q = sp.random(n_q, n_t, density=0.02, format="csr", random_state=seed)
    d = sp.random(n_d, n_t, density=0.05, format="csr", random_state=seed + 1)
    return normalize(q), normalize(d)


@pytest.mark.parametrize("path", [pytest.param(True, marks=needs_numba), False])
@pytest.mark.parametrize("seed", [0, 1, 2])
def test_top_pages_match_sklearn_cosine(seed: int, path: bool) -> None:
    q, d = random_problem(seed)
    rows, docs, vals = top_k_scores(q, d.T.tocsr(), 5, use_compiled=path)
    # Reference: scikit-learn's cosine_similarity, dense, sorted per row (a general library).
    dense = cosine_similarity(q, d)
    for row in range(q.shape[0]):
        want = [c for c in np.argsort(-dense[row], kind="stable")[:5] if dense[row, c] > 0]
        got = docs[rows == row]
        assert list(got) == want
        np.testing.assert_allclose(vals[rows == row], dense[row, want], rtol=0, atol=1e-12)
    assert np.all(np.diff(rows) >= 0)


@needs_numba
@pytest.mark.parametrize("k", [1, 3, 5, 50])
def test_compiled_equals_numpy_path_bit_for_bit(k: int) -> None:
    q, d = random_problem(7, n_q=500)
    postings = d.T.tocsr()
    a = top_k_scores(q, postings, k, use_compiled=True)
    b = top_k_scores(q, postings, k, use_compiled=False)
    for x, y in zip(a, b, strict=True):
        np.testing.assert_array_equal(x, y)


@needs_numba
def test_ties_go_to_the_lower_page_and_zero_scores_are_dropped() -> None:
    # Pages 0, 2, 3 are identical; page 1 shares nothing with the query.
    pages = normalize(sp.csr_matrix(np.array([[1.0, 1, 0], [0, 0, 1], [1, 1, 0], [1, 1, 0]])))
    query = normalize(sp.csr_matrix(np.array([[1.0, 0, 0], [0, 0, 0]])))
    for compiled in (True, False):
        rows, docs, vals = top_k_scores(query, pages.T.tocsr(), 2, use_compiled=compiled)
        assert list(rows) == [0, 0]
        assert list(docs) == [0, 2]
        np.testing.assert_allclose(vals, [np.sqrt(0.5)] * 2)


def small_index() -> Index:
    pages = pd.DataFrame(
        {
            "doc_id": ["a", "b", "c", "d"],
            "title": ["water meter", "bill payment", "leak report", "meter reading"],
            "headings": ["", "pay online", "", "read your meter"],
            "body": [
                "replace a broken water meter",
                "pay your water bill online or by phone",
                "report a leak in the street",
                "how to read the meter and send the reading",
            ],
        }
    )
    return index_of_pages(pages)


def test_score_queries_gives_the_same_tables_on_both_paths() -> None:
    index = small_index()
    queries = pd.Series(["water meter", "pay bill", "leak", "sofa", "meter reading online", ""])
    fast = score_queries(queries, index)
    slow = score_queries(queries, index, chunk=2)
    pd.testing.assert_frame_equal(fast.scores, slow.scores)
    pd.testing.assert_frame_equal(fast.top_pages, slow.top_pages)
    pd.testing.assert_frame_equal(fast.terms, slow.terms)
    best = fast.scores.set_index("query")
    assert best.loc["leak", "best_doc"] == "c"
    assert best.loc["sofa", "best_score"] == 0
    assert pd.isna(best.loc["sofa", "best_doc"])


def test_terms_on_the_best_page_match_the_page_vectors() -> None:
    # Reference: the index's own page-by-term matrix (scipy), entry by entry: a query term is
    # "in_best" exactly when its best page has a weight for it. Queries in shuffled order, so
    # the (page, term) look-ups do not come sorted.
    index = small_index()
    words = ["water", "meter", "bill", "pay", "leak", "street", "reading", "sofa", "online"]
    rng = np.random.default_rng(31)
    texts = [" ".join(rng.choice(words, size=rng.integers(1, 5))) for _ in range(300)]
    queries = pd.Series(texts).drop_duplicates().sample(frac=1, random_state=3)
    measured = measure_terms(query_terms(queries.reset_index(drop=True), index), index)
    qt = query_terms(queries.reset_index(drop=True), index)
    rows = qt.long["row"].to_numpy()
    term_ids = qt.long["term_id"].to_numpy()
    best = measured.best_doc_row[rows]
    dense = index.vectors.toarray()
    want = (term_ids >= 0) & (best >= 0) & (dense[np.maximum(best, 0), np.maximum(term_ids, 0)] > 0)
    np.testing.assert_array_equal(measured.in_best, want)
    assert want.any() and not want.all()


def test_the_compiled_path_is_installed() -> None:
    # numba is a dependency: the numpy fallback is exact but far too slow for large logs.
    assert scoring_kernel.HAVE_NUMBA


def zipf_problem(seed: int, n_q: int = 400, n_t: int = 300, n_d: int = 600):
    """Pages whose term frequencies fall off like Zipf's law, queries of 1-5 such terms.

    Common terms sit on most pages with small weights, rare ones on few with large weights:
    the shape where reading by weight stops early in the common terms' postings.
    """
    rng = np.random.default_rng(seed)
    p_term = 1 / np.arange(1, n_t + 1)
    p_term /= p_term.sum()
    d = sp.random(n_d, n_t, density=0.0, format="lil")
    for row in range(n_d):
        terms = rng.choice(n_t, size=40, p=p_term)
        for t in terms:
            d[row, t] += 1.0
    idf = np.log(n_d / (1 + (d.tocsc() > 0).sum(axis=0).A1)) + 1
    d = normalize(sp.csr_matrix(d) @ sp.diags(idf))
    q = sp.lil_matrix((n_q, n_t))
    for row in range(n_q):
        for t in rng.choice(n_t, size=rng.integers(1, 6), p=p_term):
            q[row, t] = idf[t]
    return normalize(sp.csr_matrix(q)), d


@needs_numba
@pytest.mark.parametrize("k", [1, 5])
def test_the_stop_skips_postings_and_stays_exact(k: int) -> None:
    q, d = zipf_problem(11)
    counts: dict[str, int] = {}
    rows, docs, vals = top_k_scores(q, d.T.tocsr(), k, use_compiled=True, counts=counts)
    touched = int(np.diff(d.T.tocsr().indptr)[q.indices].sum())
    assert counts["stopped"] > 0
    assert counts["scanned"] < touched
    # Reference: scikit-learn's cosine_similarity, dense, sorted per row.
    dense = cosine_similarity(q, d)
    for row in range(q.shape[0]):
        want = [c for c in np.argsort(-dense[row], kind="stable")[:k] if dense[row, c] > 0]
        got = docs[rows == row]
        np.testing.assert_allclose(vals[rows == row], dense[row, want], rtol=0, atol=1e-12)
        # Pages may trade places only where their cosines tie to rounding.
        assert set(got) == set(want) or np.allclose(dense[row, got], dense[row, want], atol=1e-12)
    b = top_k_scores(q, d.T.tocsr(), k, use_compiled=False)
    for x, y in zip((rows, docs, vals), b, strict=True):
        np.testing.assert_array_equal(x, y)


def without_dense_rows(ready: scoring_kernel.Postings) -> scoring_kernel.Postings:
    """The same postings with no dense rows: every look-up goes by binary search."""
    n_docs = ready.matrix.shape[1]
    return dataclasses.replace(
        ready, dense_slot=np.full_like(ready.dense_slot, -1), dense=np.zeros((0, n_docs))
    )


def assert_top_k_is_the_cosine(q, d, rows, docs, vals, k: int, floor: float = 0.0) -> None:
    """Reference: scikit-learn's cosine_similarity, dense; the top k among cosines >= floor,
    pages trading places only where their cosines tie to rounding."""
    dense = cosine_similarity(q, d)
    for row in range(q.shape[0]):
        order = np.argsort(-dense[row], kind="stable")[:k]
        want = [c for c in order if dense[row, c] >= floor and dense[row, c] > 0]
        got = docs[rows == row]
        assert len(got) == len(want)
        np.testing.assert_allclose(vals[rows == row], dense[row, want], rtol=0, atol=1e-12)
        assert set(got) == set(want) or np.allclose(dense[row, got], dense[row, want], atol=1e-12)


@needs_numba
@pytest.mark.parametrize("dense_rows", [True, False])
@pytest.mark.parametrize(("k", "floor"), [(1, 0.0), (5, 0.0), (1, 0.3), (5, 0.2)])
def test_each_way_of_finishing_the_kept_pages_stays_exact(
    dense_rows: bool, k: int, floor: float
) -> None:
    # After the stop, kept pages get their unread weights by dense row, by reading the rest of
    # a term's postings, or by binary search: each way must be taken here, and stay exact.
    q, d = zipf_problem(17, n_q=300, n_d=2000)
    ready = scoring_kernel.prepare_postings(d.T.tocsr())
    if not dense_rows:
        ready = without_dense_rows(ready)
    counts: dict[str, int] = {}
    rows, docs, vals = top_k_scores(q, ready, k, use_compiled=True, counts=counts, floor=floor)
    touched = int(np.diff(d.T.tocsr().indptr)[q.indices].sum())
    assert counts["stopped"] > 0
    assert counts["scanned"] < touched
    assert counts["read_rest"] > 0
    if dense_rows:
        assert counts["looked_up"] > counts["searched"]
    else:
        assert counts["looked_up"] == counts["searched"] > 0
    assert counts["summed_again"] >= np.unique(rows).size
    assert_top_k_is_the_cosine(q, d, rows, docs, vals, k, floor)
    b = top_k_scores(q, d.T.tocsr(), k, use_compiled=False, floor=floor)
    for x, y in zip((rows, docs, vals), b, strict=True):
        np.testing.assert_array_equal(x, y)


@needs_numba
@pytest.mark.parametrize("k", [1, 3, 5])
def test_reading_by_weight_breaks_ties_by_the_lower_page(k: int) -> None:
    # Every page four times over: each weight ties with three others, so a stop often falls
    # inside a run of equal weights and the lower page rows must still win.
    q, d = zipf_problem(19, n_q=300, n_d=500)
    d = sp.csr_matrix(sp.vstack([d] * 4))
    counts: dict[str, int] = {}
    rows, docs, vals = top_k_scores(q, d.T.tocsr(), k, use_compiled=True, counts=counts)
    assert counts["stopped"] > 0
    b = top_k_scores(q, d.T.tocsr(), k, use_compiled=False)
    for x, y in zip((rows, docs, vals), b, strict=True):
        np.testing.assert_array_equal(x, y)
    # Reference: scikit-learn's cosine; among equal cosines the lowest page rows come first.
    dense = cosine_similarity(q, d)
    for row in np.unique(rows)[:50]:
        best = dense[row].max()
        ties = np.flatnonzero(np.isclose(dense[row], best, rtol=0, atol=1e-12))
        assert docs[rows == row][0] == ties.min()


def test_impact_order_sorts_each_term_by_weight_falling_then_page_row() -> None:
    m = sp.random(300, 500, density=0.05, format="csr", random_state=3)
    m.data = np.round(m.data * 4) / 4 + 0.25  # few distinct weights: many ties
    m.sort_indices()
    got_rows, got_weights = scoring_kernel.impact_order(m)
    # Reference: numpy's lexsort on (term, weight falling, page row).
    terms = np.repeat(np.arange(m.shape[0]), np.diff(m.indptr))
    want = np.lexsort((m.indices, -m.data, terms))
    np.testing.assert_array_equal(got_rows, m.indices[want])
    np.testing.assert_array_equal(got_weights, m.data[want])


@pytest.mark.parametrize("path", [pytest.param(True, marks=needs_numba), False])
def test_prepared_postings_give_the_same_result_and_are_made_once(path: bool) -> None:
    q, d = zipf_problem(5, n_q=100)
    plain = top_k_scores(q, d.T.tocsr(), 5, use_compiled=path)
    ready = scoring_kernel.prepare_postings(d.T.tocsr())
    for x, y in zip(plain, top_k_scores(q, ready, 5, use_compiled=path), strict=True):
        np.testing.assert_array_equal(x, y)
    index = small_index()
    assert index.postings is index.postings  # made on first use, then kept
    first = score_queries(pd.Series(["water meter"]), index)
    again = score_queries(pd.Series(["water meter"]), index)
    pd.testing.assert_frame_equal(first.top_pages, again.top_pages)


@pytest.mark.parametrize("path", [pytest.param(True, marks=needs_numba), False])
@pytest.mark.parametrize(("k", "floor"), [(1, 0.3), (1, 0.45), (5, 0.3), (3, 0.37)])
def test_a_floor_keeps_only_pages_that_reach_it_and_reads_less(
    path: bool, k: int, floor: float
) -> None:
    q, d = zipf_problem(13)
    counts: dict[str, int] = {}
    rows, docs, vals = top_k_scores(
        q, d.T.tocsr(), k, use_compiled=path, floor=floor, counts=counts if path else None
    )
    assert_top_k_is_the_cosine(q, d, rows, docs, vals, k, floor)
    kept_queries = np.unique(rows).size
    assert 0 < kept_queries < q.shape[0]  # the floor matters for this problem
    if path:
        plain: dict[str, int] = {}
        top_k_scores(q, d.T.tocsr(), k, use_compiled=True, counts=plain)
        assert counts["scanned"] < plain["scanned"]
        b = top_k_scores(q, d.T.tocsr(), k, use_compiled=False, floor=floor)
        for x, y in zip((rows, docs, vals), b, strict=True):
            np.testing.assert_array_equal(x, y)


@pytest.mark.parametrize(
    ("min_score", "min_coverage"), [(0.05, 0.6), (0.3, 0.6), (0.5, 0.9), (0.0, 0.0)]
)
def test_ok_queries_agree_with_the_full_scores(min_score: float, min_coverage: float) -> None:
    # The status-only path (best page among those reaching min_score) must call ok exactly the
    # queries the full top-k scores and the flag rule call ok.
    from querygap.rescoring import status_of
    from querygap.scoring import ok_queries

    index = small_index()
    rng = np.random.default_rng(3)
    words = np.array([*index.terms, "sofa", "zebra", "quux"], dtype=object)
    queries = pd.Series(
        [" ".join(rng.choice(words, size=rng.integers(1, 5))) for _ in range(3000)] + [""]
    ).drop_duplicates()
    full = status_of(score_queries(queries, index).scores, min_score, min_coverage) == "ok"
    got = ok_queries(queries, index, min_score, min_coverage)
    assert 0 < full.sum() < len(queries) or min_score == 0.0
    np.testing.assert_array_equal(got, full.to_numpy())


@needs_numba
@pytest.mark.parametrize("k", [1, 5, 250])
def test_the_kernel_stays_in_its_arrays_where_every_page_ties(
    monkeypatch: pytest.MonkeyPatch, k: int
) -> None:
    # 200 identical pages of 12 terms: every page ties at every step, so every page stays
    # within the slack of theta and the list of pages that reached it is at its longest. The
    # kernel runs as plain Python here, where numpy checks every index (compiled code does
    # not). k = 250 asks for more pages than there are.
    pages = normalize(sp.csr_matrix(np.tile(np.arange(1.0, 13.0), (200, 1))))
    rng = np.random.default_rng(23)
    query = sp.lil_matrix((40, 12))
    for row in range(40):
        query[row, rng.choice(12, size=rng.integers(1, 13), replace=False)] = rng.random() + 0.1
    query = normalize(sp.csr_matrix(query))
    want = top_k_scores(query, pages.T.tocsr(), k, use_compiled=False)
    monkeypatch.setattr(scoring_kernel, "_kernel", scoring_kernel._kernel.py_func)
    got = top_k_scores(query, pages.T.tocsr(), k, use_compiled=True)
    for x, y in zip(got, want, strict=True):
        np.testing.assert_array_equal(x, y)
    # Reference: scikit-learn's cosine; all pages tie, so each query keeps the lowest rows.
    dense = cosine_similarity(query, pages)
    assert (np.bincount(got[0], minlength=40) == min(k, 200)).all()
    for row in range(40):
        np.testing.assert_array_equal(got[1][got[0] == row], np.arange(min(k, 200)))
        np.testing.assert_allclose(got[2][got[0] == row], dense[row, 0], rtol=1e-12)


@needs_numba
@pytest.mark.parametrize(("k", "floor"), [(1, 0.0), (5, 0.0), (3, 0.3)])
def test_the_kernel_stays_in_its_arrays_on_zipf_pages(
    monkeypatch: pytest.MonkeyPatch, k: int, floor: float
) -> None:
    # As above, plain Python with every index checked, on the shape the stop is made for.
    q, d = zipf_problem(29, n_q=120, n_d=800)
    want = top_k_scores(q, d.T.tocsr(), k, use_compiled=True, floor=floor)
    monkeypatch.setattr(scoring_kernel, "_kernel", scoring_kernel._kernel.py_func)
    counts: dict[str, int] = {}
    got = top_k_scores(q, d.T.tocsr(), k, use_compiled=True, floor=floor, counts=counts)
    assert counts["stopped"] > 0
    for x, y in zip(got, want, strict=True):
        np.testing.assert_array_equal(x, y)
    assert_top_k_is_the_cosine(q, d, *got, k, floor)


def test_query_terms_are_each_querys_distinct_terms_in_first_seen_order() -> None:
    # Reference: pandas' group-by of every term occurrence by (query, term), in order of first
    # occurrence (sort=False), numbered within each query.
    from querygap.analyzer import analyze_series

    pages = pd.DataFrame(
        {
            "doc_id": ["a", "b"],
            "title": ["Water meter", "Pay a bill"],
            "headings": ["", ""],
            "body": ["read the water meter", "pay the water bill online"],
        }
    )
    index = index_of_pages(pages)
    queries = pd.Series(
        ["water water meter", "bill pay bill unknownword", "", "zz zz", "meter", "the the"]
    )
    got = query_terms(queries, index).long
    occ = analyze_series(queries, index.settings.analyzer)
    want = occ.groupby(["row", "term"], sort=False).size().reset_index(name="count")
    want["position"] = want.groupby("row").cumcount()
    want["term_id"] = index.terms.get_indexer(want["term"])
    assert (want["count"] > 1).any() and (want["term_id"] < 0).any()  # repeats, unknown terms
    pd.testing.assert_frame_equal(got, want, check_dtype=False)


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_renumbered_equals_scipys_column_indexing(seed: int) -> None:
    # Reference: scipy's own fancy column indexing (weights[:, order]), which sums duplicate
    # entries; the input here has duplicates, explicit zeros and unsorted columns.
    rng = np.random.default_rng(seed)
    n_q, n_t, nnz = 50, 300, 400
    rows = np.sort(rng.integers(0, n_q, nnz))
    cols = rng.integers(0, n_t, nnz)
    vals = np.where(rng.random(nnz) < 0.1, 0.0, rng.random(nnz))
    indptr = np.r_[0, np.cumsum(np.bincount(rows, minlength=n_q))]
    weights = sp.csr_matrix((vals, cols, indptr), shape=(n_q, n_t))
    assert not weights.has_canonical_format
    order = rng.permutation(n_t)
    number = np.empty(n_t, np.int64)
    number[order] = np.arange(n_t)
    before = weights.data.copy()
    got = scoring_kernel.renumbered(weights, number)
    want = weights[:, order]
    want.eliminate_zeros()
    want.sum_duplicates()
    assert got.has_canonical_format
    np.testing.assert_array_equal(got.indptr, want.indptr)
    np.testing.assert_array_equal(got.indices, want.indices)
    np.testing.assert_allclose(got.data, want.data, rtol=0, atol=1e-15)
    np.testing.assert_array_equal(weights.data, before)  # the input is left as it was


def test_prepared_postings_keep_the_inverse_order_and_least_weight() -> None:
    q, d = zipf_problem(3, n_q=20)
    ready = scoring_kernel.prepare_postings(d.T.tocsr())
    np.testing.assert_array_equal(ready.number[ready.order], np.arange(ready.order.size))
    assert ready.least == d.data[d.data > 0].min()
