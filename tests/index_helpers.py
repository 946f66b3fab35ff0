"""An in-memory index of a few pages for tests (no workspace): the index stage's formulas."""

from __future__ import annotations

import pandas as pd

from querygap.indexing import Index, IndexSettings, field_counts
from querygap.weighting import document_frequency, page_weights


def index_of_pages(pages: pd.DataFrame, settings: IndexSettings | None = None) -> Index:
    """The index of ``pages`` (columns doc_id, title, headings, body)."""
    settings = settings or IndexSettings()
    counts, vocab = field_counts(pages, settings)
    vectors, idf = page_weights(counts, settings.weighting)
    return Index(
        "test",
        settings,
        pages["doc_id"].to_numpy(object),
        pd.Index(vocab),
        idf,
        document_frequency(counts),
        vectors,
    )
