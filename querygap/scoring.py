"""The score stage: unique normalized queries against the current index.

For each query q (a unit vector over known terms, its norm including unknown terms, see
:mod:`querygap.weighting`) and each page d: ``score(q, d) = q . d``, the cosine, in [0, 1].
Per query we keep the best score, the top ``k`` pages, each distinct term with its df and whether
the best page contains it, and

    coverage = sum of idf(t) over distinct query terms t on the best page
               / sum of idf(t) over all distinct query terms t,

with unknown terms weighing ``unknown_term_idf`` (the idf of df = 1). A query whose terms all have
idf 0 (every page has them) gets coverage 1 when its best page has them all.

The product and the top-k selection are done by :func:`querygap.scoring_kernel.top_k_scores`:
a compiled kernel that reads postings by weight falling when numba is installed, chunked sparse
products with a vectorised sort otherwise; never a Python loop over queries.
"""

from __future__ import annotations

from dataclasses import dataclass

import duckdb
import numpy as np
import pandas as pd
import pyarrow as pa
import scipy.sparse as sp

from querygap.analyzer import Analyzed, _ranks, analyze_codes
from querygap.indexing import Index
from querygap.scoring_kernel import top_k_rows as top_k_rows  # kept importable from here
from querygap.scoring_kernel import top_k_scores
from querygap.string_sets import strings_at
from querygap.weighting import query_weights, unknown_term_idf

TOP_K = 5


@dataclass(frozen=True)
class QueryTerms:
    """The analyzed queries as sparse counts over known and unknown terms."""

    known: sp.csr_matrix  # (n_queries, n_index_terms) counts
    unknown: sp.csr_matrix  # (n_queries, n_unknown) counts
    long: pd.DataFrame  # row, position, term, term_id (-1 when unknown)


def _distinct_terms(found: Analyzed, index: Index) -> pd.DataFrame:
    """Each query's distinct terms in the order they first occur: row, term, count, position
    (0, 1, ... within the query), term_id (-1 when no page has the term).

    Worked on the term codes: a pandas group-by of (row, term string) took 0.7 s of every 250k
    queries at size M."""
    n_codes = len(found.terms)
    pair, first, count = np.unique(
        found.rows * n_codes + found.codes, return_index=True, return_counts=True
    )
    order = np.argsort(first, kind="stable")  # occurrences come row by row, in reading order
    pair, count = pair[order], count[order]
    rows, codes = pair // n_codes, pair % n_codes
    starts = np.flatnonzero(np.r_[True, rows[1:] != rows[:-1]])
    sizes = np.diff(np.r_[starts, rows.size])
    return pd.DataFrame(
        {
            "row": rows,
            "term": found.terms[codes],
            "count": count.astype(np.int64),
            "position": _ranks(sizes),
            "term_id": index.terms.get_indexer(found.terms)[codes],
        }
    )


def query_terms(queries: pd.Series, index: Index) -> QueryTerms:
    """Analyze queries with the index's analyzer and split their terms into known and unknown."""
    found = analyze_codes(queries.reset_index(drop=True), index.settings.analyzer)
    n = len(queries)
    if found.codes.size == 0:
        empty = sp.csr_matrix((n, len(index.terms)))
        return QueryTerms(
            empty,
            sp.csr_matrix((n, 0)),
            pd.DataFrame({"row": [], "position": [], "term": [], "term_id": [], "count": []}),
        )
    distinct = _distinct_terms(found, index)
    known = distinct[distinct["term_id"] >= 0]
    unknown = distinct[distinct["term_id"] < 0]
    ucodes, _ = pd.factorize(unknown["term"])
    known_m = sp.csr_matrix(
        (
            known["count"].to_numpy(np.float64),
            (known["row"].to_numpy(), known["term_id"].to_numpy()),
        ),
        shape=(n, len(index.terms)),
    )
    unknown_m = sp.csr_matrix(
        (unknown["count"].to_numpy(np.float64), (unknown["row"].to_numpy(), ucodes)),
        shape=(n, int(ucodes.max()) + 1 if len(ucodes) else 0),
    )
    known_m.sort_indices()
    return QueryTerms(known_m, unknown_m, distinct)


@dataclass(frozen=True)
class Measured:
    """Per query: its top pages (row-sorted triples) and the best page's share of its terms."""

    top_r: np.ndarray  # query row of each kept page, ascending
    top_c: np.ndarray  # page row
    top_v: np.ndarray  # score, falling within a query
    best_doc_row: np.ndarray  # (n,) page row of the best page, -1 when none
    best_score: np.ndarray  # (n,)
    in_best: np.ndarray  # per row of QueryTerms.long: the best page has the term
    coverage: np.ndarray  # (n,)
    n_terms: np.ndarray  # (n,) distinct terms
    n_known: np.ndarray  # (n,) distinct terms some page has


