"""Re-scoring of candidate fixes: each candidate applied to the failing queries holding its term.

Pure computation. A candidate (``term`` -> ``suggestion``) touches the failing queries whose
analyzed terms hold ``term`` (both words, adjacent, for a two-word term). Its ``searches`` and
``queries`` are the searches and the number of those queries; its ``rescued`` are the searches of
the touched queries whose rewritten form (the term replaced in the analyzed query) is ok under
the review's thresholds. Each distinct rewritten query is scored once, however many candidates
produce it, so the cost grows with the distinct rewritten queries of the candidates asked for;
only its status is computed (:func:`querygap.scoring.ok_terms`), not its top pages.

The rewritten queries are never written out and analyzed again: they are built as word codes
(the query's terms, the replaced ones swapped for the suggestion's words, which are terms
already), counted per query and scored from the counts. For the analyzer's default settings this
is the same as analyzing the rewritten text (:func:`rewrite`; a test compares the two), and
with stemming it does not stem the stems a second time.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
import pandas as pd

from querygap.analyzer import _distinct, _ranks, analyze_series
from querygap.indexing import Index
from querygap.lookup import positions
from querygap.scoring import is_ok, ok_terms, terms_of_counts


def status_of(scores: pd.DataFrame, min_score: float, min_coverage: float) -> pd.Series:
    """The flag stage's rule (sql/review.sql review_flag) applied to re-scored queries."""
    zero = scores["n_known"].to_numpy() == 0
    ok = is_ok(
        scores["n_known"].to_numpy(),
        scores["best_score"].to_numpy(),
        scores["coverage"].to_numpy(),
        min_score,
        min_coverage,
    )
    return pd.Series(np.where(zero, "zero", np.where(ok, "ok", "low")), index=scores.index)


def sequences_of(queries: pd.Series, index: Index) -> pd.DataFrame:
    """The analyzed queries as ``row``, ``pos`` and ``term``, terms in query order (with the
    word codes the joins below use, made once here rather than at every call)."""
    occ = analyze_series(queries.reset_index(drop=True), index.settings.analyzer)
    occ["pos"] = occ.groupby("row").cumcount()
    return _with_codes(occ)


def _with_codes(sequences: pd.DataFrame) -> pd.DataFrame:
    """``sequences`` with ``term_code``/``next_code``: positions in ``attrs["words"]``, the
    distinct terms after ``""`` (code 0, the empty word) in order of first occurrence, of the
    term and of the following term of the same query (0 at the end), and ``repeats``: True on
    every term of a query that holds some term more than once. One factorization of the terms
    (a hash pass over the strings); the following term's code is then a shift of integers."""
    seq = sequences[["row", "pos", "term"]].reset_index(drop=True)
    seq["term"] = seq["term"].astype(object)  # an empty frame may come back float-typed
    codes, uniques = pd.factorize(np.concatenate([[""], seq["term"].to_numpy(object)]))
    words = pd.Index(np.asarray(uniques, dtype=object), dtype=object)
    term_code = codes[1:].astype(np.int64)
    rows = seq["row"].to_numpy(np.int64)
    same_query = np.zeros(rows.size, bool)
    same_query[:-1] = rows[1:] == rows[:-1]
    next_code = np.zeros(rows.size, np.int64)
    next_code[:-1] = term_code[1:]
    seq["term_code"] = term_code
    seq["next_code"] = np.where(same_query, next_code, 0)
    key = np.sort(rows * len(words) + term_code)
    again = key[1:][key[1:] == key[:-1]] // len(words)
    seq["repeats"] = np.isin(rows, again)
    seq.attrs["words"] = words
    return seq


