"""Cluster stage: group a review's failing queries that mean the same thing.

Reads ``review_queries`` (zero and low queries), ``query_terms`` and ``searches``; writes
``clusters`` and ``cluster_members`` for one review (a rerun replaces them).

Method. Failing queries are the nodes of a graph; a cluster is a connected component
(``scipy.sparse.csgraph.connected_components``). Three kinds of edge, none of them needing a
comparison of every query with every other:

1. **Same key term.** A query's key term is its unmatched term (one its best page lacks) with the
   most failing searches across the review (ties: lower df, then alphabetical). Queries that share
   a key term are joined: "sewer", "sewer smell" and "blocked sewer" all fail on "sewer". Taking one
   term per query keeps a query with two unmatched terms from bridging two topics.
2. **Spelling variants of key terms.** Two key terms are joined when their optimal string
   alignment distance (Damerau, CACM 1964: insertion, deletion, substitution or transposition of
   adjacent letters) is within the limit of the shorter term: none below 3 letters, 1 for 3 to 5, 2
   for longer (common practice, no source). Candidates come from deletion neighbourhoods: two terms
   within distance d share a string obtained from each by at most d deletions, so only terms
   sharing such a string are compared (each string as a 64-bit hash,
   :mod:`querygap.edit_neighbours`). A deletion string shared by more than ``max_block`` terms is
   not used (it is a short string, shared by words that are no typos of one another).
3. **Similar text.** Character 3-grams within words (as scikit-learn's ``TfidfVectorizer`` with
   ``analyzer='char_wb'`` forms them, computed here with sparse products) weighted by tf-idf,
   rows of unit length, so a dot product is the cosine;
   pairs with cosine >= ``min_cosine`` are joined if they also agree on their key terms (see
   :func:`consistent_pairs`). Word order does not change these grams, so "water meter reading"
   meets "reading water meter". A gram found in more than ``gram_cap`` failing queries is left
   out (it belongs to words many queries share; the similarity is then the cosine over the
   remaining grams). Every gram then pairs at most ``gram_cap`` queries, so the pairs computed
   are at most gram_cap x (non-zeros of the gram matrix): linear in n, instead of n^2 / 2.
"""

from __future__ import annotations

import json
from dataclasses import dataclass, field

import duckdb
import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc
from rapidfuzz.distance import OSA
from rapidfuzz.process import cpdist
from scipy import sparse
from scipy.sparse.csgraph import connected_components

from querygap.analyzer import _distinct, _ranks
from querygap.edit_neighbours import deletion_keys
from querygap.errors import ConfigError
from querygap.windows import Window
from querygap.workspace import frame, run

EXAMPLES = 5
TERMS = 5


@dataclass(frozen=True)
class ClusterSettings:
    """Thresholds of the cluster stage.

    Parameters
    ----------
    min_cosine : float, default=0.7
        Lowest character 3-gram cosine that joins two queries (chosen on the demo data: at 0.7
        word-order changes and one-letter typos in a two-word query join, "water bill bitcoin"
        and "water meter" do not).
    max_block : int, default=50
        Largest group of key terms sharing one deletion string that is compared pairwise.
    gram_cap : int, default=100
        A 3-gram found in more than this many failing queries is left out of the similarity: it
        comes from words common to many queries, and without a cap the pairs sharing it grow as
        n^2 (common practice, no source; 100 keeps every gram of the demo's rarer words).
    chunk_rows : int, default=1024
        Rows per block of the similarity product (bounds memory).
    """

    min_cosine: float = 0.7
    max_block: int = 50
    gram_cap: int = 100
    chunk_rows: int = 1024


def validate_clusters(settings: ClusterSettings) -> ClusterSettings:
    if not 0.0 < settings.min_cosine <= 1.0:
        raise ConfigError(
            f"--cluster-cosine must be above 0 and at most 1; got {settings.min_cosine}"
        )
    if settings.max_block < 2 or settings.chunk_rows < 1 or settings.gram_cap < 2:
        raise ConfigError("max_block and gram_cap must be at least 2 and chunk_rows at least 1")
    return settings


