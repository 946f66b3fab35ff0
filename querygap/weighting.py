"""Term weights and unit vectors: the formulas behind every score.

Notation: N documents; ``count(t, d)`` the (field-weighted) number of times term t occurs in page d;
``length(d) = sum_t count(t, d)``; ``df(t)`` the number of pages containing t.

Term frequency (``tf``):
    share     tf = count(t, d) / length(d)                (default)
    log       tf = 1 + ln(count(t, d))  for count > 0    ("sublinear tf")
Inverse document frequency (``idf``):
    plain     idf = ln(N / df(t))                         (default; natural log)
    smooth    idf = ln((1 + N) / (1 + df(t))) + 1         (scikit-learn's default)
Model:
    tfidf     w(t, d) = tf * idf                          (default)
    bm25      w(t, d) = idf_bm25 * count * (k1 + 1) / (count + k1 * (1 - b + b * length / avglen))
              idf_bm25 = ln(1 + (N - df + 0.5) / (df + 0.5))  (non-negative), k1 = 1.2, b = 0.75
Every page vector is then divided by its Euclidean length, and so is every query vector, so the
score ``q . d`` is the cosine, in [0, 1]. Under bm25 the page side carries the BM25 weight and the
query side the BM25 idf; the cosine keeps scores comparable across models.

Our plain idf differs from scikit-learn's ``TfidfTransformer(smooth_idf=False)`` by exactly 1:
that class adds 1 so that terms in every document keep a little weight. We keep the textbook
form, where a term found on every page weighs nothing.

A query term that no page contains (df = 0) has no textbook idf. It cannot add to any dot product,
but it must still count against the query, or "cheap sofa" would score well on "cheap" alone.
We give it the weight of the rarest term the index could know (df = 1) in the query's norm.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp

TF_SCHEMES = ("share", "log")
IDF_SCHEMES = ("plain", "smooth")
MODELS = ("tfidf", "bm25")


@dataclass(frozen=True)
class Weighting:
    """Which formulas to use (see the module docstring)."""

    tf: str = "share"
    idf: str = "plain"
    model: str = "tfidf"
    k1: float = 1.2
    b: float = 0.75


def document_frequency(counts: sp.csr_matrix) -> np.ndarray:
    """df(t): the number of rows (pages) with a non-zero count of each column (term)."""
    return np.bincount(counts.indices, minlength=counts.shape[1]).astype(np.int64)


def inverse_document_frequency(df: np.ndarray, n_docs: int, weighting: Weighting) -> np.ndarray:
    """idf for each df value under ``weighting`` (df must be >= 1)."""
    df = np.asarray(df, dtype=np.float64)
    if weighting.model == "bm25":
        return np.log1p((n_docs - df + 0.5) / (df + 0.5))
    if weighting.idf == "smooth":
        return np.log((1.0 + n_docs) / (1.0 + df)) + 1.0
    return np.log(n_docs / df)


def unknown_term_idf(n_docs: int, weighting: Weighting) -> float:
    """The weight a term with df = 0 gets in a query's norm: the idf of a term with df = 1."""
    return float(inverse_document_frequency(np.array([1]), n_docs, weighting)[0])


def l2_normalize_rows(matrix: sp.csr_matrix) -> sp.csr_matrix:
    """Divide each row by its Euclidean length (all-zero rows stay zero)."""
    matrix = sp.csr_matrix(matrix, dtype=np.float64, copy=True)
    sq = np.bincount(
        np.repeat(np.arange(matrix.shape[0]), np.diff(matrix.indptr)),
        weights=matrix.data**2,
        minlength=matrix.shape[0],
    )
    norms = np.sqrt(sq)
    norms[norms == 0] = 1.0
    matrix.data /= np.repeat(norms, np.diff(matrix.indptr))
    return matrix


def page_weights(counts: sp.csr_matrix, weighting: Weighting) -> tuple[sp.csr_matrix, np.ndarray]:
    """Unit-length page vectors and the idf of every term.

    Parameters
    ----------
    counts : csr_matrix of shape (n_pages, n_terms)
        Field-weighted term counts; every column must have df >= 1.
    weighting : Weighting

    Returns
    -------
    (vectors, idf): vectors has the shape of ``counts`` with unit rows; idf has shape (n_terms,).
    """
    counts = sp.csr_matrix(counts, dtype=np.float64)
    n_docs = counts.shape[0]
    df = document_frequency(counts)
    if np.any(df == 0):
        raise ValueError("every indexed term must occur on at least one page")
    idf = inverse_document_frequency(df, n_docs, weighting)
    rows = np.repeat(np.arange(n_docs), np.diff(counts.indptr))
    lengths = np.asarray(counts.sum(axis=1)).ravel()
    weights = counts.copy()
    if weighting.model == "bm25":
        avg = lengths.mean() if n_docs else 1.0
        c = counts.data
        denom = c + weighting.k1 * (1 - weighting.b + weighting.b * lengths[rows] / avg)
        weights.data = c * (weighting.k1 + 1) / denom
    elif weighting.tf == "log":
        weights.data = 1.0 + np.log(counts.data)
    else:
        weights.data = counts.data / lengths[rows]
    weights.data *= idf[counts.indices]
    return l2_normalize_rows(weights), idf


def query_weights(
    counts: sp.csr_matrix,
    idf: np.ndarray,
    unknown: sp.csr_matrix,
    n_docs: int,
    weighting: Weighting,
) -> sp.csr_matrix:
    """Query vectors, divided by a norm that includes the terms no page contains.

    ``counts`` (n_queries, n_terms) holds counts of the known terms; ``unknown`` (n_queries, any)
    counts of the terms with df = 0. Both get the same tf; known terms are multiplied by their idf,
    unknown ones by ``unknown_term_idf``. Only the known part is returned: the unknown part lives
    on in the norm it was divided by.
    """
    known = _query_tf(counts, weighting)
    known.data *= idf[known.indices]
    missing = _query_tf(unknown, weighting)
    missing.data *= unknown_term_idf(n_docs, weighting)
    sq = _row_sums(known.multiply(known)) + _row_sums(missing.multiply(missing))
    norms = np.sqrt(sq)
    norms[norms == 0] = 1.0
    known.data /= np.repeat(norms, np.diff(known.indptr))
    return known


def _query_tf(counts: sp.csr_matrix, weighting: Weighting) -> sp.csr_matrix:
    """Query-side tf: raw counts (share cancels in the norm), or 1 + ln(count) under ``log``."""
    out = sp.csr_matrix(counts, dtype=np.float64, copy=True)
    if weighting.tf == "log" and weighting.model == "tfidf":
        out.data = 1.0 + np.log(out.data)
    return out


def _row_sums(matrix: sp.spmatrix) -> np.ndarray:
    return np.asarray(matrix.sum(axis=1), dtype=np.float64).ravel()
