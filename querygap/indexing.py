"""The index stage: present pages -> TF-IDF unit vectors stored in ``terms``, ``doc_rows`` and
``doc_terms``.

Field weights: a term in the title counts ``title_weight`` times; a term in a heading counts
``1 + heading_weight`` times (headings are also part of the body text). ``length(d)`` is the sum of
these weighted counts. The formulas are in :mod:`querygap.weighting`.

The index id is a fingerprint of the settings and of every page's content hash: an unchanged
collection gets the same id, so a later review reuses both the index and the scores made with it.
"""

from __future__ import annotations

import hashlib
import json
import os
from concurrent.futures import ThreadPoolExecutor
from dataclasses import asdict, dataclass, field
from functools import cached_property

import duckdb
import numpy as np
import pandas as pd
import pyarrow as pa
import scipy.sparse as sp

from querygap.analyzer import Analyzed, AnalyzerSettings, analyze_codes
from querygap.errors import StageOrderError
from querygap.scoring_kernel import Postings, prepare_postings
from querygap.weighting import Weighting, document_frequency, page_weights
from querygap.workspace import arrow, frame, run, transaction


@dataclass(frozen=True)
class IndexSettings:
    analyzer: AnalyzerSettings = field(default_factory=AnalyzerSettings)
    weighting: Weighting = field(default_factory=Weighting)
    title_weight: float = 2.0
    heading_weight: float = 1.0

    def to_json(self) -> str:
        return json.dumps(asdict(self), sort_keys=True)

    @classmethod
    def from_json(cls, text: str) -> IndexSettings:
        raw = json.loads(text)
        return cls(
            AnalyzerSettings(**raw["analyzer"]),
            Weighting(**raw["weighting"]),
            raw["title_weight"],
            raw["heading_weight"],
        )


@dataclass(frozen=True)
class Index:
    """A loaded index: page vectors (rows) over terms (columns), with idf."""

    index_id: str
    settings: IndexSettings
    doc_ids: np.ndarray  # (n_docs,) object
    terms: pd.Index  # term -> column
    idf: np.ndarray  # (n_terms,)
    df: np.ndarray  # (n_terms,)
    vectors: sp.csr_matrix  # (n_docs, n_terms), unit rows

    @property
    def n_docs(self) -> int:
        return int(self.vectors.shape[0])

    @cached_property
    def postings(self) -> Postings:
        """The page vectors as the scorer's postings, made on first use and kept."""
        return prepare_postings(self.vectors.T.tocsr())

    @cached_property
    def term_keys(self) -> np.ndarray:
        """``page row * n_terms + term column`` of every stored weight, ascending (CSR order):
        whether page d has term t is one binary search for ``d * n_terms + t``."""
        vec = self.vectors
        doc_of_nnz = np.repeat(np.arange(vec.shape[0], dtype=np.int64), np.diff(vec.indptr))
        return doc_of_nnz * vec.shape[1] + vec.indices.astype(np.int64)


Pages = pd.DataFrame | pa.Table


def field_counts(pages: Pages, settings: IndexSettings) -> tuple[sp.csr_matrix, np.ndarray]:
    """Weighted term counts of pages (columns title, headings, body) and the term of each column.

    Columns are the distinct terms in sorted order (code point order).
    """
    fields = (
        ("body", 1.0),
        ("title", settings.title_weight),
        ("headings", settings.heading_weight),
    )
    found = [
        (part, w)
        for c, w in fields
        if w != 0
        for part in _analyzed_in_parts(pages[c], settings.analyzer)
    ]
    # The shared vocabulary in code point order; each field's terms as columns of it.
    distinct = pd.unique(np.concatenate([np.empty(0, object), *(f.terms for f, _ in found)]))
    vocab = np.array(sorted(distinct), dtype=object)
    columns = pd.Index(vocab)
    rows, cols, weights = [np.empty(0, np.int64)], [np.empty(0, np.int64)], [np.empty(0)]
    for f, weight in found:
        rows.append(f.rows)
        cols.append(columns.get_indexer(f.terms)[f.codes])
        weights.append(np.full(f.codes.size, weight, np.float64))
    # The sparse constructor sums repeated (row, term) pairs: the weighted count of each term.
    counts = sp.csr_matrix(
        (np.concatenate(weights), (np.concatenate(rows), np.concatenate(cols))),
        shape=(len(pages), len(vocab)),
    )
    counts.sum_duplicates()
    counts.sort_indices()
    return counts, vocab


#: Texts analyzed at once per thread: below this a second thread costs more than it saves.
PART_TEXTS = 20_000


