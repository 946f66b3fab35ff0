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
from dataclasses import asdict, dataclass, field

import duckdb
import numpy as np
import pandas as pd
import scipy.sparse as sp

from querygap.analyzer import AnalyzerSettings, analyze_series
from querygap.errors import StageOrderError
from querygap.weighting import Weighting, document_frequency, page_weights
from querygap.workspace import frame, run, transaction


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


def field_counts(pages: pd.DataFrame, settings: IndexSettings) -> tuple[sp.csr_matrix, np.ndarray]:
    """Weighted term counts of pages (columns title, headings, body) and the term of each column."""
    parts = []
    for column, weight in (
        ("body", 1.0),
        ("title", settings.title_weight),
        ("headings", settings.heading_weight),
    ):
        if weight == 0:
            continue
        found = analyze_series(pages[column], settings.analyzer)
        found["w"] = weight
        parts.append(found)
    occ = pd.concat(parts, ignore_index=True)
    codes, vocab = pd.factorize(occ["term"], sort=True)
    # The sparse constructor sums repeated (row, term) pairs: the weighted count of each term.
    counts = sp.csr_matrix(
        (occ["w"].to_numpy(np.float64), (occ["row"].to_numpy(), codes)),
        shape=(len(pages), len(vocab)),
    )
    counts.sum_duplicates()
    counts.sort_indices()
    return counts, np.asarray(vocab, dtype=object)


def fingerprint(pages: pd.DataFrame, settings: IndexSettings) -> str:
    digest = hashlib.sha256(settings.to_json().encode())
    for doc, h in zip(pages["doc_id"], pages["content_hash"], strict=True):
        digest.update(f"{doc}\x1f{h}\n".encode())
    return digest.hexdigest()[:16]


def build_index(conn: duckdb.DuckDBPyConnection, settings: IndexSettings) -> tuple[str, bool]:
    """Make the index of the present pages current; returns (index_id, reused)."""
    pages = frame(conn, "content_present")
    if pages.empty:
        raise StageOrderError("no content pages are loaded; run 'querygap add-pages' first")
    index_id = fingerprint(pages, settings)
    if run(conn, "index_exists", {"index_id": index_id}).fetchall()[0][0]:
        with transaction(conn):
            run(conn, "index_make_current", {"index_id": index_id})
        return index_id, True
    counts, vocab = field_counts(pages, settings)
    keep = np.asarray(counts.sum(axis=1)).ravel() > 0
    counts, doc_ids = counts[keep], pages["doc_id"].to_numpy()[keep]
    vectors, idf = page_weights(counts, settings.weighting)
    df = document_frequency(counts)
    cf = np.asarray(counts.sum(axis=0)).ravel()
    coo = vectors.tocoo()
    with transaction(conn):
        run(
            conn,
            "index_record",
            {
                "index_id": index_id,
                "settings": settings.to_json(),
                "n_docs": int(counts.shape[0]),
                "n_terms": len(vocab),
            },
        )
        tables = {
            "terms": pd.DataFrame(
                {
                    "index_id": index_id,
                    "term_id": np.arange(len(vocab), dtype=np.int32),
                    "term": vocab,
                    "df": df.astype(np.int32),
                    "cf": cf,
                    "idf": idf,
                }
            ),
            "doc_rows": pd.DataFrame(
                {
                    "index_id": index_id,
                    "doc_row": np.arange(len(doc_ids), dtype=np.int32),
                    "doc_id": doc_ids,
                    "length": np.asarray(counts.sum(axis=1)).ravel(),
                }
            ),
            "doc_terms": pd.DataFrame(
                {
                    "index_id": index_id,
                    "doc_row": coo.row.astype(np.int32),
                    "term_id": coo.col.astype(np.int32),
                    "count": counts.tocoo().data,
                    "weight": coo.data,
                }
            ),
        }
        for name, data in tables.items():
            conn.register("index_df", data)
            conn.execute(f"INSERT INTO {name} SELECT * FROM index_df")
            conn.unregister("index_df")
        run(conn, "index_make_current", {"index_id": index_id})
        run(conn, "index_retire_others")
    return index_id, False


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
    matrix = sp.csr_matrix(
        (
            vec["weight"].astype(np.float64),
            (vec["doc_row"].astype(np.int64), vec["term_id"].astype(np.int64)),
        ),
        shape=(int(n_docs), int(n_terms)),
    )
    matrix.sort_indices()
    return Index(
        index_id,
        IndexSettings.from_json(settings_json),
        docs["doc_id"].to_numpy(object),
        pd.Index(terms["term"].astype(object)),
        terms["idf"].to_numpy(np.float64),
        terms["df"].to_numpy(np.int64),
        matrix,
    )
