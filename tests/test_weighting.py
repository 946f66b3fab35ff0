"""TF-IDF formulas against outside references: scikit-learn and the textbook's worked example."""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.sparse as sp
from sklearn.feature_extraction.text import CountVectorizer, TfidfTransformer
from sklearn.metrics.pairwise import cosine_similarity

from querygap.weighting import (
    Weighting,
    document_frequency,
    inverse_document_frequency,
    page_weights,
    query_weights,
    unknown_term_idf,
)

CORPUS = [
    "pay your water bill online",
    "report a leak on your water pipe",
    "read your water meter and pay the bill",
    "wastewater and drains",
]


def counts_of(corpus: list[str]) -> sp.csr_matrix:
    return sp.csr_matrix(CountVectorizer(token_pattern=r"\S+").fit_transform(corpus), dtype=float)


def test_plain_idf_equals_sklearn_unsmoothed_minus_one() -> None:
    # Reference: scikit-learn TfidfTransformer(smooth_idf=False) documents idf = ln(N/df) + 1.
    counts = counts_of(CORPUS)
    ref = TfidfTransformer(smooth_idf=False).fit(counts).idf_ - 1
    ours = inverse_document_frequency(document_frequency(counts), counts.shape[0], Weighting())
    np.testing.assert_allclose(ours, ref, rtol=1e-12)


def test_smooth_idf_equals_sklearn_default() -> None:
    # Reference: scikit-learn's default smooth idf = ln((1+N)/(1+df)) + 1.
    counts = counts_of(CORPUS)
    ref = TfidfTransformer(smooth_idf=True).fit(counts).idf_
    ours = inverse_document_frequency(
        document_frequency(counts), counts.shape[0], Weighting(idf="smooth")
    )
    np.testing.assert_allclose(ours, ref, rtol=1e-12)


@pytest.mark.parametrize(("tf", "sublinear"), [("share", False), ("log", True)])
def test_unit_vectors_match_sklearn_tfidf(tf: str, sublinear: bool) -> None:
    # Reference: TfidfTransformer with norm="l2"; with smooth_idf=False its idf is ours + 1, so
    # compare with our smooth=False vectors after giving sklearn our idf (ln N/df) via idf_.
    counts = counts_of(CORPUS)
    ours, idf = page_weights(counts, Weighting(tf=tf))
    ref = TfidfTransformer(smooth_idf=False, sublinear_tf=sublinear, norm="l2").fit(counts)
    ref.idf_ = idf  # the documented attribute; our idf (terms on every page weigh 0)
    np.testing.assert_allclose(ours.toarray(), ref.transform(counts).toarray(), atol=1e-12)


def test_rows_are_unit_length_and_cosine_matches_sklearn() -> None:
    counts = counts_of(CORPUS)
    vectors, _ = page_weights(counts, Weighting())
    norms = np.sqrt(np.asarray(vectors.multiply(vectors).sum(axis=1)).ravel())
    np.testing.assert_allclose(norms, 1.0)
    # Reference: sklearn.metrics.pairwise.cosine_similarity on the same vectors.
    np.testing.assert_allclose(
        (vectors @ vectors.T).toarray(), cosine_similarity(vectors), atol=1e-12
    )


def test_textbook_idf_worked_example() -> None:
    # Manning, Raghavan & Schuetze, Introduction to Information Retrieval (2008), section 6.2.1,
    # Figure 6.8: N = 806,791 (Reuters RCV1), base-10 logs. df values recalled from memory; the idf
    # values follow from them. Our idf uses natural logs: divide by ln 10 to compare.
    n_docs = 806_791
    cases = {18_165: 1.65, 6_723: 2.08, 19_241: 1.62, 25_235: 1.5}
    df = np.array(list(cases))
    ours = inverse_document_frequency(df, n_docs, Weighting()) / math.log(10)
    np.testing.assert_allclose(ours, list(cases.values()), atol=0.005)


def test_textbook_idf_table_million_documents() -> None:
    # Same book, section 6.2.1: N = 1,000,000; df 1 ... 1,000,000 -> idf 6, 4, 3, 2, 1, 0 (base 10).
    df = np.array([1, 100, 1_000, 10_000, 100_000, 1_000_000])
    ours = inverse_document_frequency(df, 1_000_000, Weighting()) / math.log(10)
    np.testing.assert_allclose(ours, [6, 4, 3, 2, 1, 0], atol=1e-12)


def test_bm25_idf_is_non_negative_and_falls_with_df() -> None:
    idf = inverse_document_frequency(np.arange(1, 101), 100, Weighting(model="bm25"))
    assert np.all(idf >= 0)
    assert np.all(np.diff(idf) < 0)


def test_unknown_terms_count_against_the_query() -> None:
    counts = counts_of(CORPUS)
    vectors, idf = page_weights(counts, Weighting())
    vocab = CountVectorizer(token_pattern=r"\S+").fit(CORPUS).vocabulary_
    q = sp.csr_matrix(([1.0], ([0], [vocab["bill"]])), shape=(1, counts.shape[1]))
    alone = query_weights(q, idf, sp.csr_matrix((1, 1)), counts.shape[0], Weighting())
    with_unknown = query_weights(
        q, idf, sp.csr_matrix(([1.0], ([0], [0])), shape=(1, 1)), counts.shape[0], Weighting()
    )
    best_alone = (alone @ vectors.T).toarray().max()
    best_with = (with_unknown @ vectors.T).toarray().max()
    assert best_with < best_alone
    # The unknown term weighs as a df = 1 term: ln(N / 1).
    assert unknown_term_idf(4, Weighting()) == pytest.approx(math.log(4))
    expected = idf[vocab["bill"]] / math.hypot(idf[vocab["bill"]], math.log(4))
    assert with_unknown.data[0] == pytest.approx(expected)


def test_identical_text_scores_one_and_disjoint_zero() -> None:
    counts = counts_of(CORPUS)
    vectors, idf = page_weights(counts, Weighting())
    same = query_weights(counts[3], idf, sp.csr_matrix((1, 0)), counts.shape[0], Weighting())
    scores = (same @ vectors.T).toarray().ravel()
    assert scores[3] == pytest.approx(1.0)
    assert scores[0] == 0.0
