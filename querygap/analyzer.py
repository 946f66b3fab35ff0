"""One analyzer for pages and queries: text in, index terms out.

Steps, the same for both sides (so a query term and a page term meet only if they analyze alike):

1. Redaction placeholders such as ``[email]`` are dropped: they stand for text we refused to keep.
2. Unicode NFKD, accents removed (combining marks dropped), case folded (``str.casefold``).
3. Tokens are runs of letters and digits, joined by ``.``, ``-`` or ``'`` inside a word, with an
   optional ``++`` or ``#`` at the end (``c++``, ``c#``).
4. Each token is then made canonical:
   - a trailing possessive ``'s`` is dropped (``meter's`` -> ``meter``);
   - hyphens and apostrophes inside a word are removed, so ``wi-fi`` and ``wifi`` meet, and so do
     the part codes ``kv-2210`` and ``kv2210``; ``wi fi`` (two words) does not: the variant
     proposals catch that;
   - dots are kept in tokens that contain a digit (``3.2.1``, ``v2.0``) and split words otherwise
     (``example.com`` -> ``example``, ``com``).
5. Optional stop words (scikit-learn's English list) are removed.
6. Optional stemming with the Snowball English stemmer (Porter2, from the ``snowballstemmer``
   package; not the original 1980 Porter algorithm); tokens with digits are never stemmed.

Work is vectorised over a pandas Series; per-token Python work runs once per distinct token.
"""

from __future__ import annotations

import re
import sys
import unicodedata
from dataclasses import dataclass
from functools import cache
from itertools import chain

import numpy as np
import pandas as pd

PLACEHOLDER = re.compile(r"\[[a-z_]+\]")
TOKEN = re.compile(r"[^\W_]+(?:[.\-'][^\W_]+)*(?:\+\+|#)?")


@cache
def _drop_marks() -> dict[int, None]:
    """A str.translate table that deletes every Unicode combining mark (category Mn)."""
    return {c: None for c in range(sys.maxunicode + 1) if unicodedata.category(chr(c)) == "Mn"}


@dataclass(frozen=True)
class AnalyzerSettings:
    """How text becomes terms.

    Parameters
    ----------
    stem : bool, default=False
        Apply the Snowball English stemmer.
    stop_words : bool, default=False
        Drop scikit-learn's English stop words.
    """

    stem: bool = False
    stop_words: bool = False


def fold(texts: pd.Series) -> pd.Series:
    """Steps 1-2: drop placeholders, NFKD, remove accents, casefold."""
    # object dtype: Python's re semantics (not the Arrow engine's) on every path.
    s = pd.Series(texts, dtype=object).fillna("").astype(str).astype(object)
    s = s.str.replace(PLACEHOLDER, " ", regex=True)
    s = s.str.normalize("NFKD").str.translate(_drop_marks())
    return s.str.casefold()


def _canonical(token: str) -> list[str]:
    """Step 4 for one distinct token (called once per vocabulary entry, not per occurrence)."""
    if token.endswith("'s"):
        token = token[:-2]
    token = token.replace("'", "").replace("-", "")
    if "." in token and not any(ch.isdigit() for ch in token):
        return [part for part in token.split(".") if part]
    return [token] if token else []


@cache
def _stop_words() -> frozenset[str]:
    from sklearn.feature_extraction.text import ENGLISH_STOP_WORDS

    return frozenset(ENGLISH_STOP_WORDS)


@cache
def _stemmer():  # type: ignore[no-untyped-def]
    import snowballstemmer

    return snowballstemmer.stemmer("english")


def _finish(tokens: np.ndarray, settings: AnalyzerSettings) -> dict[str, list[str]]:
    """Map each distinct raw token to its final terms (steps 4-6)."""
    mapping: dict[str, list[str]] = {}
    stops = _stop_words() if settings.stop_words else frozenset()
    stemmer = _stemmer() if settings.stem else None
    for raw in tokens:
        terms = [t for t in _canonical(raw) if t not in stops]
        if stemmer is not None:
            terms = [t if any(ch.isdigit() for ch in t) else stemmer.stemWord(t) for t in terms]
        mapping[raw] = terms
    return mapping


def analyze_series(texts: pd.Series, settings: AnalyzerSettings | None = None) -> pd.DataFrame:
    """Analyze many texts at once.

    Returns
    -------
    DataFrame with columns ``row`` (int64, position of the text in ``texts``) and ``term`` (str),
    one row per term occurrence, in text order.
    """
    settings = settings or AnalyzerSettings()
    found = fold(texts).str.findall(TOKEN)
    lengths = np.fromiter(map(len, found), np.int64, len(found))
    rows = np.repeat(np.arange(len(found), dtype=np.int64), lengths)
    raw = np.array(list(chain.from_iterable(found)), dtype=object)
    if raw.size == 0:
        return pd.DataFrame({"row": np.empty(0, np.int64), "term": np.empty(0, object)})
    codes, uniques = pd.factorize(raw)
    mapping = _finish(uniques, settings)
    # Each distinct token gives 0, 1 or more terms; spread them over its occurrences with
    # index arithmetic (no per-occurrence Python work), keeping text order.
    per_token = [mapping[u] for u in uniques]
    n_terms = np.fromiter(map(len, per_token), np.int64, len(per_token))
    flat = np.array(list(chain.from_iterable(per_token)), dtype=object)
    first = np.cumsum(n_terms) - n_terms
    spread = n_terms[codes]
    total = int(spread.sum())
    offset = np.repeat(first[codes] - (np.cumsum(spread) - spread), spread)
    terms = flat[offset + np.arange(total)] if total else np.empty(0, object)
    return pd.DataFrame({"row": np.repeat(rows, spread), "term": terms})


def analyze(text: str, settings: AnalyzerSettings | None = None) -> list[str]:
    """Analyze one text (for tests and for explaining a single query)."""
    return list(analyze_series(pd.Series([text]), settings)["term"])