@dataclass
class Clustering:
    """The cluster of each query (0-based, most searched cluster first) and work counters."""

    labels: np.ndarray
    key_terms: np.ndarray  # object array; None where the query has no unmatched term
    counts: dict[str, int] = field(default_factory=dict)


def edit_limit(length: np.ndarray) -> np.ndarray:
    """Edits allowed for a term of ``length`` letters: 0 below 3, 1 for 3-5, 2 from 6 on."""
    return np.select([length < 3, length < 6], [0, 1], 2)


def key_terms(n_queries: int, searches: np.ndarray, terms: pd.DataFrame) -> np.ndarray:
    """Pick each query's key term: its unmatched term with the most failing searches.

    ``terms`` has columns qi (query row), term, df (a property of the term: the index's). Ties
    go to the lower df, then alphabetical. That order is one over the terms, so each term gets
    its rank once and each query keeps its least rank: no sort of the (query, term) rows, which
    took 2-4 s of 2M rows at size M.
    """
    keys = np.full(n_queries, None, dtype=object)
    if terms.empty:
        return keys
    codes, names = pd.factorize(terms["term"], sort=True)  # codes rise as the terms do
    n_codes = len(names)
    pair = _distinct(terms["qi"].to_numpy(np.int64) * n_codes + codes)  # each (query, term) once
    qi, code = pair // n_codes, pair % n_codes
    volume = np.zeros(n_codes, np.int64)
    np.add.at(volume, code, np.asarray(searches, np.int64)[qi])
    df = np.full(n_codes, np.iinfo(np.int64).max)
    np.minimum.at(df, codes, terms["df"].to_numpy(np.int64))
    by_rank = np.lexsort((np.arange(n_codes), df, -volume))  # the term of each rank
    rank = np.empty(n_codes, np.int64)
    rank[by_rank] = np.arange(n_codes)
    best = np.full(n_queries, n_codes, np.int64)
    np.minimum.at(best, qi, rank[code])
    has = best < n_codes
    keys[has] = np.asarray(names, dtype=object)[by_rank[best[has]]]
    return keys


