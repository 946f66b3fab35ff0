"""Query normalisation: the form under which searches are grouped and counted.

The original query text is kept elsewhere; this module only computes the grouping key. It is the
first half of the analyzer (the analyzer later folds accents, tokenises and stems).

The punctuation policy
----------------------
Applied in this order:

1. Unicode NFKC (UAX #15): full-width forms, ligatures and compatibility characters become their
   plain equivalents ("ＡＢＣ" -> "ABC", "ﬁ" -> "fi", non-breaking space -> space).
2. Typographic quotes and dashes become ASCII: ' ‘ ’ ‚ ‛ ′ ` -> ', “ ” „ ‟ ″ « » ‹ › -> ", and
   ‐ ‑ ‒ – — ― − ⁃ ⸺ ⸻ -> -.
3. Case folding (``str.casefold``, Unicode full case folding): "Straße" -> "strasse".
4. Every character of Unicode category P* (punctuation) or S* (symbol) becomes a space, except the
   in-word joiners ``. - ' + # & / _``, which are kept ("wi-fi", "v2.3.1", "at&t", "tcp/ip").
   Control characters (Cc) and invisible format characters (Cf: zero-width space and joiners,
   soft hyphen, byte-order mark) are removed; every other whitespace character becomes a space.
5. Joiners are stripped from the start and the end of each word, except a trailing "++" or "#"
   right after a letter, so "c++", "c#" and "f#" survive while "-foo" -> "foo", "bar." -> "bar"
   and "'quoted'" -> "quoted". A word made only of joiners disappears.
6. Runs of spaces collapse to one space, and the result is stripped. It may be "".

Accents are kept ("café" stays "café"). Steps 2 and 4 are done by one ``str.translate`` table
after case folding; this gives the same result as the order above because case folding neither
produces nor changes any of those characters. A final NFKC pass after the deletions in step 4
recomposes a letter and a combining mark that an invisible character used to separate, which
keeps the function idempotent: ``normalize_query(normalize_query(x)) == normalize_query(x)``.
"""

from __future__ import annotations

import re
import unicodedata
from functools import cache
from typing import Any

import pandas as pd

__all__ = ["JOINERS", "check_text_series", "normalize_query", "normalize_series"]

#: Punctuation kept inside words (step 4 of the punctuation policy).
JOINERS = ".-'+#&/_"

_APOSTROPHES = "\u2018\u2019\u201a\u201b\u2032\u2035`"
_DOUBLE_QUOTES = "\u201c\u201d\u201e\u201f\u2033\u2036\u00ab\u00bb\u2039\u203a"
_DASHES = "\u2010\u2011\u2012\u2013\u2014\u2015\u2212\u2043\u2e3a\u2e3b\ufe58\ufe63\uff0d"

_J = re.escape(JOINERS)
# Joiners at the edge of a word: after the start of the text or a space (leading), or after a
# non-space and before a space or the end (trailing).
_EDGE_JOINERS = re.compile(rf"(?<!\S)[{_J}]+|(?<=\S)[{_J}]+(?!\S)")
# After case folding, text made only of these characters needs no translation table.
_PLAIN = re.compile(rf"[^0-9a-z {_J}]")
_SPACE_RUN = re.compile(r" {2,}")


class _TranslationTable(dict[int, str | None]):
    """The ``str.translate`` mapping of steps 2 and 4, filled one code point at a time.

    Building it for all of Unicode up front took about 1.5 s per process; a query log uses a few
    hundred code points, so each is classified the first time it is seen (``__missing__``).
    """

    def __missing__(self, code: int) -> str | None:
        char = chr(code)
        category = unicodedata.category(char)
        value: str | None = char
        if code in _KEEP:
            pass
        elif char.isspace():
            value = " "
        elif category in ("Cc", "Cf", "Cs"):
            value = None
        elif category[0] in ("P", "S") or category in ("Zs", "Zl", "Zp"):
            value = " "
        self[code] = value
        return value


_KEEP = frozenset(ord(c) for c in JOINERS)


@cache
def _translation_table() -> _TranslationTable:
    """The translation table of steps 2 and 4, with the quote and dash mappings filled in."""
    table = _TranslationTable()
    for char in _APOSTROPHES:
        table[ord(char)] = "'"
    for char in _DOUBLE_QUOTES:
        table[ord(char)] = " "  # '"' is not a joiner, so it becomes a space in step 4
    for char in _DASHES:
        table[ord(char)] = "-"
    return table


def _trim_edge(match: re.Match[str]) -> str:
    """Drop joiners at a word edge, but keep a trailing "++" or "#" after a letter ("c++")."""
    start = match.start()
    if start == 0 or match.string[start - 1] == " ":
        return ""  # leading joiners (or a word made only of joiners)
    if match.string[start - 1].isalpha():
        run = match.group()
        if run.startswith("++"):
            return "++"
        if run.startswith("#"):
            return "#"
    return ""


def _replace_where(values: pd.Series, mask: pd.Series, func: Any) -> pd.Series:
    """Apply ``func`` to the rows where ``mask`` holds; other rows are left as they are."""
    if mask.any():
        values = values.copy()
        values[mask] = func(values[mask])
    return values


def check_text_series(texts: pd.Series) -> None:
    """Raise ``TypeError`` naming the index label of the first value neither str nor missing."""
    kind = pd.api.types.infer_dtype(texts, skipna=True)
    if kind not in ("string", "empty"):
        is_bad = texts.notna() & ~texts.map(lambda value: isinstance(value, str))
        label = is_bad.idxmax()
        raise TypeError(
            f"query text must be str or missing; row {label!r} holds "
            f"{type(texts[label]).__name__} {texts[label]!r}"
        )


def normalize_series(texts: pd.Series) -> pd.Series:
    """Normalise many queries at once with the punctuation policy of this module.

    Parameters
    ----------
    texts : pandas.Series of str
        Query texts; missing values (None/NaN/NA) stay missing.

    Returns
    -------
    pandas.Series
        Normalised texts, same index and dtype as ``texts`` (object input gives object output).

    Raises
    ------
    TypeError
        If a non-missing value is not a str; the message names its index label.

    Examples
    --------
    >>> normalize_series(pd.Series([" Wi‑Fi  Router!! ", "C++ guide"])).tolist()
    ['wi-fi router', 'c++ guide']
    """
    if texts.empty:
        return texts.copy()
    check_text_series(texts)
    table = _translation_table()
    step = texts.astype(object).str.normalize("NFKC").str.casefold()
    # Each later pass runs only on the rows it can change (most queries are plain ASCII).
    step = _replace_where(
        step,
        step.str.contains(_PLAIN, na=False),
        lambda part: part.str.translate(table).str.normalize("NFKC"),
    )
    step = _replace_where(
        step,
        step.str.contains(_EDGE_JOINERS, na=False),
        lambda part: part.str.replace(_EDGE_JOINERS, _trim_edge, regex=True),
    )
    step = _replace_where(
        step,
        step.str.contains("  ", regex=False, na=False),
        lambda part: part.str.replace(_SPACE_RUN, " ", regex=True),
    )
    step = step.str.strip(" ")
    if isinstance(texts.dtype, pd.StringDtype):
        return step.astype(texts.dtype)
    return step


def normalize_query(text: str) -> str:
    """Normalise one query; the same result as :func:`normalize_series` on a one-row Series.

    >>> normalize_query("ＡＢＣ ﬁle")
    'abc file'
    """
    if not isinstance(text, str):
        raise TypeError(f"query text must be str, got {type(text).__name__} {text!r}")
    return str(normalize_series(pd.Series([text], dtype=object)).iloc[0])
