"""Near-miss candidates checked against outside references: codespell's dictionary, the textbook
edit distance, a hand-computed G^2 table."""

from __future__ import annotations

import math
import re
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from querygap.nearmiss import (
    edit_distance,
    join_candidates,
    max_edits,
    spelling_candidates,
    substitution_scores,
    variant_candidates,
)


def test_kitten_sitting_is_three_edits() -> None:
    # Levenshtein (1966), the usual textbook example (REFERENCES.md, "Check values").
    assert edit_distance("kitten", "sitting") == 3


def test_a_transposition_is_one_edit() -> None:
    # Damerau, CACM 7(3), 1964: a transposition of adjacent letters is one error.
    assert edit_distance("recieve", "receive") == 1
    assert edit_distance("ca", "abc") == 3  # restricted form: no substring edited twice


def test_edit_limit_grows_with_length() -> None:
    # Common practice, no source: none below 3 letters, 1 for 3-5, 2 for longer words.
    assert max_edits(np.array([1, 2, 3, 5, 6, 12])).tolist() == [0, 0, 1, 1, 2, 2]


def test_substitution_g2_matches_a_hand_computed_table() -> None:
    # a -> b 10 times, a -> c 2, d -> b 3, d -> c 85: the table [[10, 2], [3, 85]], N = 100.
    # Hand-computed (Dunning 1993): E = 1.56, 10.44, 11.44, 76.56;
    # G2 = 2 (10 ln(10/1.56) + 2 ln(2/10.44) + 3 ln(3/11.44) + 85 ln(85/76.56)) = 40.295.
    subs = pd.DataFrame(
        {
            "term_from": ["a", "a", "d", "d"],
            "term_to": ["b", "c", "b", "c"],
            "pairs": [10, 2, 3, 85],
        }
    )
    scored = substitution_scores(subs).set_index(["term_from", "term_to"])
    hand = 2 * (
        10 * math.log(10 / 1.56)
        + 2 * math.log(2 / 10.44)
        + 3 * math.log(3 / 11.44)
        + 85 * math.log(85 / 76.56)
    )
    assert scored.loc[("a", "b"), "g2"] == pytest.approx(hand, rel=1e-9)
    assert hand == pytest.approx(40.295, abs=1e-3)
    assert scored.loc[("a", "c"), "g2"] < 0  # a -> c is rarer than chance


def _codespell_pairs() -> list[tuple[str, str]]:
    codespell_lib = pytest.importorskip("codespell_lib")
    path = Path(codespell_lib.__file__).parent / "data" / "dictionary.txt"
    pairs = []
    for line in path.read_text(encoding="utf-8").splitlines():
        wrong, sep, right = line.partition("->")
        if sep:
            pairs.append((wrong.strip(), [c.strip() for c in right.split(",") if c.strip()]))
    return pairs  # type: ignore[return-value]


def test_codespell_misspellings_get_their_correction_first() -> None:
    # codespell's dictionary (codespell_lib/data/dictionary.txt, 'misspelling->correction'): the
    # content vocabulary is every single-word lowercase alphabetic correction; a pair counts when
    # it has one correction, in the vocabulary, and its misspelling is not a vocabulary word.
    pairs = _codespell_pairs()
    word = re.compile(r"[a-z]+")
    vocab = sorted({c for _, cs in pairs for c in cs if word.fullmatch(c)})
    known = set(vocab)
    usable = [
        (w, cs[0])
        for w, cs in pairs
        if len(cs) == 1 and cs[0] in known and w not in known and word.fullmatch(w)
    ]
    rng = np.random.default_rng(20261102)
    sample = [usable[i] for i in rng.choice(len(usable), size=3000, replace=False)]
    content = pd.DataFrame({"term": vocab, "df": 1, "ok_searches": 0})
    found = spelling_candidates([w for w, _ in sample], content)
    top = found[found["rank"] == 1].set_index("term")["suggestion"]
    share = float(np.mean([top.get(w) == right for w, right in sample]))
    print(f"codespell: correction ranked first for {share:.1%} of {len(sample)} pairs")
    assert share >= 0.90


def test_spelling_prefers_the_word_more_pages_and_searches_use() -> None:
    vocab = pd.DataFrame(
        {"term": ["meter", "metre", "peter"], "df": [30, 2, 1], "ok_searches": [50, 0, 0]}
    )
    found = spelling_candidates(["meterr", "mter", "xy"], vocab)
    assert found.loc[found["term"] == "meterr", "suggestion"].tolist()[0] == "meter"
    assert found.loc[found["term"] == "mter", "suggestion"].tolist()[0] == "meter"
    assert "xy" not in set(found["term"])  # 2 letters: no edits allowed


def test_variants_split_stem_and_join() -> None:
    vocab = pd.DataFrame(
        {"term": ["smart", "meter", "standpipe", "wifi", "water"], "df": [3, 9, 4, 2, 8]}
    )
    var = variant_candidates(["smartmeter", "standpipes", "qqq"], vocab)
    got = set(zip(var["term"], var["suggestion"], var["how"], strict=True))
    assert ("smartmeter", "smart meter", "split") in got
    assert ("standpipes", "standpipe", "same stem") in got
    seq = pd.DataFrame({"row": [0, 0, 0, 1], "term": ["wi", "fi", "water", "fi"]})
    joins = join_candidates(seq, vocab)
    assert joins[["term", "suggestion"]].values.tolist() == [["wi fi", "wifi"]]


@pytest.mark.parametrize("seed", [0, 1])
def test_joins_equal_their_plain_definition(seed: int) -> None:
    # The plain definition, written with pandas: every adjacent pair of terms of one query
    # whose concatenation is a content term, distinct, in order of first occurrence.
    rng = np.random.default_rng(seed)
    parts = np.array(["wi", "fi", "smart", "meter", "water", "bill", "pay"], dtype=object)
    vocab = pd.DataFrame(
        {"term": ["wifi", "smartmeter", "waterbill", "paybill"], "df": [2, 5, 7, 1]}
    )
    queries = pd.Series([" ".join(rng.choice(parts, rng.integers(1, 5))) for _ in range(300)])
    seq = queries.str.split(" ").explode().rename("term").rename_axis("row").reset_index()
    seq = seq.astype({"term": object})
    nxt = seq["term"].shift(-1)
    same = seq["row"].eq(seq["row"].shift(-1))
    joined = (seq["term"] + nxt.fillna("")).where(same)
    hit = same & joined.isin(vocab["term"])
    want = pd.DataFrame(
        {"term": (seq["term"] + " " + nxt)[hit], "suggestion": joined[hit], "how": "join"}
    ).drop_duplicates()
    want["df"] = want["suggestion"].map(vocab.set_index("term")["df"])
    got = join_candidates(seq, vocab)
    assert len(want) >= 3
    np.testing.assert_array_equal(got.to_numpy(object), want.to_numpy(object))