def deletion_keys_of(terms: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The deletion keys of each term with up to ``edit_limit(len)`` letters deleted (the term
    itself among them): 64-bit hashes of the remaining letters
    (:func:`querygap.edit_neighbours.deletion_keys`), as (key, term index) sorted by key then
    term, each pair once."""
    parts = list(deletion_keys(terms, edit_limit(_lengths(terms))))
    if not parts:
        return np.empty(0, np.uint64), np.empty(0, np.int64)
    key = np.concatenate([k for k, _, _ in parts])
    owner = np.concatenate([o for _, o, _ in parts]).astype(np.int64)
    order = np.lexsort((owner, key))
    key, owner = key[order], owner[order]
    first = np.r_[True, (key[1:] != key[:-1]) | (owner[1:] != owner[:-1])]
    return key[first], owner[first]


def _uncrowded(key: np.ndarray, owner: np.ndarray, max_block: int) -> tuple[np.ndarray, ...]:
    """The (key, owner) pairs of the keys that at most ``max_block`` terms share."""
    starts = np.flatnonzero(np.r_[True, key[1:] != key[:-1]])
    sizes = np.diff(np.r_[starts, key.size])
    keep = np.repeat(sizes <= max_block, sizes)
    return key[keep], owner[keep]


def pair_limit(length: np.ndarray) -> np.ndarray:
    """Edits allowed between two unmatched terms, by the shorter one's length: 0 below 3, 1 up to 7
    letters, 2 from 8 on. Stricter than :func:`edit_limit`, which compares a term with a word the
    content uses: two typos of one word differ by up to twice as much, and a loose limit between
    typos chains unrelated words ("latera" - "waterr") (chosen on the demo data)."""
    return np.select([length < 3, length < 8], [0, 1], 2)


def _lengths(terms: np.ndarray) -> np.ndarray:
    return np.fromiter((len(t) for t in terms), dtype=np.int64, count=len(terms))


def near_pairs(
    left: np.ndarray, right: np.ndarray | None, max_block: int
) -> tuple[np.ndarray, np.ndarray, np.ndarray, int]:
    """Candidate pairs of terms sharing a deletion string, with their OSA distance.

    With ``right`` None, pairs (a, b), a < b, within ``left``; else pairs (a in left, b in right).
    Returns a, b, distance and the number of candidates compared.
    """
    empty = np.empty(0, np.int64)
    other = left if right is None else right
    if len(left) == 0 or len(other) == 0:
        return empty, empty, empty, 0
    key_l, tid_l = _uncrowded(*deletion_keys_of(left), max_block)
    key_r, tid_r = (
        (key_l, tid_l) if right is None else _uncrowded(*deletion_keys_of(right), max_block)
    )
    # Every left key meets the right terms holding the same key (both sides sorted by key).
    lo = np.searchsorted(key_r, key_l, side="left")
    count = np.searchsorted(key_r, key_l, side="right") - lo
    a = np.repeat(tid_l, count)
    b = tid_r[np.repeat(lo, count) + _ranks(count)]
    if right is None:
        a, b = a[a < b], b[a < b]
    n_other = len(other)
    pair = _distinct(a * n_other + b)
    a, b = pair // n_other, pair % n_other
    if not len(a):
        return empty, empty, empty, 0
    dist = cpdist(left[a].tolist(), other[b].tolist(), scorer=OSA.distance, workers=-1)
    return a, b, np.asarray(dist, dtype=np.int64), len(a)


def spelling_pairs(terms: np.ndarray, max_block: int) -> tuple[np.ndarray, np.ndarray, int]:
    """Pairs (a, b), a < b, of unmatched terms within :func:`pair_limit`; and candidates seen."""
    a, b, dist, examined = near_pairs(terms, None, max_block)
    lengths = _lengths(terms)
    ok = dist <= pair_limit(np.minimum(lengths[a], lengths[b]))
    return a[ok], b[ok], examined


def nearest_words(
    terms: np.ndarray, vocabulary: pd.DataFrame, max_block: int
) -> tuple[np.ndarray, int]:
    """For each unmatched term, the content word it is most likely a typo of, or -1.

    A content word (``vocabulary``: columns term, df) qualifies within :func:`edit_limit` of the
    unmatched term; the closest wins, then the higher df, then the alphabetically first. Terms
    with the same nearest word are typos of one word: "accont" and "acount" both give "account".
    """
    best = np.full(len(terms), -1, np.int64)
    words = vocabulary["term"].to_numpy(object)
    words_ok = _lengths(words) >= 3 if len(words) else np.zeros(0, bool)
    a, b, dist, examined = near_pairs(terms, words, max_block)
    ok = (dist >= 1) & (dist <= edit_limit(_lengths(terms)[a])) & words_ok[b]
    if not ok.any():
        return best, examined
    a, b, dist = a[ok], b[ok], dist[ok]
    df = vocabulary["df"].to_numpy(np.int64)[b]
    used, at = np.unique(b, return_inverse=True)  # the words to rank, each once
    word_rank = pd.factorize(words[used], sort=True)[0][at]  # rises as the words do
    # Integer keys only: a frame sorted by its word column took 1.4 s at size M.
    order = np.lexsort((word_rank, -df, dist, a))
    a, b = a[order], b[order]
    head = np.r_[True, a[1:] != a[:-1]]
    best[a[head]] = b[head]
    return best, examined


def word_grams(words: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Character 3-grams of each word padded with one space each side, as scikit-learn's
    ``char_wb`` analyzer forms them.

    Returns (word index, gram index, gram texts): one pair per gram occurrence, so a gram seen
    twice in a word appears twice. The loop runs over unique words, not over queries.
    """
    rows: list[int] = []
    grams: list[str] = []
    for k, w in enumerate(words.tolist()):
        padded = f" {w} "
        found = [padded[i : i + 3] for i in range(len(padded) - 2)]
        rows.extend([k] * len(found))
        grams.extend(found)
    codes, uniques = pd.factorize(pd.Series(grams, dtype=object), sort=True)
    return np.asarray(rows, np.int64), codes.astype(np.int64), np.asarray(uniques, dtype=object)


def gram_matrix(texts: list[str], max_df: int) -> sparse.csr_matrix:
    """Unit-length tf-idf rows of character 3-grams within words (scikit-learn ``char_wb``).

    tf = occurrences of the gram in the text; idf = ln((1 + n) / (1 + df)) + 1 (smoothed, as
    scikit-learn's ``TfidfVectorizer`` default); rows scaled to unit l2 norm. Grams found in more
    than ``max_df`` texts are dropped before the rows are normalised (scikit-learn's ``max_df`` as
    a count). A row left with no gram is all zero. Counts are built as (text x word) @ (word x
    gram) sparse products, so the only Python loop is over unique words.
    """
    n = len(texts)
    # the words of every text at once (Arrow splits at runs of white space, as str.split()
    # does; the empty pieces around leading or trailing space are dropped)
    pieces = pc.utf8_split_whitespace(pa.array(texts, type=pa.large_string()))
    flat = pc.list_flatten(pieces)
    kept = pc.not_equal(flat, "")
    words = pc.filter(flat, kept).to_numpy(zero_copy_only=False)
    if not len(words):
        return sparse.csr_matrix((n, 0))
    rows = pc.filter(pc.list_parent_indices(pieces), kept).to_numpy()
    word_codes, unique_words = pd.factorize(words, sort=False)
    text_word = sparse.csr_matrix(
        (np.ones(len(word_codes)), (rows.astype(np.int64), word_codes)),
        shape=(n, len(unique_words)),
    )
    wi, gi, grams = word_grams(np.asarray(unique_words, dtype=object))
    word_gram = sparse.csr_matrix(
        (np.ones(len(wi)), (wi, gi)), shape=(len(unique_words), len(grams))
    )
    counts = (text_word @ word_gram).tocsc()
    df = np.diff(counts.indptr)
    keep = np.flatnonzero(df <= max_df)
    if not len(keep):
        return sparse.csr_matrix((n, 0))
    counts = counts[:, keep]
    idf = np.log((1.0 + n) / (1.0 + df[keep])) + 1.0
    x = (counts @ sparse.diags(idf)).tocsr()
    norms = np.sqrt(np.asarray(x.multiply(x).sum(axis=1)).ravel())
    scale = np.divide(1.0, norms, out=np.zeros_like(norms), where=norms > 0)
    x = sparse.diags(scale) @ x
    x.sort_indices()
    return x.tocsr()


def similar_pairs(
    x: sparse.csr_matrix, min_cosine: float, chunk_rows: int
) -> tuple[np.ndarray, np.ndarray, int]:
    """All pairs (i, j), i < j, of rows with x_i . x_j >= ``min_cosine``.

    Blocks of rows are multiplied with the whole matrix; only pairs sharing a gram are produced, so
    with every gram in at most ``max_df`` rows the work is at most ``max_df`` times the non-zeros
    of ``x``. Returns the pairs and the number of pairs whose cosine was computed.
    """
    n = x.shape[0]
    empty = np.empty(0, np.int64)
    if n < 2 or x.nnz == 0:
        return empty, empty, 0
    xt = x.T.tocsr()
    found_a, found_b, examined = [], [], 0
    for lo in range(0, n, chunk_rows):
        block = (x[lo : lo + chunk_rows] @ xt).tocoo()
        i = block.row.astype(np.int64) + lo
        j = block.col.astype(np.int64)
        upper = i < j
        examined += int(upper.sum())
        hit = upper & (block.data >= min_cosine - 1e-9)
        found_a.append(i[hit])
        found_b.append(j[hit])
    return np.concatenate(found_a), np.concatenate(found_b), examined


def consistent_pairs(
    queries: list[str], keys: np.ndarray, a: np.ndarray, b: np.ndarray
) -> np.ndarray:
    """Which text-similar pairs (a, b) also agree on their failing term.

    A pair agrees when each side's key term is absent or within :func:`edit_limit` of a word of the
    other side. Without this, a shared known word ("charges") would join "sewer charges" and
    "multi charges", which fail for different reasons.
    """
    if not len(a):
        return np.zeros(0, bool)
    words = pd.Series(queries, dtype=object).str.replace(r"[-']", "", regex=True).str.split()
    side = pd.DataFrame(
        {
            "pair": np.concatenate([np.arange(len(a)), np.arange(len(a))]),
            "key": np.concatenate([keys[a], keys[b]]),
            "words": np.concatenate([words.to_numpy(object)[b], words.to_numpy(object)[a]]),
        }
    )
    keyed = side[side["key"].notna()].explode("words").dropna(subset=["words"])
    dist = np.asarray(
        cpdist(keyed["key"].tolist(), keyed["words"].tolist(), scorer=OSA.distance, workers=-1)
    )
    near = dist <= edit_limit(_lengths(keyed["key"].to_numpy(object)))
    side_ok = pd.Series(near, index=keyed.index).groupby(level=0).any()
    ok = pd.Series(True, index=side.index)
    ok[side["key"].notna()] = False
    ok[side_ok.index] = side_ok
    return ok.groupby(side["pair"]).all().to_numpy(bool)


def _star_edges(nodes: np.ndarray, groups: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Edges joining each node to the first node of its group (groups given as codes >= 0)."""
    codes, uniq = pd.factorize(pd.Series(groups))
    _, first = np.unique(codes, return_index=True)
    return nodes, nodes[first][codes]


def cluster_queries(
    queries: list[str],
    searches: np.ndarray,
    terms: pd.DataFrame,
    settings: ClusterSettings | None = None,
    vocabulary: pd.DataFrame | None = None,
) -> Clustering:
    """Cluster failing ``queries`` (with their ``searches``) using their unmatched ``terms``.

    ``terms`` has columns qi (row in ``queries``), term, df; ``vocabulary`` (term, df) the content's
    words, used to join typos of one word (see :func:`nearest_words`). Labels are numbered by
    cluster volume, most searched first (ties: the cluster's alphabetically first query).
    """
    settings = validate_clusters(settings or ClusterSettings())
    n = len(queries)
    searches = np.asarray(searches, dtype=np.int64)
    keys = key_terms(n, searches, terms)
    has_key = np.flatnonzero(keys != None)  # noqa: E711  (element-wise comparison)
    codes, uniques = pd.factorize(pd.Series(keys[has_key], dtype=object))
    # One representative query per key term: edges of kind 1 join each query to it.
    _, first = np.unique(codes, return_index=True)
    rep = has_key[first]
    edges_a = [has_key, rep[codes]]
    key_array = np.asarray(uniques, dtype=object)
    sa, sb, spell_examined = spelling_pairs(key_array, settings.max_block)
    edges_b = [rep[sa], rep[sb]]
    vocab = vocabulary if vocabulary is not None else pd.DataFrame({"term": [], "df": []})
    pivot, pivot_examined = nearest_words(key_array, vocab, settings.max_block)
    with_pivot = np.flatnonzero(pivot >= 0)
    edges_c = _star_edges(rep[with_pivot], pivot[with_pivot])
    max_df = settings.gram_cap
    grams = gram_matrix(queries, max_df)
    ga, gb, gram_examined = similar_pairs(grams, settings.min_cosine, settings.chunk_rows)
    agree = consistent_pairs(queries, keys, ga, gb)
    ga, gb = ga[agree], gb[agree]
    src = np.concatenate([edges_a[0], edges_b[0], edges_c[0], ga]).astype(np.int64)
    dst = np.concatenate([edges_a[1], edges_b[1], edges_c[1], gb]).astype(np.int64)
    graph = sparse.coo_matrix((np.ones(len(src)), (src, dst)), shape=(n, n))
    _, comp = connected_components(graph, directed=False)
    volume = np.bincount(comp, weights=searches)
    first_query = (
        pd.Series(queries, dtype=object).groupby(comp).min().reindex(range(comp.max() + 1))
        if n
        else pd.Series(dtype=object)
    )
    order = np.lexsort((first_query.to_numpy(str), -volume)) if n else np.empty(0, np.int64)
    renumber = np.empty_like(order)
    renumber[order] = np.arange(len(order))
    counts = {
        "queries": n,
        "key_terms": len(uniques),
        "spelling_candidates": spell_examined,
        "spelling_edges": len(sa),
        "word_candidates": pivot_examined,
        "typos_of_a_word": len(with_pivot),
        "gram_cap": max_df,
        "gram_nonzeros": grams.nnz,
        "text_candidates": gram_examined,
        "text_edges": len(ga),
    }
    return Clustering(renumber[comp] if n else comp, keys, counts)


def summarize_clusters(
    queries: list[str], searches: np.ndarray, terms: pd.DataFrame, result: Clustering
) -> tuple[pd.DataFrame, pd.DataFrame]:
    """The clusters and cluster_members rows (cluster_id from 1) of a clustering."""
    members = pd.DataFrame(
        {
            "cluster_id": result.labels.astype(np.int64) + 1,
            "query": pd.Series(queries, dtype=object),
            "searches": np.asarray(searches, dtype=np.int64),
            "key_term": result.key_terms,
        }
    ).sort_values(["cluster_id", "searches", "query"], ascending=[True, False, True])
    grouped = members.groupby("cluster_id", sort=True)
    examples = grouped["query"].apply(lambda q: json.dumps(list(q[:EXAMPLES])))
    with_terms = terms.assign(cluster_id=result.labels[terms["qi"].to_numpy()] + 1)
    with_terms = with_terms.assign(searches=np.asarray(searches)[with_terms["qi"].to_numpy()])
    term_volume = (
        with_terms.groupby(["cluster_id", "term"], as_index=False)["searches"]
        .sum()
        .sort_values(["cluster_id", "searches", "term"], ascending=[True, False, True])
    )
    term_lists = term_volume.groupby("cluster_id")["term"].apply(
        lambda t: json.dumps(list(t[:TERMS]))
    )
    clusters = pd.DataFrame(
        {
            "label": grouped["query"].first(),
            "searches": grouped["searches"].sum(),
            "queries": grouped.size(),
            "examples": examples,
        }
    )
    clusters["terms"] = term_lists.reindex(clusters.index).fillna("[]")
    clusters = clusters.reset_index()
    return clusters, members


def run_clusters(
    conn: duckdb.DuckDBPyConnection,
    window: Window,
    index_id: str,
    settings: ClusterSettings | None = None,
) -> dict[str, int]:
    """Cluster a review's failing queries and store clusters and cluster_members; return counts."""
    review_id = window.review_id
    failing = frame(conn, "cluster_failing", {"review_id": review_id})
    unmatched = frame(conn, "cluster_unmatched", {"review_id": review_id, "index_id": index_id})
    vocabulary = frame(conn, "cluster_vocabulary", {"index_id": index_id})
    queries = failing["query"].tolist()
    position = pd.Series(np.arange(len(queries)), index=pd.Index(queries, dtype=object))
    terms = pd.DataFrame(
        {
            "qi": position.reindex(unmatched["query"]).to_numpy(np.int64),
            "term": unmatched["term"].to_numpy(object),
            "df": unmatched["df"].to_numpy(np.int64),
        }
    )
    searches = failing["searches"].to_numpy(np.int64)
    result = cluster_queries(queries, searches, terms, settings, vocabulary)
    clusters, members = summarize_clusters(queries, searches, terms, result)
    previous = window.previous()
    run(conn, "cluster_clear_members", {"review_id": review_id})
    run(conn, "cluster_clear", {"review_id": review_id})
    conn.register("cluster_members_df", members)
    conn.register("clusters_df", clusters)
    try:
        run(conn, "cluster_store_members", {"review_id": review_id})
        run(
            conn,
            "cluster_store",
            {"review_id": review_id, "prev_start": previous.start, "prev_end": previous.end},
        )
    finally:
        conn.unregister("cluster_members_df")
        conn.unregister("clusters_df")
    return {**result.counts, "clusters": len(clusters)}


def top_clusters(
    conn: duckdb.DuckDBPyConnection, review_id: str, limit: int | None = None
) -> pd.DataFrame:
    """The clusters of a review, most searched first, examples and terms as lists."""
    data = frame(conn, "cluster_list", {"review_id": review_id})
    if limit is not None:
        data = data.head(limit)
    for col in ("previous_searches", "change"):
        values = data[col].astype(object)
        data[col] = [None if pd.isna(v) else int(v) for v in values]
    data["examples"] = data["examples"].map(json.loads)
    data["terms"] = data["terms"].map(json.loads)
    return data