def _prepared(
    sequences: pd.DataFrame, candidates: pd.DataFrame
) -> tuple[pd.DataFrame, pd.DataFrame]:
    """The sequences and candidates with their words as integer codes of one vocabulary, so
    the joins below compare integers; a candidate word no query has gets -1 (matches none)."""
    ready = "repeats" in sequences.columns and "words" in sequences.attrs
    seq = sequences if ready else _with_codes(sequences)
    words = seq.attrs["words"]
    cand = candidates[["cand", "term", "suggestion"]].copy()
    cand["term"] = cand["term"].astype(object)
    parts = cand["term"].str.split(" ", n=1, expand=True).reindex(columns=[0, 1])
    cand["first"] = parts[0].astype(object)
    cand["second"] = parts[1].astype(object).fillna("")
    cand["first_code"] = words.get_indexer(cand["first"].to_numpy(object))
    cand["second_code"] = words.get_indexer(cand["second"].to_numpy(object))
    return seq, cand


def _pairs(seq: pd.DataFrame, cand: pd.DataFrame) -> pd.DataFrame:
    """The distinct (cand, row) of each candidate and the queries holding its term.

    Index arithmetic over the word codes, so the millions of pairs of a large review never
    pass through a pandas merge or hash table: the candidates sorted by first word, each term
    of a query finds those starting with it by its code. Only queries holding a term twice can
    give a pair twice; only theirs are made distinct.
    """
    first = cand["first_code"].to_numpy(np.int64)
    second = cand["second_code"].to_numpy(np.int64)
    term = seq["term_code"].to_numpy(np.int64)
    n_codes = len(seq.attrs["words"])
    usable = np.flatnonzero(first >= 0)
    by_first = usable[np.argsort(first[usable], kind="stable")]
    per_code = np.bincount(first[usable], minlength=n_codes)
    n_hits = per_code[term]
    lo = (np.cumsum(per_code) - per_code)[term]
    entry = np.repeat(np.arange(term.size), n_hits)
    at_cand = by_first[np.repeat(lo, n_hits) + _ranks(n_hits)]
    nxt = seq["next_code"].to_numpy(np.int64)[entry]
    both = (second[at_cand] == 0) | (second[at_cand] == nxt)
    entry, at_cand = entry[both], at_cand[both]
    rows = seq["row"].to_numpy(np.int64)[entry]
    twice = seq["repeats"].to_numpy(bool)[entry]
    if twice.any():
        n_rows = int(rows.max()) + 1
        key = _distinct(at_cand[twice] * n_rows + rows[twice])
        at_cand = np.concatenate([at_cand[~twice], key // n_rows])
        rows = np.concatenate([rows[~twice], key % n_rows])
    return pd.DataFrame({"cand": cand["cand"].to_numpy()[at_cand], "row": rows})


def affected_rows(sequences: pd.DataFrame, candidates: pd.DataFrame) -> pd.DataFrame:
    """The (cand, row) pairs of each candidate and the queries holding its term."""
    return _pairs(*_prepared(sequences, candidates)).reset_index(drop=True)


def rewrite(sequences: pd.DataFrame, candidates: pd.DataFrame) -> pd.DataFrame:
    """Apply each candidate to each query holding its term, in the analyzed term sequence.

    Parameters
    ----------
    sequences : DataFrame
        ``row`` (query), ``pos`` and ``term``: the analyzed queries, terms in order.
    candidates : DataFrame
        ``cand`` (id), ``term`` (one word, or two for a join) and ``suggestion``.

    Returns
    -------
    DataFrame with columns cand, row, rewritten (the terms joined by spaces).
    """
    seq, cand = _prepared(sequences, candidates)
    return _rewritten(seq, cand, _pairs(seq, cand))


def _rewritten(seq: pd.DataFrame, cand: pd.DataFrame, pairs: pd.DataFrame) -> pd.DataFrame:
    """The rewritten query of each (cand, row) pair of ``pairs`` (see :func:`rewrite`)."""
    full = (
        pairs[["cand", "row"]]
        .merge(seq[["row", "pos", "term", "term_code", "next_code"]], on="row")
        .merge(cand[["cand", "first_code", "second_code", "suggestion"]], on="cand")
    )
    full = full.sort_values(["cand", "row", "pos"], kind="mergesort")
    term, first, second = (full[c].to_numpy() for c in ("term_code", "first_code", "second_code"))
    same = np.r_[False, (full["row"].to_numpy()[1:] == full["row"].to_numpy()[:-1])]
    same &= np.r_[False, full["cand"].to_numpy()[1:] == full["cand"].to_numpy()[:-1]]
    prev = np.where(same, np.r_[0, term[:-1]], 0)  # 0: the empty word
    is_first = (term == first) & ((second == 0) | (full["next_code"].to_numpy() == second))
    is_second = (second != 0) & (term == second) & (prev == first)
    full["out"] = np.where(is_first, full["suggestion"], np.where(is_second, "", full["term"]))
    full = full[full["out"] != ""]
    # The rows are sorted by (cand, row, pos): join each group's terms with one C-level
    # reduction over object strings (no per-group pandas work).
    cand_ids, row_ids = full["cand"].to_numpy(), full["row"].to_numpy()
    if not len(full):
        return pd.DataFrame({"cand": cand_ids, "row": row_ids, "rewritten": np.empty(0, object)})
    starts = np.flatnonzero(
        np.r_[True, (cand_ids[1:] != cand_ids[:-1]) | (row_ids[1:] != row_ids[:-1])]
    )
    words = full["out"].to_numpy(dtype=object) + " "
    joined = pd.Series(np.add.reduceat(words, starts), dtype=object).str.slice(0, -1)
    return pd.DataFrame(
        {"cand": cand_ids[starts], "row": row_ids[starts], "rewritten": joined.to_numpy()}
    )


def volume(
    sequences: pd.DataFrame,
    candidates: pd.DataFrame,
    searches: np.ndarray,
    pairs: pd.DataFrame | None = None,
) -> pd.DataFrame:
    """Searches and queries each candidate touches (no scoring), indexed by ``cand``.

    ``searches[row]`` is the searches of failing query ``row``; ``pairs``, when given, is
    :func:`affected_rows` of the same sequences and candidates, made once for several uses.
    """
    pairs = affected_rows(sequences, candidates) if pairs is None else pairs[["cand", "row"]]
    pairs["searches"] = np.asarray(searches)[pairs["row"].to_numpy()]
    agg = pairs.groupby("cand").agg(searches=("searches", "sum"), queries=("row", "size"))
    return agg.reindex(candidates["cand"].to_numpy(), fill_value=0).astype(np.int64)


def rescued_searches(
    sequences: pd.DataFrame,
    candidates: pd.DataFrame,
    searches: np.ndarray,
    index: Index,
    min_score: float,
    min_coverage: float,
) -> pd.Series:
    """Searches each candidate rescues, indexed by ``cand``: the searches of its rewritten
    queries that score ok; every distinct rewritten query is scored once."""
    seq, cand = _prepared(sequences, candidates)
    pairs = _pairs(seq, cand)
    ok = ok_rewrites(seq, cand, pairs, index, min_score, min_coverage)
    got = np.where(ok, np.asarray(searches)[pairs["row"].to_numpy()], 0)
    rescued = pd.Series(got, dtype=np.int64).groupby(pairs["cand"].to_numpy()).sum()
    return rescued.reindex(candidates["cand"].to_numpy(), fill_value=0).astype(np.int64)


def _suggestion_codes(
    cand: pd.DataFrame, seq: pd.DataFrame, index: Index
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Each candidate's suggestion as word codes: (start of each candidate's words, with one
    more at the end; the codes; the index column of every code, -1 for a word no page has).

    Codes below ``len(seq.attrs["words"])`` are the queries' words; a suggestion word no query
    has gets a code after them. The words' index columns are looked up once per sequences
    and index (kept in ``seq.attrs``), not at every round.
    """
    words = seq.attrs["words"]
    known = seq.attrs.setdefault("term_of", {})
    if index.index_id not in known:
        known[index.index_id] = index.terms.get_indexer(words.to_numpy(object))
    parts = cand["suggestion"].astype(object).reset_index(drop=True).str.split(" ").explode()
    used = parts.notna().to_numpy() & (parts.to_numpy(object) != "")
    flat = parts.to_numpy(object)[used]
    sizes = np.bincount(parts.index.to_numpy()[used], minlength=len(cand)).astype(np.int64)
    codes = words.get_indexer(flat).astype(np.int64)
    new, new_codes = pd.factorize(flat[codes < 0])
    codes[codes < 0] = len(words) + new
    term_of = np.concatenate(
        [known[index.index_id], index.terms.get_indexer(np.asarray(new_codes, dtype=object))]
    )
    return np.r_[0, np.cumsum(sizes)], codes, term_of


@dataclass(frozen=True)
class RewriteCodes:
    """The arrays every wave of :func:`ok_rewrites` reads, made once per sequences, candidates
    and index (:func:`rewrite_codes`): the suggestions as codes (:func:`_suggestion_codes`),
    the candidates' word codes, and each query's terms as codes with its start and length."""

    sugg_ptr: np.ndarray
    sugg_codes: np.ndarray
    term_of: np.ndarray
    cand_ids: np.ndarray
    first: np.ndarray
    second: np.ndarray
    term_code: np.ndarray
    next_code: np.ndarray
    start: np.ndarray
    length: np.ndarray


def rewrite_codes(seq: pd.DataFrame, cand: pd.DataFrame, index: Index) -> RewriteCodes:
    """The :class:`RewriteCodes` of ``seq`` and ``cand`` as made by :func:`_prepared`."""
    sugg_ptr, sugg_codes, term_of = _suggestion_codes(cand, seq, index)
    seq_row = seq["row"].to_numpy(np.int64)
    length = np.bincount(seq_row, minlength=int(seq_row.max()) + 1 if seq_row.size else 0)
    return RewriteCodes(
        sugg_ptr,
        sugg_codes,
        term_of,
        cand["cand"].to_numpy(),
        cand["first_code"].to_numpy(np.int64),
        cand["second_code"].to_numpy(np.int64),
        seq["term_code"].to_numpy(np.int64),
        seq["next_code"].to_numpy(np.int64),
        np.cumsum(length) - length,
        length,
    )


def ok_rewrites(
    seq: pd.DataFrame,
    cand: pd.DataFrame,
    pairs: pd.DataFrame,
    index: Index,
    min_score: float,
    min_coverage: float,
    codes: RewriteCodes | None = None,
) -> np.ndarray:
    """Whether each (cand, row) of ``pairs`` is ok once rewritten (see :func:`rewrite`).

    ``seq`` and ``cand`` as made by :func:`_prepared`. The rewritten query of pair p is, in
    word codes: the terms of query ``row`` with each occurrence of the candidate's term (both
    words, adjacent, for a two-word term) replaced by the suggestion's words. Its distinct words
    are counted and the pairs whose counts are equal share one re-scoring. ``codes``, when
    given, is :func:`rewrite_codes` of the same ``seq``, ``cand`` and ``index``, made once for
    many calls.
    """
    n_pairs = len(pairs)
    if not n_pairs:
        return np.zeros(0, bool)
    c = codes or rewrite_codes(seq, cand, index)
    sugg_ptr, sugg_codes, term_of = c.sugg_ptr, c.sugg_codes, c.term_of
    term_code, next_code, start, length = c.term_code, c.next_code, c.start, c.length
    row = pairs["row"].to_numpy(np.int64)
    at_cand = positions(c.cand_ids, pairs["cand"].to_numpy())
    # One entry per (pair, position of its query): the query's terms in order.
    sizes = length[row]
    pair_of = np.repeat(np.arange(n_pairs), sizes)
    offset = _ranks(sizes)
    at = np.repeat(start[row], sizes) + offset
    term, nxt = term_code[at], next_code[at]
    first = c.first[at_cand][pair_of]
    second = c.second[at_cand][pair_of]
    prev = np.where(offset > 0, term_code[at - 1], 0)
    is_first = (term == first) & ((second == 0) | (nxt == second))
    is_second = (second != 0) & (term == second) & (prev == first)
    # Replaced occurrences give the suggestion's words; the others stay.
    swap = np.flatnonzero(is_first)
    swap_cand = at_cand[pair_of[swap]]
    n_words = np.diff(sugg_ptr)[swap_cand]
    kept = ~is_first & ~is_second
    words_pair = np.concatenate([pair_of[kept], np.repeat(pair_of[swap], n_words)])
    words_code = np.concatenate(
        [term[kept], sugg_codes[np.repeat(sugg_ptr[swap_cand], n_words) + _ranks(n_words)]]
    )
    # Distinct words per rewritten query, with their counts, sorted by pair then word.
    n_codes = len(term_of)
    key, count = np.unique(words_pair * n_codes + words_code, return_counts=True)
    entry_pair, entry_code = key // n_codes, key % n_codes
    query_of, is_rep = _same_counts(entry_pair, entry_code, count, n_pairs)
    rep = is_rep[entry_pair]
    ok = ok_terms(
        terms_of_counts(
            query_of[entry_pair[rep]],
            term_of[entry_code[rep]],
            entry_code[rep],
            count[rep],
            int(query_of.max()) + 1,
            index,
        ),
        index,
        min_score,
        min_coverage,
    )
    return ok[query_of]


_MIX = (np.uint64(0x9E3779B97F4A7C15), np.uint64(0xC2B2AE3D27D4EB4F))


def _same_counts(
    entry_pair: np.ndarray, entry_code: np.ndarray, count: np.ndarray, n_pairs: int
) -> tuple[np.ndarray, np.ndarray]:
    """Number the distinct word counts of ``n_pairs`` rewritten queries: (query of each pair,
    True for the first pair of each query).

    Entries are (pair, word code, count), sorted by pair then code. Pairs are grouped by a
    128-bit hash of their entries, then every pair is compared entry by entry with the first
    of its group; one that differs (a hash collision) gets a query of its own, so equal counts
    are the only thing ever shared.
    """
    sizes = np.bincount(entry_pair, minlength=n_pairs)
    starts = np.cumsum(sizes) - sizes
    value = (entry_code.astype(np.uint64) << np.uint64(20)) ^ count.astype(np.uint64)
    hashes = []
    with np.errstate(over="ignore"):
        for mix in _MIX:
            h = value * mix
            h ^= h >> np.uint64(29)
            h *= mix
            per = np.zeros(n_pairs, np.uint64)
            if h.size:
                per[sizes > 0] = np.add.reduceat(h, starts[sizes > 0])
            hashes.append(per)
    keys = np.stack([hashes[0], hashes[1], sizes.astype(np.uint64)], axis=1)
    _, first_of, query_of = np.unique(keys, axis=0, return_index=True, return_inverse=True)
    query_of = query_of.ravel().astype(np.int64)
    rep = first_of[query_of]  # the first pair of each pair's group
    other = np.repeat(starts[rep], sizes) + _ranks(sizes)
    differs = (entry_code != entry_code[other]) | (count != count[other])
    bad = np.flatnonzero(np.bincount(entry_pair[differs], minlength=n_pairs) > 0)
    query_of[bad] = len(first_of) + np.arange(bad.size)
    is_rep = np.zeros(n_pairs, bool)
    is_rep[first_of] = True
    is_rep[bad] = True
    return query_of, is_rep


def measure(
    candidates: pd.DataFrame,
    failing: pd.DataFrame,
    index: Index,
    min_score: float,
    min_coverage: float,
) -> pd.DataFrame:
    """Searches, queries and rescued searches of every candidate, re-scoring in one batch.

    ``failing`` has one row per failing query (``query``, ``searches``). Returns ``candidates``
    with columns searches, queries, rescued added (0 for a candidate that touches no query).
    """
    queries = failing.reset_index(drop=True)
    occ = sequences_of(queries["query"], index)
    n = queries["searches"].to_numpy()
    out = candidates.copy()
    counts = volume(occ, candidates, n)
    out["searches"] = counts["searches"].to_numpy()
    out["queries"] = counts["queries"].to_numpy()
    out["rescued"] = rescued_searches(occ, candidates, n, index, min_score, min_coverage).to_numpy()
    return out


def rescued_unless_beaten(
    sequences: pd.DataFrame,
    candidates: pd.DataFrame,
    searches: np.ndarray,
    index: Index,
    min_score: float,
    min_coverage: float,
    can_matter: Callable[[np.ndarray, np.ndarray], np.ndarray],
    first: int = 16,
    pairs: pd.DataFrame | None = None,
) -> tuple[pd.Series, pd.Series]:
    """Rescued searches of each candidate, stopping early for a candidate that cannot matter.

    A candidate's queries are re-scored most searched first, in waves of ``first``, then twice
    as many, and so on. After each wave its rescued searches lie between ``found`` (the
    rescued so far) and ``found + left`` (``left`` the searches not yet re-scored);
    ``can_matter(cand_positions, found + left)`` says, per candidate, whether so many rescued
    searches could still change a result. A candidate that cannot is left with ``found``, a
    lower bound; every other one is re-scored to the end, so its figure is exact. ``pairs``,
    when given, is :func:`affected_rows` of ``sequences`` and these or more candidates (those of
    others are dropped), so rounds over parts of one candidate list find the pairs once.

    Returns
    -------
    (rescued, exact): both indexed by ``cand``; ``exact`` False where re-scoring stopped early.
    """
    seq, cand = _prepared(sequences, candidates)
    if pairs is None:
        pairs = _pairs(seq, cand)
    cand_ids = cand["cand"].to_numpy()
    pos_of = positions(cand_ids, pairs["cand"].to_numpy())
    row_of = pairs["row"].to_numpy(np.int64)
    if pos_of.size and pos_of.min() < 0:  # pairs of other candidates
        row_of, pos_of = row_of[pos_of >= 0], pos_of[pos_of >= 0]
    n_of = np.asarray(searches, np.int64)[row_of]
    # Each candidate's queries most searched first (then by row): rank 0, 1, ... within it;
    # then all pairs by rank, so each wave (a range of ranks) is one slice.
    by = np.lexsort((row_of, -n_of, pos_of))
    pos_of, row_of, n_of = pos_of[by], row_of[by], n_of[by]
    rank = _ranks(np.bincount(pos_of, minlength=len(cand)))
    by = np.argsort(rank, kind="stable")
    pos_of, row_of, n_of, rank = pos_of[by], row_of[by], n_of[by], rank[by]
    left = np.bincount(pos_of, weights=n_of, minlength=len(cand)).astype(np.int64)
    found = np.zeros(len(cand), np.int64)
    active = np.ones(len(cand), bool)
    lo, hi = 0, first
    codes = rewrite_codes(seq, cand, index)
    while active.any():
        a, b = np.searchsorted(rank, [lo, hi])
        at = a + np.flatnonzero(active[pos_of[a:b]])
        if not at.size:
            break
        pos, n = pos_of[at], n_of[at]
        part = pd.DataFrame({"cand": cand_ids[pos], "row": row_of[at]})
        ok = ok_rewrites(seq, cand, part, index, min_score, min_coverage, codes)
        found += np.bincount(pos, weights=np.where(ok, n, 0), minlength=len(cand)).astype(np.int64)
        left -= np.bincount(pos, weights=n, minlength=len(cand)).astype(np.int64)
        still = np.flatnonzero(active & (left > 0))
        active[:] = False
        active[still] = can_matter(still, found[still] + left[still])
        lo, hi = hi, hi + 2 * (hi - lo)
    ids = cand["cand"].to_numpy()
    return (
        pd.Series(found, index=ids, dtype=np.int64),
        pd.Series(left == 0, index=ids, dtype=bool),
    )