def _analyzed_in_parts(
    texts: pd.Series | pa.ChunkedArray, settings: AnalyzerSettings
) -> list[Analyzed]:
    """:func:`analyze_codes` of the texts in parts, one per core, side by side: Arrow's kernels
    (splitting, dictionary encoding) release the GIL and take most of the time (the bodies of
    100k pages: 4.0 s -> 2.6 s on 2 cores). Each part's rows are numbered in the whole."""
    n = len(texts)
    parts = min(os.cpu_count() or 1, max(1, n // PART_TEXTS))
    if parts < 2:
        return [analyze_codes(texts, settings)]
    bounds = np.linspace(0, n, parts + 1).astype(int)
    pieces = [
        texts.slice(lo, hi - lo) if isinstance(texts, pa.ChunkedArray) else texts.iloc[lo:hi]
        for lo, hi in zip(bounds[:-1], bounds[1:], strict=True)
    ]
    with ThreadPoolExecutor(max_workers=parts) as pool:
        done = list(pool.map(lambda part: analyze_codes(part, settings), pieces))
    return [
        Analyzed(found.rows + lo, found.codes, found.terms)
        for found, lo in zip(done, bounds[:-1], strict=True)
    ]


def fingerprint(pages: Pages, settings: IndexSettings) -> str:
    digest = hashlib.sha256(settings.to_json().encode())
    docs, hashes = _texts(pages, "doc_id"), _texts(pages, "content_hash")
    for doc, h in zip(docs, hashes, strict=True):
        digest.update(f"{doc}\x1f{h}\n".encode())
    return digest.hexdigest()[:16]


def _texts(pages: Pages, column: str) -> list[str]:
    values = pages[column]
    return values.to_pylist() if isinstance(pages, pa.Table) else list(values)


def build_index(conn: duckdb.DuckDBPyConnection, settings: IndexSettings) -> tuple[str, bool]:
    """Make the index of the present pages current; returns (index_id, reused)."""
    pages = arrow(conn, "content_present")
    if pages.num_rows == 0:
        raise StageOrderError("no content pages are loaded; run 'querygap add-pages' first")
    index_id = fingerprint(pages, settings)
    if run(conn, "index_exists", {"index_id": index_id}).fetchall()[0][0]:
        with transaction(conn):
            run(conn, "index_make_current", {"index_id": index_id})
        return index_id, True
    counts, vocab = field_counts(pages, settings)
    keep = np.asarray(counts.sum(axis=1)).ravel() > 0
    doc_ids = pages["doc_id"].combine_chunks().filter(pa.array(keep))
    counts = counts[keep]
    vectors, idf = page_weights(counts, settings.weighting)
    if not np.array_equal(vectors.indptr, counts.indptr):
        raise AssertionError("page vectors must keep the layout of the counts")
    n_docs = counts.shape[0]
    tables = {
        "index_store_terms": pa.table(
            {
                "term_id": np.arange(len(vocab), dtype=np.int32),
                "term": pa.array(vocab, type=pa.string()),
                "df": document_frequency(counts).astype(np.int32),
                "cf": np.asarray(counts.sum(axis=0)).ravel(),
                "idf": idf,
            }
        ),
        "index_store_doc_rows": pa.table(
            {
                "doc_row": np.arange(n_docs, dtype=np.int32),
                "doc_id": doc_ids,
                "length": np.asarray(counts.sum(axis=1)).ravel(),
            }
        ),
        # CSR order: row by row, terms ascending within a row (as index_vectors reads them).
        "index_store_doc_terms": pa.table(
            {
                "doc_row": np.repeat(np.arange(n_docs, dtype=np.int32), np.diff(counts.indptr)),
                "term_id": counts.indices.astype(np.int32),
                "count": counts.data,
                "weight": vectors.data,
            }
        ),
    }
    with transaction(conn):
        run(
            conn,
            "index_record",
            {
                "index_id": index_id,
                "settings": settings.to_json(),
                "n_docs": int(n_docs),
                "n_terms": len(vocab),
            },
        )
        for name, data in tables.items():
            conn.register("index_new_rows", data)
            run(conn, name, {"index_id": index_id})
            conn.unregister("index_new_rows")
        run(conn, "index_make_current", {"index_id": index_id})
        run(conn, "index_retire_others")
    return index_id, False


def csr_of_sorted(
    rows: np.ndarray, cols: np.ndarray, values: np.ndarray, shape: tuple[int, int]
) -> sp.csr_matrix:
    """The CSR matrix of (row, col, value) triples, made directly when they come in CSR order
    (rows ascending, columns strictly ascending within a row: 0.1 s for 14.5M triples), else
    through scipy's COO conversion, which sorts and sums repeats (1.8 s)."""
    n_rows = shape[0]
    in_order = rows.size < 2 or bool(
        ((rows[1:] > rows[:-1]) | ((rows[1:] == rows[:-1]) & (cols[1:] > cols[:-1]))).all()
    )
    inside = rows.size == 0 or (rows[0] >= 0 and rows[-1] < n_rows)
    if not (in_order and inside):
        matrix = sp.csr_matrix((values, (rows, cols)), shape=shape)
        matrix.sort_indices()
        return matrix
    indptr = np.zeros(n_rows + 1, np.int64)
    np.cumsum(np.bincount(rows, minlength=n_rows), out=indptr[1:])
    return sp.csr_matrix((values, cols, indptr), shape=shape)


def load_index(conn: duckdb.DuckDBPyConnection) -> Index:
    """The current index, read back into memory."""
    rows = run(conn, "index_current").fetchall()
    row = rows[0] if rows else None
    if row is None:
        raise StageOrderError("no index yet; run a review (it builds the index) first")
    index_id, settings_json, n_docs, n_terms = row
    terms = frame(conn, "index_terms", {"index_id": index_id})
    docs = frame(conn, "index_doc_rows", {"index_id": index_id})
    vec = run(conn, "index_vectors", {"index_id": index_id}).fetchnumpy()
    matrix = csr_of_sorted(
        np.asarray(vec["doc_row"], np.int64),
        np.asarray(vec["term_id"], np.int64),
        np.asarray(vec["weight"], np.float64),
        (int(n_docs), int(n_terms)),
    )
    return Index(
        index_id,
        IndexSettings.from_json(settings_json),
        docs["doc_id"].to_numpy(object),
        pd.Index(terms["term"].astype(object)),
        terms["idf"].to_numpy(np.float64),
        terms["df"].to_numpy(np.int64),
        matrix,
    )
