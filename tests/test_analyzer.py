"""The analyzer: documented token policy, field agreement between pages and queries."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from querygap import analyzer
from querygap.analyzer import AnalyzerSettings, _distinct, analyze, analyze_series


@pytest.mark.parametrize(
    ("text", "terms"),
    [
        ("Wi-Fi router", ["wifi", "router"]),
        ("wifi router", ["wifi", "router"]),
        ("C++ and C# guides", ["c++", "and", "c#", "guides"]),
        ("version v2.3.1 or 3.2", ["version", "v2.3.1", "or", "3.2"]),
        ("part KV-2210-45", ["part", "kv221045"]),
        ("the meter's reading", ["the", "meter", "reading"]),
        ("Café crème", ["cafe", "creme"]),
        ("example.com", ["example", "com"]),
        ("[email] password reset", ["password", "reset"]),
        ("ＳＭＡＲＴ meter", ["smart", "meter"]),
        ("!!!", []),
    ],
)
def test_token_policy(text: str, terms: list[str]) -> None:
    assert analyze(text) == terms


def test_stop_words_and_stemming() -> None:
    # Snowball English (Porter2): "generalizations" -> "general" (computed; REFERENCES.md notes
    # the original Porter algorithm gives "gener").
    got = analyze(
        "The generalizations of running meters", AnalyzerSettings(stem=True, stop_words=True)
    )
    assert got == ["general", "run", "meter"]
    assert analyze("v2.3.1 readings", AnalyzerSettings(stem=True)) == ["v2.3.1", "read"]


WORDNET_INDEX = Path("/usr/share/wordnet")


@pytest.mark.skipif(
    not (WORDNET_INDEX / "index.noun").exists(),
    reason="WordNet 3.0 is missing: apt-get install -y wordnet-base (CI installs it)",
)
def test_compiled_stemmer_matches_the_reference_port() -> None:
    # The stems come from PyStemmer (the Snowball project's C code); snowballstemmer's own
    # pure-Python English stemmer is the reference. Words: every lemma of WordNet 3.0 (Debian
    # package wordnet-base, index.noun/verb/adj/adv), 83,118 single words.
    from snowballstemmer.english_stemmer import EnglishStemmer

    words = sorted(
        {
            line.split(" ", 1)[0]
            for part in ("noun", "verb", "adj", "adv")
            for line in (WORDNET_INDEX / f"index.{part}").read_text().splitlines()
            if line and not line.startswith(" ") and "_" not in line.split(" ", 1)[0]
        }
    )
    assert len(words) > 80_000
    stemmer = analyzer.english_stemmer()
    assert type(stemmer).__module__ == "Stemmer"  # the compiled build is the one in use
    assert stemmer.stemWords(words) == EnglishStemmer().stemWords(words)


@settings(max_examples=100, deadline=None)
@given(st.lists(st.text(max_size=40), min_size=1, max_size=8))
def test_series_equals_one_by_one(texts: list[str]) -> None:
    long = analyze_series(pd.Series(texts))
    for i, text in enumerate(texts):
        assert list(long.loc[long["row"] == i, "term"]) == analyze(text)


@settings(max_examples=100, deadline=None)
@given(st.text(max_size=60))
def test_analysis_is_idempotent_on_its_own_output(text: str) -> None:
    terms = analyze(text)
    assert analyze(" ".join(terms)) == terms


def _whole_text_terms(text: str, settings: AnalyzerSettings) -> list[str]:
    """The documented steps applied to one whole text: fold, TOKEN over it all, steps 4-6."""
    folded = analyzer.fold(pd.Series([text], dtype=object))[0]
    tokens = analyzer.TOKEN.findall(folded)
    mapping = analyzer._finish(dict.fromkeys(tokens), settings)
    return [term for token in tokens for term in mapping[token]]


# Pieces that meet the analyzer's edge cases: joiners, suffixes, placeholders, Unicode spaces,
# letters whose folding changes length (ß, İ), full-width forms and an underscore.
_FRAGMENTS = st.sampled_from(
    ["a", "Z", "é", "9", " ", ".", "-", "'", "'s", "+", "++", "#", "_", "[", "]", "[email]",
     "\t", "\n", "\u00a0", "\u2003", "\u3000", "ß", "İ", "ＳＭ", "c", "x1", "ﬁ", "٣", "\u0301"]
)  # fmt: skip


@settings(max_examples=200, deadline=None)
@given(
    st.lists(st.lists(_FRAGMENTS, max_size=12).map("".join), min_size=1, max_size=6),
    st.booleans(),
)
def test_bulk_analysis_equals_tokenizing_each_whole_text(texts: list[str], stem: bool) -> None:
    # The bulk path splits texts at white space and folds ASCII texts with Arrow kernels; the
    # terms must be those of the regex over each whole folded text, in the same order.
    chosen = AnalyzerSettings(stem=stem, stop_words=stem)
    long = analyze_series(pd.Series(texts), chosen)
    coded = analyzer.analyze_codes(pa.array(texts), chosen)
    assert list(coded.rows) == list(long["row"])
    assert list(coded.terms[coded.codes]) == list(long["term"])
    for i, text in enumerate(texts):
        assert list(long.loc[long["row"] == i, "term"]) == _whole_text_terms(text, chosen)


def test_distinct_equals_numpy_unique() -> None:
    # Reference: numpy's np.unique (sorted distinct values), on repeats, negatives and empty.
    rng = np.random.default_rng(5)
    for values in (rng.integers(-50, 50, 2000), rng.integers(0, 2**62, 500), np.empty(0, int)):
        assert np.array_equal(_distinct(values), np.unique(values))
    assert _distinct(rng.integers(0, 3, 100)).tolist() == [0, 1, 2]
