"""The deletion-key filter misses no pair within the edit limit.

Reference: rapidfuzz's optimal string alignment distance over every pair (``process.cdist``), the
all-pairs pass the filter replaces; the filter may return more pairs, never fewer.
"""

from __future__ import annotations

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st
from rapidfuzz import process
from rapidfuzz.distance import OSA

from querygap.edit_neighbours import candidate_pairs


def _within(words: list[str], allowed: list[int], choices: list[str]) -> set[tuple[int, int]]:
    dist = process.cdist(words, choices, scorer=OSA.distance)
    limit = np.asarray(allowed)[:, None]
    return set(zip(*np.nonzero(dist <= limit), strict=True))


def _found(words: list[str], allowed: list[int], choices: list[str]) -> set[tuple[int, int]]:
    rows, cols = candidate_pairs(
        np.array(words, object), np.array(allowed), np.array(choices, object)
    )
    pairs = list(zip(rows.tolist(), cols.tolist(), strict=True))
    assert len(pairs) == len(set(pairs))  # each pair once
    return set(pairs)


def test_each_kind_of_edit_is_found() -> None:
    choices = ["meter", "water", "standpipe", "wifi", "méter"]
    words = ["meetr", "mter", "meterr", "mater", "wtaer", "standpiep", "wifii", "meter", "zzzzz"]
    allowed = [1, 1, 1, 1, 1, 2, 1, 0, 2]
    found = _found(words, allowed, choices)
    assert {(0, 0), (1, 0), (2, 0), (3, 0), (4, 1), (5, 2), (6, 3), (7, 0)} <= found
    assert not any(row == 8 for row, _ in found)  # nothing near "zzzzz"
    assert _within(words, allowed, choices) <= found


def test_no_pair_of_the_two_edit_limit_is_missed_on_a_dense_vocabulary() -> None:
    rng = np.random.default_rng(7)
    letters = np.array(list("abcde"))
    choices = sorted({"".join(rng.choice(letters, size=rng.integers(3, 9))) for _ in range(2000)})
    words = ["".join(rng.choice(letters, size=rng.integers(3, 9))) for _ in range(300)]
    allowed = [int(a) for a in rng.integers(0, 3, size=len(words))]
    within = _within(words, allowed, choices)
    assert len(within) > 1000  # dense enough that a miss would show
    assert within <= _found(words, allowed, choices)


@settings(max_examples=200, deadline=None)
@given(
    words=st.lists(st.text("abcä", min_size=1, max_size=9), min_size=1, max_size=12),
    choices=st.lists(st.text("abcä", min_size=1, max_size=11), min_size=1, max_size=30),
    edits=st.lists(st.integers(0, 2), min_size=12, max_size=12),
)
def test_any_words_get_every_pair_within_their_limit(
    words: list[str], choices: list[str], edits: list[int]
) -> None:
    allowed = edits[: len(words)]
    assert _within(words, allowed, choices) <= _found(words, allowed, choices)


def test_empty_inputs_give_no_pairs() -> None:
    assert _found([], [], ["a"]) == set()
    assert _found(["a"], [1], []) == set()


def test_keys_that_meet_only_beyond_the_limit_give_no_pairs() -> None:
    # "b" (2 deletions allowed) and "aaa" share no key: found by hypothesis as an edge case.
    assert _found(["a", "b"], [0, 2], ["aaa"]) == _within(["a", "b"], [0, 2], ["aaa"]) == set()
