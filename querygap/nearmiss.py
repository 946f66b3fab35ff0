"""Near-miss candidates for terms the content lacks: spelling, variant forms, reformulations.

Pure computation on arrays and frames; the proposal stage (:mod:`querygap.proposals`) reads the
tables and decides what to propose.

Spelling distance is the restricted Damerau-Levenshtein distance (optimal string alignment): the
fewest insertions, deletions, substitutions and transpositions of two adjacent letters, no
substring edited twice (Damerau, CACM 7(3), 1964: one such edit covers most misspellings). The
limit grows with the word's length: none below 3 letters, 1 edit for 3-5 letters, 2 for longer
words (common practice, no source).
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import pandas as pd
from rapidfuzz import process
from rapidfuzz.distance import OSA, Indel

from querygap.analyzer import english_stemmer
from querygap.edit_neighbours import candidate_pairs
from querygap.rescoring import _with_codes
from querygap.stats import signed_llr

#: Longest word that still gets no spelling candidate, and the longest that gets only one edit.
NO_EDITS_BELOW = 3
ONE_EDIT_UP_TO = 5
#: Shortest part of a split compound ("smartmeter" -> "smart meter").
MIN_PART = 3


def max_edits(lengths: np.ndarray) -> np.ndarray:
    """Edits allowed for words of the given lengths: 0 (< 3 letters), 1 (3-5), 2 (6 or more)."""
    lengths = np.asarray(lengths)
    return np.where(lengths < NO_EDITS_BELOW, 0, np.where(lengths <= ONE_EDIT_UP_TO, 1, 2))


def edit_distance(a: str, b: str) -> int:
    """Restricted Damerau-Levenshtein distance (optimal string alignment) between two words."""
    return int(OSA.distance(a, b))


def spelling_candidates(terms: Sequence[str], vocab: pd.DataFrame, limit: int = 5) -> pd.DataFrame:
    """Content terms within the allowed edit distance of each term, best first.

    Only the pairs that share a deletion key (:func:`querygap.edit_neighbours.candidate_pairs`,
    a superset of the pairs within the limit) get their distance computed
    (``rapidfuzz.process.cpdist``), so the cost grows with the near pairs, not with terms x
    content terms.

    Parameters
    ----------
    terms : sequence of str
        Terms to correct (unique or not; duplicates are dropped).
    vocab : DataFrame
        Columns ``term``, ``df`` (pages holding it) and ``ok_searches`` (searches of working
        queries holding it).
    limit : int, default=5
        Candidates kept per term.

    Returns
    -------
    DataFrame with columns term, suggestion, distance, allowed, df, ok_searches, rank; ranked per
    term by distance (fewer first), the same first letter, ok_searches and df (more first), the
    insertions + deletions between the two words (fewer first), then the suggestion.
    """
    columns = ["term", "suggestion", "distance", "allowed", "df", "ok_searches", "rank"]
    words = pd.unique(pd.Series(list(terms), dtype=object))
    words = words[pd.Series(words, dtype=object).str.fullmatch(r"[^\W\d_]+").to_numpy(bool)]
    allowed = max_edits(np.fromiter((len(w) for w in words), np.int64, len(words)))
    words, allowed = words[allowed > 0], allowed[allowed > 0]
    choices = vocab["term"].to_numpy(object)
    if not len(words) or not len(choices):
        return pd.DataFrame({c: [] for c in columns})
    # Only the pairs sharing a deletion key can be within the limit (querygap.edit_neighbours):
    # their exact distance is computed, never that of all word x content-term pairs.
    rows, cols = candidate_pairs(words, allowed, choices)
    dist = process.cpdist(words[rows], choices[cols], scorer=OSA.distance, workers=-1)
    near = (dist >= 1) & (dist <= allowed[rows])
    rows, cols = rows[near], cols[near]
    if not len(rows):
        return pd.DataFrame({c: [] for c in columns})
    found = pd.DataFrame(
        {
            "term": words[rows],
            "suggestion": choices[cols],
            "distance": dist[near].astype(np.int64),
            "allowed": allowed[rows],
            "df": vocab["df"].to_numpy()[cols],
            "ok_searches": vocab["ok_searches"].to_numpy()[cols],
        }
    )
    # Tie-breaks that need no data: typos seldom touch the first letter (from memory), and a
    # candidate sharing more letters in order (fewer insertions + deletions) is closer.
    found["first"] = found["term"].str[0] == found["suggestion"].str[0]
    found["indel"] = process.cpdist(
        found["term"].to_numpy(object), found["suggestion"].to_numpy(object), scorer=Indel.distance
    )
    found = found.sort_values(
        ["term", "distance", "first", "ok_searches", "df", "indel", "suggestion"],
        ascending=[True, True, False, False, False, True, True],
        kind="mergesort",
    )
    found["rank"] = found.groupby("term").cumcount() + 1
    return found[found["rank"] <= limit].reset_index(drop=True)[columns]


def stems(words: np.ndarray) -> np.ndarray:
    """Snowball English (Porter2) stems of many words in one call."""
    return np.asarray(english_stemmer().stemWords(list(words)), dtype=object)


def variant_candidates(terms: Sequence[str], vocab: pd.DataFrame) -> pd.DataFrame:
    """Variant forms the content uses: same Snowball stem (plural/singular and other endings), or
    a compound split into two content terms of at least ``MIN_PART`` letters.

    Returns
    -------
    DataFrame with columns term, suggestion, how ('same stem' or 'split'), df (of the suggestion,
    the smaller part's for a split).
    """
    words = pd.unique(pd.Series(list(terms), dtype=object))
    vocab_terms = vocab["term"].to_numpy(object)
    df_of = pd.Series(vocab["df"].to_numpy(), index=vocab_terms)
    empty = pd.DataFrame({"term": [], "suggestion": [], "how": [], "df": []})
    if not len(words) or not len(vocab_terms):
        return empty
    by_stem = pd.DataFrame({"stem": stems(vocab_terms), "suggestion": vocab_terms})
    mine = pd.DataFrame({"term": words, "stem": stems(words)})
    same = mine.merge(by_stem, on="stem")
    same = same[same["term"] != same["suggestion"]].assign(how="same stem")
    same["df"] = df_of.reindex(same["suggestion"]).to_numpy()

    alpha = pd.Series(words, dtype=object)
    alpha = alpha[alpha.str.fullmatch(r"[^\W\d_]+")]
    splits = []
    known = pd.Index(vocab_terms)
    for cut in range(MIN_PART, int(alpha.str.len().max() or 0) - MIN_PART + 1):
        left, right = alpha.str[:cut], alpha.str[cut:]
        ok = (known.get_indexer(left) >= 0) & (known.get_indexer(right) >= 0)
        ok &= (right.str.len() >= MIN_PART).to_numpy()
        if ok.any():
            splits.append(
                pd.DataFrame(
                    {
                        "term": alpha[ok].to_numpy(),
                        "suggestion": (left[ok] + " " + right[ok]).to_numpy(),
                        "how": "split",
                        "df": np.minimum(
                            df_of.reindex(left[ok]).to_numpy(), df_of.reindex(right[ok]).to_numpy()
                        ),
                    }
                )
            )
    out = pd.concat([same[["term", "suggestion", "how", "df"]], *splits], ignore_index=True)
    return out.sort_values(["term", "df", "suggestion"], ascending=[True, False, True]).reset_index(
        drop=True
    )


def join_candidates(sequences: pd.DataFrame, vocab: pd.DataFrame) -> pd.DataFrame:
    """Two adjacent query terms the content writes as one word ("wi fi" -> "wifi").

    Parameters
    ----------
    sequences : DataFrame
        Columns ``row`` and ``term``, one row per analyzed term in query order (with the word
        codes of :func:`querygap.rescoring.sequences_of` when it made them: each distinct pair
        of adjacent terms is then joined and looked up once, not once per occurrence).

    Returns
    -------
    DataFrame with columns term ('a b'), suggestion ('ab'), how ('join'), df.
    """
    ready = "next_code" in sequences.columns and "words" in sequences.attrs
    if ready:
        seq = sequences
    else:
        seq = _with_codes(sequences.assign(pos=sequences.groupby("row").cumcount()))
    words = seq.attrs["words"].to_numpy(object)
    first, second = seq["term_code"].to_numpy(np.int64), seq["next_code"].to_numpy(np.int64)
    # Each distinct adjacent pair once, in order of first occurrence (code 0: end of query).
    key = pd.unique(first[second > 0] * len(words) + second[second > 0])
    a, b = words[key // len(words)], words[key % len(words)]
    joined = a + b
    known = pd.Index(vocab["term"].to_numpy(object))
    hit = known.get_indexer(joined) >= 0
    out = pd.DataFrame(
        {"term": a[hit] + " " + b[hit], "suggestion": joined[hit], "how": "join"}
    ).drop_duplicates()
    df_of = pd.Series(vocab["df"].to_numpy(), index=known)
    out["df"] = df_of.reindex(out["suggestion"]).to_numpy()
    return out.reset_index(drop=True)


def substitution_scores(subs: pd.DataFrame) -> pd.DataFrame:
    """Dunning's G^2 of each term substitution seen in consecutive query pairs.

    For the pairs of queries that differ in exactly one term (``term_from`` replaced by
    ``term_to``, ``pairs`` times), the 2x2 table of a -> b is (Jones, Rey, Madani & Greiner,
    WWW 2006, with Dunning, 1993)::

        k11 = n(a -> b)              k12 = n(a -> not b)
        k21 = n(not a -> b)          k22 = N - k11 - k12 - k21

    with N all substitution pairs. ``g2`` is the signed G^2 (negative when a -> b is rarer than
    chance).

    Returns
    -------
    DataFrame with columns term_from, term_to, n_ab, n_a, n_b, total, g2.
    """
    pairs = subs.groupby(["term_from", "term_to"], as_index=False)["pairs"].sum()
    pairs = pairs.rename(columns={"pairs": "n_ab"})
    total = int(pairs["n_ab"].sum())
    pairs["n_a"] = pairs.groupby("term_from")["n_ab"].transform("sum")
    pairs["n_b"] = pairs.groupby("term_to")["n_ab"].transform("sum")
    pairs["total"] = total
    k11 = pairs["n_ab"].to_numpy(float)
    k12 = pairs["n_a"].to_numpy(float) - k11
    k21 = pairs["n_b"].to_numpy(float) - k11
    k22 = total - k11 - k12 - k21
    pairs["g2"] = signed_llr(k11, k12, k21, k22) if len(pairs) else np.empty(0)
    return pairs
