"""Tests for querygap.textnorm (the punctuation policy)."""

import unicodedata

import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from querygap.textnorm import normalize_query, normalize_series

EXAMPLES = [
    (" Wi‑Fi  Router!! ", "wi-fi router"),  # U+2011 non-breaking hyphen -> "-"
    ("C++ guide", "c++ guide"),
    ("\ufb01le", "file"),  # "ﬁ" ligature, NFKC (UAX #15)
    ("ＡＢＣ", "abc"),  # full-width letters, NFKC (UAX #15)
    ("Straße", "strasse"),  # Unicode full case folding of ß
    ("v2.3.1", "v2.3.1"),
    ("KV-2210-45", "kv-2210-45"),
    ("c# and f# tutorial", "c# and f# tutorial"),
    ("notepad++!", "notepad++"),
    ("c+++", "c++"),
    ("3++ 3#", "3 3"),  # "++"/"#" survive only after a letter
    ("-foo bar. 'quoted'", "foo bar quoted"),
    ("don’t “stop” now", "don't stop now"),
    ("price – 2024 — list", "price 2024 list"),  # lone dashes are words of joiners only
    ("a\u200bb", "ab"),  # zero-width space removed
    ("co\u00adop", "coop"),  # soft hyphen removed
    ("tab\there\nnew\u00a0line", "tab here new line"),
    ("bell\x07char", "bellchar"),  # control character removed
    ("AT&T tcp/ip snake_case", "at&t tcp/ip snake_case"),
    ("Café Crème", "café crème"),  # accents kept
    ("e\u200b\u0301", "\u00e9"),  # recomposed once the invisible character is gone
    ("100% €5 <b>", "100 5 b"),
    ("!!!", ""),
    ("", ""),
]


@pytest.mark.parametrize(("text", "expected"), EXAMPLES)
def test_examples(text: str, expected: str) -> None:
    assert normalize_query(text) == expected


def test_series_keeps_index_and_missing_values() -> None:
    texts = pd.Series(["A!", None, "B  c"], index=[10, 20, 30], dtype=object)
    out = normalize_series(texts)
    assert out.index.tolist() == [10, 20, 30]
    assert out[10] == "a"
    assert out[20] is None
    assert out[30] == "b c"


def test_series_keeps_pandas_string_dtype() -> None:
    texts = pd.Series(["Wi-Fi!", pd.NA], dtype="string")
    out = normalize_series(texts)
    assert out.dtype == texts.dtype
    assert out[0] == "wi-fi"
    assert pd.isna(out[1])


def test_non_string_value_is_named() -> None:
    with pytest.raises(TypeError, match=r"row 'b' holds int 5"):
        normalize_series(pd.Series(["ok", None, 5], index=["a", "n", "b"], dtype=object))


def test_empty_series() -> None:
    assert normalize_series(pd.Series([], dtype=object)).empty


text_strategy = st.text(
    alphabet=st.characters(codec="utf-8"),
    max_size=40,
)
# Text rich in the characters the policy treats specially.
tricky_strategy = st.text(
    alphabet=st.sampled_from(list("aZß3 .-'+#&/_!?,\t\u00a0\u200b\u2019\u2013ﬁＡé\u0301İΐ")),
    max_size=30,
)


@settings(max_examples=400)
@given(st.one_of(text_strategy, tricky_strategy))
def test_idempotent(text: str) -> None:
    once = normalize_query(text)
    assert normalize_query(once) == once


@settings(max_examples=400)
@given(st.one_of(text_strategy, tricky_strategy))
def test_spaces_are_single_and_inside(text: str) -> None:
    out = normalize_query(text)
    assert out == out.strip()
    assert "  " not in out
    assert all(not c.isspace() or c == " " for c in out)


@settings(max_examples=400)
@given(st.one_of(text_strategy, tricky_strategy))
def test_never_longer_than_nfkc_casefold(text: str) -> None:
    assert len(normalize_query(text)) <= len(unicodedata.normalize("NFKC", text).casefold())


@settings(max_examples=400)
@given(st.one_of(text_strategy, tricky_strategy))
def test_words_do_not_start_or_end_with_joiners(text: str) -> None:
    for word in normalize_query(text).split(" "):
        if not word:
            continue
        assert word[0] not in ".-'+#&/_"
        ends_ok = word[-1] not in ".-'+#&/_"
        keeps_lang = (word.endswith("++") and word[-3:-2].isalpha()) or (
            word.endswith("#") and word[-2:-1].isalpha()
        )
        assert ends_ok or keeps_lang


@settings(max_examples=100)
@given(st.lists(st.one_of(text_strategy, tricky_strategy), max_size=20))
def test_series_equals_per_string(texts: list[str]) -> None:
    series = pd.Series(texts, dtype=object)
    assert normalize_series(series).tolist() == [normalize_query(t) for t in texts]
