"""Pairs of words that may be within a few edits, found through deletion keys (no all-pairs pass).

Pure computation on arrays. Two words within k edits (insertions, deletions, substitutions and
transpositions of two adjacent letters, no substring edited twice: the optimal string alignment
distance) become the same string when at most k letters are deleted from each: every edit costs
at most one deletion on each side (a substitution deletes the letter on both sides, an insertion
or deletion on one side, a transposition "ab"/"ba" deletes the same letter on both sides) and the
edits touch disjoint letters. This is the deletion-neighbourhood filter of Bocek, Hunt & Stiller,
"Fast Similarity Search in Large Dictionaries" (2007; cited from memory). So the pairs sharing a
*deletion key* (a word with up to k letters deleted) hold every pair within k edits; the caller
computes the exact distance of those pairs only.

A key is a 64-bit polynomial hash of the remaining code points, ``sum_m c_m * p_m mod 2**64``
with fixed random odd multipliers ``p``: a collision only adds a pair to check, never loses one.
The keys of a word of length L number ``1 + L + L (L - 1) / 2`` (up to 2 deletions), so the cost
grows with the words times their squared lengths, not with the product of the two word lists.
"""

from __future__ import annotations

from collections.abc import Iterator

import numpy as np

from querygap.analyzer import _distinct

#: Most deletions a key may have (the largest edit limit of the spelling candidates).
MAX_DELETIONS = 2
_SEED = 20250303
#: Slots of the bitmap that filters the choices' keys (a power of two; 16 MB).
_BITMAP = 1 << 24


def _codes(words: np.ndarray, width: int) -> np.ndarray:
    """Code points of the words as an (n, width) uint64 matrix, 0 after each word's end."""
    fixed = np.asarray(words, dtype=f"<U{max(width, 1)}")
    return fixed.view(np.uint32).reshape(len(fixed), max(width, 1)).astype(np.uint64)


def deletion_keys(
    words: np.ndarray, deletions: np.ndarray
) -> Iterator[tuple[np.ndarray, np.ndarray, int]]:
    """The keys of the words with at most ``deletions[i]`` letters deleted from word i, in chunks.

    Parameters
    ----------
    words : array of str
    deletions : array of int
        Deletions allowed per word (0, 1 or 2).

    Yields
    ------
    (key, word, deleted): uint64 hashes, the index of the word each came from, and the number of
    letters deleted (the same for the whole chunk). A word's key may repeat (deleting either of
    two equal letters).
    """
    words = np.asarray(words, dtype=object)
    if not len(words):
        return
    deletions = np.minimum(np.asarray(deletions, dtype=np.int64), MAX_DELETIONS)
    lengths = np.fromiter((len(w) for w in words), np.int64, len(words))
    width = int(lengths.max())
    mult = np.random.default_rng(_SEED).integers(0, 2**63, size=width + 1, dtype=np.uint64)
    mult = mult * np.uint64(2) + np.uint64(1)
    codes = _codes(words, width)
    # cum[d][:, m] = sum of codes[:, :m] * mult[shifted by d]: the hash of a stretch of letters
    # that sit d places left of where they started (d letters deleted before them).
    cum = []
    with np.errstate(over="ignore"):
        for shift in range(MAX_DELETIONS + 1):
            part = np.zeros_like(codes)
            part[:, shift:] = codes[:, shift:] * mult[: width - shift]
            cum.append(np.hstack([np.zeros((len(words), 1), np.uint64), np.cumsum(part, axis=1)]))
        del codes, part
        yield cum[0][:, width], np.arange(len(words)), 0
        one = np.flatnonzero(deletions >= 1)
        two = np.flatnonzero(deletions >= 2)
        for i in range(width):
            rows = one[lengths[one] > i]
            yield cum[0][rows, i] + cum[1][rows, width] - cum[1][rows, i + 1], rows, 1
            for j in range(i + 1, width):
                pair = two[lengths[two] > j]
                mid = cum[1][pair, j] - cum[1][pair, i + 1]
                tail = cum[2][pair, width] - cum[2][pair, j + 1]
                yield cum[0][pair, i] + mid + tail, pair, 2


def candidate_pairs(
    words: np.ndarray, allowed: np.ndarray, choices: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """Pairs (word i, choice j) that share a deletion key with at most ``allowed[i]`` deletions
    on each side: a superset of the pairs within ``allowed[i]`` edits, each pair once.

    Only choices whose length is within ``allowed`` of some word's length take part (the
    distance is never below the difference in length). The words' keys are sorted once; the
    choices' keys are looked up in them chunk by chunk and never held all at once.

    Returns
    -------
    (rows, cols): indices into ``words`` and ``choices``, sorted by row then column.
    """
    words = np.asarray(words, dtype=object)
    choices = np.asarray(choices, dtype=object)
    allowed = np.minimum(np.asarray(allowed, dtype=np.int64), MAX_DELETIONS)
    none = np.empty(0, np.int64)
    if not len(words) or not len(choices):
        return none, none
    lengths = np.fromiter((len(w) for w in words), np.int64, len(words))
    choice_len = np.fromiter((len(c) for c in choices), np.int64, len(choices))
    near = np.zeros(int(max(choice_len.max(), lengths.max())) + MAX_DELETIONS + 2, bool)
    for length, edits in set(zip(lengths.tolist(), allowed.tolist(), strict=True)):
        near[max(length - edits, 0) : length + edits + 1] = True
    kept = np.flatnonzero(near[choice_len])
    parts = list(deletion_keys(words, allowed))
    w_key = np.concatenate([k for k, _, _ in parts])
    w_of = np.concatenate([o for _, o, _ in parts])
    order = np.argsort(w_key, kind="stable")
    w_key, w_allowed, w_of = w_key[order], allowed[w_of[order]], w_of[order]
    # A bitmap of the words' keys (low bits) throws out most choice keys before the search.
    seen = np.zeros(_BITMAP, bool)
    seen[w_key & np.uint64(_BITMAP - 1)] = True
    rows, cols = [], []
    for key, owner, deleted in deletion_keys(choices[kept], np.full(len(kept), MAX_DELETIONS)):
        maybe = np.flatnonzero(seen[key & np.uint64(_BITMAP - 1)])
        key = key[maybe]
        lo = np.searchsorted(w_key, key, side="left")
        hit = np.flatnonzero(w_key[np.minimum(lo, len(w_key) - 1)] == key)
        if not len(hit):
            continue
        count = np.searchsorted(w_key, key[hit], side="right") - lo[hit]
        at = np.repeat(lo[hit] - np.cumsum(count) + count, count) + np.arange(int(count.sum()))
        fits = w_allowed[at] >= deleted
        rows.append(w_of[at][fits])
        cols.append(np.repeat(kept[owner[maybe[hit]]], count)[fits])
    if not rows:
        return none, none
    flat = _distinct(np.concatenate(rows) * len(choices) + np.concatenate(cols))
    if not flat.size:
        return none, none
    return flat // len(choices), flat % len(choices)