def measure_terms(
    qt: QueryTerms, index: Index, k: int = TOP_K, floor: float = 0.0, chunk: int | None = None
) -> Measured:
    """Top ``k`` pages, best page and coverage of analyzed queries (see the module docstring).

    With ``floor`` > 0 only pages scoring at least ``floor`` count: a query with none gets no
    best page, best score 0 and the coverage of no page. ``chunk`` as in :func:`score_queries`.
    """
    n = qt.known.shape[0]
    weights = query_weights(qt.known, index.idf, qt.unknown, index.n_docs, index.settings.weighting)
    compiled = None if chunk is None else False
    top_r, top_c, top_v = top_k_scores(
        weights, index.postings, k, use_compiled=compiled, chunk=chunk, floor=floor
    )
    first = np.r_[True, top_r[1:] != top_r[:-1]] if top_r.size else np.empty(0, bool)
    best_doc_row = np.full(n, -1, dtype=np.int64)
    best_score = np.zeros(n)
    best_doc_row[top_r[first]] = top_c[first]
    best_score[top_r[first]] = top_v[first]

    long = qt.long
    term_ids = long["term_id"].to_numpy(np.int64)
    qrow = long["row"].to_numpy(np.int64)
    in_best = np.zeros(len(long), dtype=bool)
    has_best = (term_ids >= 0) & (best_doc_row[qrow] >= 0)
    if has_best.any():
        keys = index.term_keys
        probe = best_doc_row[qrow[has_best]] * len(index.terms) + term_ids[has_best]
        # Searched in sorted order: the binary searches then walk the keys (14.5M at size M)
        # forwards, about 10x faster than in query order.
        by_key = np.argsort(probe, kind="stable")
        pos = np.empty_like(by_key)
        pos[by_key] = np.minimum(np.searchsorted(keys, probe[by_key]), keys.size - 1)
        in_best[has_best] = keys[pos] == probe
    unk_idf = unknown_term_idf(index.n_docs, index.settings.weighting)
    idf = np.where(term_ids >= 0, index.idf[np.maximum(term_ids, 0)], unk_idf)
    mass = np.bincount(qrow, weights=idf, minlength=n)
    matched = np.bincount(qrow, weights=np.where(in_best, idf, 0.0), minlength=n)
    n_terms = np.bincount(qrow, minlength=n)
    n_known = np.bincount(qrow, weights=(term_ids >= 0).astype(float), minlength=n).astype(np.int64)
    n_in_best = np.bincount(qrow, weights=in_best.astype(float), minlength=n)
    with np.errstate(invalid="ignore", divide="ignore"):
        coverage = np.where(
            mass > 0, matched / mass, np.where((n_terms > 0) & (n_in_best == n_terms), 1.0, 0.0)
        )
    return Measured(
        top_r, top_c, top_v, best_doc_row, best_score, in_best, coverage, n_terms, n_known
    )


def is_ok(
    n_known: np.ndarray,
    best_score: np.ndarray,
    coverage: np.ndarray,
    min_score: float,
    min_coverage: float,
) -> np.ndarray:
    """The flag stage's rule for ok (sql/review.sql review_flag): some term a page has, best
    score >= ``min_score`` and coverage >= ``min_coverage`` (scores clipped to [0, 1])."""
    best = np.clip(np.asarray(best_score, float), 0.0, 1.0)
    cover = np.clip(np.asarray(coverage, float), 0.0, 1.0)
    return (np.asarray(n_known) > 0) & (best >= min_score) & (cover >= min_coverage)


def ok_queries(
    queries: pd.Series, index: Index, min_score: float, min_coverage: float
) -> np.ndarray:
    """True for each query the flag stage would call ok (sql/review.sql review_flag): some
    known term, best score >= ``min_score`` and coverage >= ``min_coverage``.

    Scores only what that needs: the best page (k = 1) among pages reaching ``min_score``, a
    floor that lets the kernel stop reading most postings (:func:`top_k_scores`).
    """
    qt = query_terms(pd.Series(queries, dtype=object).reset_index(drop=True), index)
    return ok_terms(qt, index, min_score, min_coverage)


def ok_terms(qt: QueryTerms, index: Index, min_score: float, min_coverage: float) -> np.ndarray:
    """:func:`ok_queries` of queries already split into terms (:func:`terms_of_counts`)."""
    got = measure_terms(qt, index, k=1, floor=max(min_score, 0.0))
    return is_ok(got.n_known, got.best_score, got.coverage, min_score, min_coverage)


