"""Content gaps of the proposal stage: unknown terms no fix covers, grouped into topics.

Pure computation on frames (see :mod:`querygap.proposals` for when a term is a gap).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import scipy.sparse as sp
from scipy.sparse.csgraph import connected_components

from querygap.group_text import joined_runs
from querygap.proposal_settings import ProposalSettings


def _stop_words() -> frozenset[str]:
    from sklearn.feature_extraction.text import ENGLISH_STOP_WORDS

    return frozenset(ENGLISH_STOP_WORDS)


def gap_terms(eligible: pd.DataFrame, covered: set[str], settings: ProposalSettings) -> pd.Series:
    """Eligible terms that may be content gaps: no page has them (df = 0), searched at least
    ``min_gap_searches`` times, with a letter, not a stop word, and no fix covers them."""
    return eligible[
        (eligible["df"] == 0)
        & (eligible["searches"] >= settings.min_gap_searches)
        & eligible["term"].str.contains(r"[^\W\d_]", regex=True)
        & ~eligible["term"].isin(covered)
        & ~eligible["term"].isin(_stop_words())
    ]["term"]


def topic_confidence(topics: pd.DataFrame, best_conf: pd.Series) -> pd.Series:
    """``1 - c`` per topic, ``c`` the highest confidence of any candidate fix of its terms
    (0 when none), rounded to 4 places: how sure we are that no near-miss word fixes it."""
    words = topics["terms"].str.split(" ").explode()
    conf = pd.Series(best_conf.reindex(words.to_numpy()).fillna(0).to_numpy(), index=words.index)
    closest = conf.groupby(level=0).max().reindex(topics.index).fillna(0)
    return (1 - closest).round(4)


def gap_topics(
    failing_terms: pd.DataFrame, gap_terms: pd.Index
) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Group gap terms that occur in the same failing queries into topics.

    Two gap terms are in one topic when a chain of failing queries links them (connected
    components of the term-term co-occurrence graph). A topic is named by the gap terms of its most
    searched query, in query order.

    Returns
    -------
    (topics, topic_queries): topics has topic, term (the name), terms, searches, queries;
    topic_queries has topic, query, example, searches.
    """
    rows = failing_terms[failing_terms["term"].isin(gap_terms)]
    if rows.empty:
        return (
            pd.DataFrame(columns=["topic", "term", "terms", "searches", "queries"]),
            pd.DataFrame(columns=["topic", "query", "example", "searches"]),
        )
    qcodes, qs = pd.factorize(rows["query"])
    tcodes, ts = pd.factorize(rows["term"])
    incidence = sp.csr_matrix((np.ones(len(rows)), (qcodes, tcodes)), shape=(len(qs), len(ts)))
    _, label = connected_components(incidence.T @ incidence, directed=False)
    rows = rows.assign(topic=label[tcodes])
    per_query = rows.drop_duplicates(["topic", "query"])[["topic", "query", "example", "searches"]]
    per_query = per_query.sort_values(["topic", "searches", "query"], ascending=[True, False, True])
    head = per_query.groupby("topic").head(1)[["topic", "query"]]
    names = rows.merge(head, on=["topic", "query"])
    by_position = np.lexsort((names["position"].to_numpy(), names["topic"].to_numpy()))
    topics = per_query.groupby("topic").agg(searches=("searches", "sum"), queries=("query", "size"))
    topics["term"] = joined_runs(
        names["topic"].to_numpy()[by_position], names["term"].to_numpy(object)[by_position]
    )
    # Each topic's distinct terms in alphabetical order: term codes ranked by their text.
    texts = np.asarray(ts, dtype=object)
    rank = np.argsort(np.argsort(texts))
    pairs = np.unique(label[tcodes].astype(np.int64) * len(ts) + rank[tcodes])
    alphabetical = np.sort(texts)
    topics["terms"] = joined_runs(pairs // len(ts), alphabetical[pairs % len(ts)])
    return topics.reset_index(), per_query.reset_index(drop=True)
