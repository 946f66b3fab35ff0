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
6. Optional stemming with the Snowball English stemmer (Porter2; not the original 1980 Porter
   algorithm), the Snowball project's C build from ``PyStemmer``, which ``snowballstemmer`` picks
   when installed (its pure-Python port gives the same stems, about 16x slower); tokens with
   digits are never stemmed.

Work is vectorised over a pandas Series; per-token Python work runs once per distinct token.
"""

from __future__ import annotations

import re
import sys
import unicodedata
from collections.abc import Callable, Iterable
from dataclasses import dataclass
from functools import cache
from itertools import chain

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc

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
def english_stemmer():  # type: ignore[no-untyped-def]
    """Snowball English, shared by the analyzer and the variant proposals (PyStemmer's C build)."""
    import snowballstemmer

    return snowballstemmer.stemmer("english")


def _finish(tokens: Iterable[str], settings: AnalyzerSettings) -> dict[str, list[str]]:
    """Map each distinct raw token to its final terms (steps 4-6)."""
    mapping: dict[str, list[str]] = {}
    stops = _stop_words() if settings.stop_words else frozenset()
    stemmer = english_stemmer() if settings.stem else None
    for raw in tokens:
        terms = [t for t in _canonical(raw) if t not in stops]
        if stemmer is not None:
            terms = [t if any(ch.isdigit() for ch in t) else stemmer.stemWord(t) for t in terms]
        mapping[raw] = terms
    return mapping


@dataclass(frozen=True)
class Analyzed:
    """Term occurrences of many texts, as codes into their distinct terms.

    ``rows[i]`` is the position of occurrence i's text, ``codes[i]`` its term in ``terms``;
    occurrences are in text order, each text's terms in reading order.
    """

    rows: np.ndarray  # (n_occurrences,) int64
    codes: np.ndarray  # (n_occurrences,) int64 into terms
    terms: np.ndarray  # (n_distinct,) object, str


_ASCII_PLACEHOLDER = r"\[[a-z_]+\]"  # PLACEHOLDER in RE2 syntax (same meaning on ASCII text)


def _fold_one(text: str) -> str:
    """Steps 1-2 for one text (the Python path, for texts that are not pure ASCII)."""
    text = unicodedata.normalize("NFKD", PLACEHOLDER.sub(" ", text))
    return text.translate(_drop_marks()).casefold()


Texts = pd.Series | pa.Array | pa.ChunkedArray


def _as_arrow(texts: Texts) -> tuple[pa.Array, Callable[[np.ndarray], list[str]]]:
    """Texts as an Arrow large_string array (missing as ""), and a getter of chosen texts."""
    if isinstance(texts, pa.ChunkedArray):
        texts = texts.combine_chunks()
    if isinstance(texts, pa.Array):
        arr = pc.fill_null(texts.cast(pa.large_string()), "")
        return arr, lambda positions: arr.take(pa.array(positions)).to_pylist()
    values = pd.Series(texts, dtype=object).fillna("").astype(str).astype(object).to_numpy()
    return pa.array(values, type=pa.large_string()), lambda positions: list(values[positions])


def _pieces(texts: Texts) -> pa.LargeListArray:
    """Each text folded (steps 1-2) and split at ASCII white space: a list of pieces per text.

    White space is never part of a token, so tokenizing the pieces one by one finds the same
    tokens in the same order as tokenizing the whole text. ASCII texts (most pages and queries)
    are folded by Arrow kernels: on ASCII, NFKD and accent removal change nothing and case
    folding is lowercasing. Other texts go through Python's ``unicodedata`` one by one.
    """
    arr, pick = _as_arrow(texts)
    ascii_ = pc.string_is_ascii(arr)
    if pc.any(pc.match_substring(arr, "[")).as_py():
        arr = pc.replace_substring_regex(arr, _ASCII_PLACEHOLDER, " ")
    folded = pc.ascii_lower(arr)
    other = np.flatnonzero(~ascii_.to_numpy(zero_copy_only=False))
    if other.size:
        done = pa.array([_fold_one(t) for t in pick(other)], type=pa.large_string())
        folded = pc.replace_with_mask(folded, pc.invert(ascii_), done)
    return pc.ascii_split_whitespace(folded)


def _piece_terms(pieces: np.ndarray, settings: AnalyzerSettings) -> tuple[np.ndarray, np.ndarray]:
    """The final terms of each distinct piece (steps 3-6, once per distinct token).

    Returns the number of terms of each piece and all terms, piece after piece. Without
    stemming and stop words a piece of letters and digits only is its own single term.
    """
    plain = not (settings.stem or settings.stop_words)
    alone = np.fromiter(map(str.isalnum, pieces), bool, len(pieces)) if plain else None
    odd = np.flatnonzero(~alone) if alone is not None else np.arange(len(pieces))
    tokens = [TOKEN.findall(p) for p in pieces[odd]]
    mapping = _finish(dict.fromkeys(chain.from_iterable(tokens)), settings)
    odd_terms = [list(chain.from_iterable(mapping[t] for t in toks)) for toks in tokens]
    n_terms = np.ones(len(pieces), np.int64)
    n_terms[odd] = np.fromiter(map(len, odd_terms), np.int64, len(odd_terms))
    first = np.cumsum(n_terms) - n_terms
    flat = np.empty(int(n_terms.sum()), dtype=object)
    if alone is not None:
        flat[first[alone]] = pieces[alone]
    spots = np.repeat(first[odd], n_terms[odd]) + _ranks(n_terms[odd])
    flat[spots] = list(chain.from_iterable(odd_terms))
    return n_terms, flat


def _ranks(sizes: np.ndarray) -> np.ndarray:
    """0, 1, ..., size - 1 for each size, concatenated."""
    total = int(sizes.sum())
    return np.arange(total) - np.repeat(np.cumsum(sizes) - sizes, sizes)


def _distinct(values: np.ndarray) -> np.ndarray:
    """The distinct values, ascending, by a sort: ``np.unique`` of a plain int64 array hashes in
    numpy 2.4 and took 4.7 s for 3M values against 0.08 s sorted."""
    out = np.sort(values)
    return out[np.r_[True, out[1:] != out[:-1]]] if out.size else out


def analyze_codes(texts: Texts, settings: AnalyzerSettings | None = None) -> Analyzed:
    """Analyze many texts at once, returning term codes (see :class:`Analyzed`).

    Splitting and counting distinct pieces run in Arrow's C++ kernels; Python work runs once per
    distinct piece (a run of non-blank characters), not once per occurrence.
    """
    settings = settings or AnalyzerSettings()
    lists = _pieces(texts)
    rows = np.repeat(np.arange(len(lists), dtype=np.int64), np.diff(lists.offsets.to_numpy()))
    encoded = pc.dictionary_encode(pc.list_flatten(lists))
    piece_codes = encoded.indices.to_numpy(zero_copy_only=False)
    pieces = np.asarray(encoded.dictionary.to_pylist(), dtype=object)
    n_terms, flat = _piece_terms(pieces, settings)
    if flat.size == 0:
        return Analyzed(np.empty(0, np.int64), np.empty(0, np.int64), np.empty(0, object))
    flat_codes, terms = pd.factorize(flat)
    terms = np.asarray(terms, dtype=object)
    first = np.cumsum(n_terms) - n_terms
    if n_terms.max() <= 1:  # each piece is one term or none: one lookup per occurrence
        direct = np.where(n_terms == 1, flat_codes[np.minimum(first, flat.size - 1)], -1)
        codes = direct[piece_codes]
        keep = codes >= 0
        if not keep.all():
            rows, codes = rows[keep], codes[keep]
        return Analyzed(rows, codes.astype(np.int64), terms)
    # Each distinct piece gives 0, 1 or more terms; spread them over its occurrences with index
    # arithmetic (no per-occurrence Python work), keeping text order.
    spread = n_terms[piece_codes]
    offset = np.repeat(first[piece_codes], spread) + _ranks(spread)
    return Analyzed(np.repeat(rows, spread), flat_codes[offset].astype(np.int64), terms)


def analyze_series(texts: pd.Series, settings: AnalyzerSettings | None = None) -> pd.DataFrame:
    """Analyze many texts at once.

    Returns
    -------
    DataFrame with columns ``row`` (int64, position of the text in ``texts``) and ``term`` (str),
    one row per term occurrence, in text order.
    """
    found = analyze_codes(texts, settings)
    if found.codes.size == 0:
        return pd.DataFrame({"row": np.empty(0, np.int64), "term": np.empty(0, object)})
    return pd.DataFrame({"row": found.rows, "term": found.terms[found.codes]})


def analyze(text: str, settings: AnalyzerSettings | None = None) -> list[str]:
    """Analyze one text (for tests and for explaining a single query)."""
    return list(analyze_series(pd.Series([text]), settings)["term"])