def terms_of_counts(
    rows: np.ndarray,
    term_ids: np.ndarray,
    unknown_keys: np.ndarray,
    counts: np.ndarray,
    n: int,
    index: Index,
) -> QueryTerms:
    """The :class:`QueryTerms` of ``n`` queries given as their distinct terms and counts.

    Entry i is a term of query ``rows[i]`` occurring ``counts[i]`` times: index column
    ``term_ids[i]``, or -1 when no page has it, told apart from the query's other unknown terms
    by ``unknown_keys[i]`` (>= 0). The matrices are built as :func:`query_terms` builds them,
    so the same queries get the same weights; ``long`` holds ``row`` and ``term_id``, all that
    :func:`measure_terms` reads.
    """
    rows = np.asarray(rows, np.int64)
    term_ids = np.asarray(term_ids, np.int64)
    counts = np.asarray(counts, np.float64)
    known = term_ids >= 0
    known_m = sp.csr_matrix(
        (counts[known], (rows[known], term_ids[known])), shape=(n, len(index.terms))
    )
    known_m.sort_indices()
    ucodes, _ = pd.factorize(np.asarray(unknown_keys)[~known])
    unknown_m = sp.csr_matrix(
        (counts[~known], (rows[~known], ucodes)),
        shape=(n, int(ucodes.max()) + 1 if len(ucodes) else 0),
    )
    return QueryTerms(known_m, unknown_m, pd.DataFrame({"row": rows, "term_id": term_ids}))


@dataclass(frozen=True)
class ScoreTables:
    """The three result tables, ready to store."""

    scores: pd.DataFrame  # query, n_terms, n_known, best_score, coverage, best_doc
    top_pages: pd.DataFrame  # query, rank, doc_id, score
    terms: pd.DataFrame  # query, position, term, df, in_best


def score_queries(
    queries: pd.Series, index: Index, chunk: int | None = None, k: int = TOP_K
) -> ScoreTables:
    """Score unique queries against ``index`` (pure computation; storing is the caller's job).

    ``chunk=None`` (the default) takes the compiled kernel of :mod:`querygap.scoring_kernel` when
    numba is installed; a number of queries per chunk forces the pure numpy path in chunks of
    that size. Both give the same scores and pages.
    """
    queries = pd.Series(queries, dtype=object).reset_index(drop=True)
    qt = query_terms(queries, index)
    got = measure_terms(qt, index, k, chunk=chunk)
    top_r, top_c, top_v = got.top_r, got.top_c, got.top_v
    best_doc_row, best_score, coverage = got.best_doc_row, got.best_score, got.coverage
    in_best, n_terms, n_known = got.in_best, got.n_terms, got.n_known
    rank = np.arange(top_r.size) - np.searchsorted(top_r, top_r, side="left")
    long = qt.long
    term_ids = long["term_id"].to_numpy(np.int64)
    qrow = long["row"].to_numpy(np.int64)

    doc_ids = index.doc_ids
    query_text = pa.array(queries.to_numpy(object), type=pa.large_string())
    scores = pd.DataFrame(
        {
            "query": queries,
            "n_terms": n_terms.astype(np.int32),
            "n_known": n_known.astype(np.int32),
            "best_score": np.clip(best_score, 0.0, 1.0),
            "coverage": np.clip(coverage, 0.0, 1.0),
            "best_doc": np.where(best_doc_row >= 0, doc_ids[np.maximum(best_doc_row, 0)], None),
        }
    )
    top_pages = pd.DataFrame(
        {
            "query": strings_at(query_text, top_r),
            "rank": (rank + 1).astype(np.int32),
            "doc_id": strings_at(pa.array(doc_ids, type=pa.large_string()), top_c),
            "score": np.clip(top_v, 0.0, 1.0),
        }
    )
    terms = pd.DataFrame(
        {
            "query": strings_at(query_text, qrow),
            "position": long["position"].to_numpy(np.int32),
            "term": long["term"].to_numpy(object),
            "df": np.where(term_ids >= 0, index.df[np.maximum(term_ids, 0)], 0).astype(np.int32),
            "in_best": in_best,
        }
    )
    return ScoreTables(scores, top_pages, terms)


def store_scores(conn: duckdb.DuckDBPyConnection, index_id: str, tables: ScoreTables) -> None:
    """Append score tables for ``index_id`` (the caller scores only queries not yet stored)."""
    for name, data in (
        ("query_scores", tables.scores),
        ("query_top_pages", tables.top_pages),
        ("query_terms", tables.terms),
    ):
        conn.register("score_df", data)
        conn.execute(
            f"INSERT INTO {name} SELECT ?::VARCHAR AS index_id, * FROM score_df", [index_id]
        )
        conn.unregister("score_df")
