"""Personal data in query text: find it, replace it with a placeholder, count what was replaced.

Query logs are personal data (Article 29 Working Party, Opinion 1/2008, WP148), so querygap
redacts by default. Kinds are replaced in this order, each seeing the output of the one before,
so that a card number is never half-taken as a phone number:

========  ===========  ==========================================================================
kind      placeholder  what counts
========  ===========  ==========================================================================
email     ``[email]``  ``local@domain.tld``: local part of letters, digits and ``. _ % + ' -``;
                       one or more domain labels; a top-level label of 2 or more letters.
card      ``[card]``   13 to 19 digits that pass the Luhn check, written as one block or in a
                       printed card layout (groups 4-4-4-4 with an optional last group of 3 or 4,
                       or 4-6-5 / 4-6-4) joined by one kind of separator, a single space or a
                       hyphen. Numbers that fail the check are kept: they may be part codes or
                       account numbers. Inside a longer run of groups ("order 12 4111 1111 1111
                       1111") the longest passing window is taken. Not preceded by a word
                       character or "+", nor part of a decimal number.
ipv6      ``[ip]``     A token of hex digits, colons and dots that the standard library's
                       ``ipaddress.IPv6Address`` accepts (full, compressed ``::`` and IPv4-mapped
                       forms), with at least three non-empty groups and at least one decimal
                       digit, so that "::" or "abc::def" in programming queries are left alone.
ipv4      ``[ip]``     A dotted quad, each part 0-255 (leading zeros allowed), not touching a
                       word character or another ".digit": "1.2.3" and "1.2.3.4.5" are kept.
phone     ``[phone]``  International: "+" then 7-15 digits (E.164 allows at most 15), with up to
                       two of ``space . - ( )`` between digits. Local: 9-15 digits in one of
                       these shapes: ungrouped ("5551234567"); a parenthesised area code then
                       groups ("(555) 123-4567"); groups of 2-8 digits after the first, all
                       joined by the same separator, where hyphens are always accepted
                       ("555-123-4567"), dots need three or more groups and a first group of two
                       or more digits ("555.123.4567"), and spaces need a first group starting
                       with the trunk prefix 0 ("020 7946 0958", "07700 900123") or the 3-3-4
                       shape ("555 123 4567").
                       Never a phone: a number touching a letter or digit (``x5551234567``,
                       ``5551234567b``), a number after a word character and one of ``. / : -``
                       ("KV-2210-45", "v2.3.1"), or before one of those and a word character;
                       fewer than 9 digits (dates such as 2026-11-02, times, years, short
                       numbers); space-separated numbers in other shapes ("1040 2023 2024").
extras    ``[label]``  Each configured ``(label, regex)`` pair, applied last, in the given order.
========  ===========  ==========================================================================

Caution: ungrouped runs of 9-15 digits (order numbers, EAN-13 / ISBN-13 codes) count as phone
numbers, because they cannot be told apart from one; a caller that must keep them can leave
"phone" out of ``RedactionRules.kinds``.

Session and user keys are pseudonymised with a keyed hash (HMAC-SHA256), not a plain hash: a
plain hash of a small key space can be reversed by trying every key.
"""

from __future__ import annotations

import hashlib
import hmac
import ipaddress
import re
import secrets
from collections.abc import Callable, Iterable, Sequence
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from querygap.textnorm import check_text_series

__all__ = [
    "BUILTIN_KINDS",
    "PLACEHOLDERS",
    "RedactionRules",
    "hmac_pads",
    "keyed_hash_series",
    "luhn_valid",
    "luhn_valid_array",
    "new_secret",
    "redact_series",
    "redact_text",
]

#: Built-in kinds of personal data, in the order they are applied.
BUILTIN_KINDS: tuple[str, ...] = ("email", "card", "ipv6", "ipv4", "phone")
PLACEHOLDERS: dict[str, str] = {
    "email": "[email]",
    "card": "[card]",
    "ipv6": "[ip]",
    "ipv4": "[ip]",
    "phone": "[phone]",
}
CARD_MIN_DIGITS = 13
CARD_MAX_DIGITS = 19
PHONE_MIN_DIGITS = 9  # local numbers
PHONE_MAX_DIGITS = 15  # E.164 maximum
HASH_HEX_CHARS = 16  # 64 bits: about 3e-8 chance of any collision among a million keys
HMAC_BLOCK_BYTES = 64  # SHA-256's block size (RFC 2104 calls it B)

_LABEL = re.compile(r"[a-z][a-z0-9_]*")
_DIGIT = re.compile(r"\d")

_EMAIL = re.compile(r"(?<![\w.%+'-])[\w.%+'-]+@(?:[\w-]+\.)+[^\W\d_]{2,}(?![\w-])")

# A maximal run of digit groups joined by single spaces or hyphens.
_CARD_RUN = re.compile(r"(?<![\w+])(?<!\d[.,])\d+(?:[ -]\d+)*(?!\w)(?![.,]\d)")
_DIGIT_GROUP = re.compile(r"\d+")

_IPV6_CANDIDATE = re.compile(r"(?<![\w:.])[0-9a-f:.]*:[0-9a-f:.]*(?!\w)", re.IGNORECASE)
_OCTET = r"(?:25[0-5]|2[0-4][0-9]|[01]?[0-9]?[0-9])"
_IPV4 = re.compile(rf"(?<![\w.])(?:{_OCTET}\.){{3}}{_OCTET}(?!\w)(?!\.[0-9])")

# Phone numbers must not touch a word character, nor a word character through . / : -
_NUM_LEFT = r"(?<![\w+])(?<!\w[./:-])"
_NUM_RIGHT = r"(?!\w)(?![./:-]\w)"
_INTL_PHONE = re.compile(r"(?<![\w+])\+\d(?:[ .()-]{0,2}\d){6,14}" + _NUM_RIGHT)
_LOCAL_PHONE = re.compile(
    _NUM_LEFT
    + r"(?:\((?P<area>\d{1,5})\) ?\d{2,8}(?:(?P<psep>[ .-])\d{2,8}(?:(?P=psep)\d{2,8})*)?"
    + r"|(?P<first>\d+)(?:(?P<sep>[ .-])\d{2,8}(?:(?P=sep)\d{2,8})*)?)"
    + _NUM_RIGHT
)


@dataclass(frozen=True)
class RedactionRules:
    """What to redact in query text.

    Parameters
    ----------
    extra_patterns : sequence of (label, regex), default=()
        Site-specific patterns (for example customer numbers), applied after the built-in kinds;
        each match becomes ``[label]``. Labels are lower-case identifiers, unique, and different
        from the built-in kinds and from "ip".
    enabled : bool, default=True
        False turns redaction off entirely (texts are returned unchanged, all counts 0).
    kinds : frozenset of str, default=all of ``BUILTIN_KINDS``
        Built-in kinds to apply.

    Raises
    ------
    ValueError
        For a bad label, an unknown kind, or a pattern that does not compile or matches the empty
        string; the message names the pattern.
    """

    extra_patterns: Sequence[tuple[str, str]] = ()
    enabled: bool = True
    kinds: frozenset[str] = frozenset(BUILTIN_KINDS)
    _compiled: tuple[tuple[str, re.Pattern[str]], ...] = field(
        init=False, repr=False, compare=False
    )

    def __post_init__(self) -> None:
        extras = tuple((str(label), str(pattern)) for label, pattern in self.extra_patterns)
        kinds = frozenset(self.kinds)
        unknown = sorted(kinds - set(BUILTIN_KINDS))
        if unknown:
            raise ValueError(
                f"unknown redaction kind(s) {unknown}; choose from {list(BUILTIN_KINDS)}"
            )
        compiled: list[tuple[str, re.Pattern[str]]] = []
        seen: set[str] = set()
        for label, pattern in extras:
            where = f"extra redaction pattern {label!r} ({pattern!r})"
            if not _LABEL.fullmatch(label):
                raise ValueError(f"{where}: label must match [a-z][a-z0-9_]*")
            if label in BUILTIN_KINDS or label == "ip" or label in seen:
                raise ValueError(f"{where}: label is already used")
            seen.add(label)
            try:
                regex = re.compile(pattern)
            except re.error as err:
                raise ValueError(f"{where}: not a valid regular expression: {err}") from None
            if regex.search("") is not None:
                raise ValueError(f"{where}: matches the empty string")
            compiled.append((label, regex))
        object.__setattr__(self, "extra_patterns", extras)
        object.__setattr__(self, "kinds", kinds)
        object.__setattr__(self, "_compiled", tuple(compiled))

    @property
    def labels(self) -> tuple[str, ...]:
        """Keys of the counts dict: the built-in kinds in order, then the extra labels."""
        return BUILTIN_KINDS + tuple(label for label, _ in self.extra_patterns)


# --------------------------------------------------------------------------------------------
# Luhn check


def luhn_valid(digits: str) -> bool:
    """Luhn (mod 10) check of a string of ASCII digits; the empty string is not valid.

    From the rightmost digit (the check digit) leftwards, every second digit is doubled and 9 is
    subtracted when the double exceeds 9; the number is valid when the sum is divisible by 10.

    >>> luhn_valid("79927398713")
    True
    """
    return bool(luhn_valid_array([digits])[0])


def luhn_valid_array(candidates: Iterable[str]) -> np.ndarray:
    """Vectorised :func:`luhn_valid` over many digit strings.

    Strings are right-aligned in a zero-padded ``uint8`` matrix (leading zeros do not change the
    Luhn sum), so the check is a few whole-array operations.

    Returns
    -------
    numpy.ndarray of bool, shape (n,)

    Raises
    ------
    ValueError
        If a string holds anything but the ASCII digits 0-9.
    """
    values = np.asarray(list(candidates), dtype=str)
    if values.size == 0:
        return np.zeros(0, dtype=bool)
    lengths = np.char.str_len(values)
    width = max(int(lengths.max()), 1)
    try:
        raw = np.char.encode(np.char.zfill(values, width), "ascii").tobytes()
        matrix = np.frombuffer(raw, dtype=np.uint8).reshape(values.size, width).astype(np.int16)
        matrix -= ord("0")
        ok = bool(((matrix >= 0) & (matrix <= 9)).all())
    except UnicodeEncodeError:
        ok = False
    if not ok:
        bad = next(v for v in values.tolist() if not (v.isascii() and v.isdigit()) and v)
        raise ValueError(f"Luhn check needs ASCII digits only, got {bad!r}")
    from_right = np.arange(width)[::-1]  # 0 for the check digit
    doubled = matrix * 2
    doubled = np.where(doubled > 9, doubled - 9, doubled)
    terms = np.where(from_right % 2 == 1, doubled, matrix)
    valid: np.ndarray = (terms.sum(axis=1) % 10 == 0) & (lengths > 0)
    return valid


# --------------------------------------------------------------------------------------------
# Matchers: each returns the replacement for one match and counts what it replaced


def _ascii_digits(text: str) -> str:
    """The decimal digits of ``text`` as ASCII (``\\d`` also matches other scripts' digits)."""
    return "".join(str(int(char)) for char in _DIGIT.findall(text))


def _is_card_grouping(sizes: list[int], separators: set[str]) -> bool:
    """Printed card layouts: one block, 4-4-4-4(-3), or 4-6-5 / 4-6-4, one kind of separator."""
    if len(sizes) == 1:
        return True
    if len(separators) != 1:
        return False
    return (all(size == 4 for size in sizes[:-1]) and sizes[-1] in (3, 4)) or sizes in (
        [4, 6, 5],
        [4, 6, 4],
    )


def _card_windows(run: str) -> list[tuple[int, int, str]]:
    """Windows of whole digit groups in ``run`` laid out like a card: (start, end, digits)."""
    groups = [(m.start(), m.end(), _ascii_digits(m.group())) for m in _DIGIT_GROUP.finditer(run)]
    windows = []
    for i in range(len(groups)):
        digits = ""
        for j in range(i, len(groups)):
            digits += groups[j][2]
            if len(digits) > CARD_MAX_DIGITS:
                break
            if len(digits) < CARD_MIN_DIGITS:
                continue
            sizes = [len(g[2]) for g in groups[i : j + 1]]
            separators = {
                run[a[1] : b[0]] for a, b in zip(groups[i:j], groups[i + 1 : j + 1], strict=True)
            }
            if _is_card_grouping(sizes, separators):
                windows.append((groups[i][0], groups[j][1], digits))
    return windows


class _Counter:
    """A ``re.sub`` callback that counts replacements; ``choose`` may decline a match."""

    def __init__(self, placeholder: str, choose: Callable[[re.Match[str]], bool] | None = None):
        self.placeholder = placeholder
        self.choose = choose
        self.count = 0

    def __call__(self, match: re.Match[str]) -> str:
        if not match.group() or (self.choose is not None and not self.choose(match)):
            return match.group()
        self.count += 1
        return self.placeholder


class _CardCounter:
    """Replace Luhn-valid windows of a digit run, longest first, left to right."""

    def __init__(self, valid: set[str]):
        self.valid = valid
        self.count = 0

    def __call__(self, match: re.Match[str]) -> str:
        run = match.group()
        windows = _card_windows(run)
        pieces: list[str] = []
        position = 0
        for start, end, digits in sorted(windows, key=lambda w: (w[0], -(w[1] - w[0]))):
            if start >= position and digits in self.valid:
                pieces += [run[position:start], PLACEHOLDERS["card"]]
                position = end
                self.count += 1
        return "".join(pieces) + run[position:]


class _IPv6Counter:
    def __init__(self) -> None:
        self.count = 0

    def __call__(self, match: re.Match[str]) -> str:
        token = match.group()
        core = token.rstrip(".")
        if core.endswith(":") and not core.endswith("::"):
            core = core[:-1]
        if not any(char.isdigit() for char in core):
            return token
        try:
            address = ipaddress.IPv6Address(core)
        except ValueError:
            return token
        groups = [part for part in core.split(":") if part]
        if len(groups) + (1 if address.ipv4_mapped or "." in core else 0) < 3:
            return token
        self.count += 1
        return PLACEHOLDERS["ipv6"] + token[len(core) :]


def _is_local_phone(match: re.Match[str]) -> bool:
    text = match.group()
    if not PHONE_MIN_DIGITS <= len(_DIGIT.findall(text)) <= PHONE_MAX_DIGITS:
        return False
    sep = match.group("sep")
    if match.group("area") is not None or sep is None:
        return True
    groups = text.split(sep)
    if sep == ".":
        return len(groups) >= 3 and len(groups[0]) >= 2
    if sep == " ":
        return groups[0].startswith("0") or [len(g) for g in groups] == [3, 3, 4]
    return True


# --------------------------------------------------------------------------------------------
# Public API


def _substitute(
    texts: pd.Series, rows: pd.Series, pattern: re.Pattern[str], repl: Callable[..., str]
) -> pd.Series:
    """Run ``pattern.sub(repl, ·)`` on the rows selected by ``rows`` only (a cheap prefilter)."""
    if rows.any():
        texts = texts.copy()
        texts[rows] = texts[rows].str.replace(pattern, repl, regex=True)
    return texts


def redact_series(texts: pd.Series, rules: RedactionRules) -> tuple[pd.Series, dict[str, int]]:
    """Replace personal data in many texts; see the module docstring for what counts.

    Parameters
    ----------
    texts : pandas.Series of str
        Missing values stay missing.
    rules : RedactionRules

    Returns
    -------
    redacted : pandas.Series
        Same index and dtype as ``texts``.
    counts : dict of str to int
        Replacements per kind, with every kind of ``rules.labels`` present (0 when none).

    Raises
    ------
    TypeError
        If a non-missing value is not a str; the message names its index label.
    """
    counts = dict.fromkeys(rules.labels, 0)
    if not rules.enabled or texts.empty:
        return texts.copy(), counts
    check_text_series(texts)
    out = texts.astype(object)
    present = out.notna()
    digit_count = out.str.count(_DIGIT).fillna(0)
    kinds = rules.kinds

    if "email" in kinds:
        email = _Counter(PLACEHOLDERS["email"])
        out = _substitute(out, out.str.contains("@", regex=False, na=False), _EMAIL, email)
        counts["email"] = email.count
    if "card" in kinds:
        rows = present & (digit_count >= CARD_MIN_DIGITS)
        if rows.any():
            runs = out[rows].str.findall(_CARD_RUN).explode().dropna()
            windows = {w[2] for run in runs.unique() for w in _card_windows(run)}
            candidates = sorted(windows)
            valid = {
                c for c, ok in zip(candidates, luhn_valid_array(candidates), strict=True) if ok
            }
            card = _CardCounter(valid)
            out = _substitute(out, rows, _CARD_RUN, card)
            counts["card"] = card.count
    if "ipv6" in kinds:
        ipv6 = _IPv6Counter()
        rows = (digit_count >= 1) & out.str.contains(":", regex=False, na=False)
        out = _substitute(out, rows, _IPV6_CANDIDATE, ipv6)
        counts["ipv6"] = ipv6.count
    if "ipv4" in kinds:
        ipv4 = _Counter(PLACEHOLDERS["ipv4"])
        out = _substitute(out, present & (digit_count >= 4), _IPV4, ipv4)
        counts["ipv4"] = ipv4.count
    if "phone" in kinds:
        intl = _Counter(PLACEHOLDERS["phone"])
        local = _Counter(PLACEHOLDERS["phone"], _is_local_phone)
        out = _substitute(out, present & (digit_count >= 7), _INTL_PHONE, intl)
        out = _substitute(out, present & (digit_count >= PHONE_MIN_DIGITS), _LOCAL_PHONE, local)
        counts["phone"] = intl.count + local.count
    for label, regex in rules._compiled:
        extra = _Counter(f"[{label}]")
        out = _substitute(out, present, regex, extra)
        counts[label] = extra.count

    if isinstance(texts.dtype, pd.StringDtype):
        out = out.astype(texts.dtype)
    return out, counts


def redact_text(text: str, rules: RedactionRules) -> str:
    """Redact one text; the same result as :func:`redact_series` on a one-row Series.

    >>> redact_text("mail ann@example.com", RedactionRules())
    'mail [email]'
    """
    if not isinstance(text, str):
        raise TypeError(f"text must be str, got {type(text).__name__} {text!r}")
    redacted, _ = redact_series(pd.Series([text], dtype=object), rules)
    return str(redacted.iloc[0])


def new_secret() -> bytes:
    """A fresh 32-byte key for :func:`keyed_hash_series` (from the ``secrets`` module)."""
    return secrets.token_bytes(32)


def keyed_hash_series(keys: pd.Series, secret: bytes) -> pd.Series:
    """Pseudonymise session or user keys: HMAC-SHA256 of ``str(key)`` in UTF-8, hex, first 16.

    Each distinct key is hashed once (``pandas.factorize``); missing keys stay None. The same
    key and secret always give the same pseudonym, so sessions can still be grouped; without the
    secret the key cannot be recovered by trying candidates.

    Parameters
    ----------
    keys : pandas.Series
    secret : bytes
        At least 16 bytes; :func:`new_secret` makes one.

    Returns
    -------
    pandas.Series of object (str or None), same index and name as ``keys``.
    """
    if not isinstance(secret, bytes) or len(secret) < 16:
        raise ValueError("the hashing secret must be bytes of length 16 or more (see new_secret)")
    codes, uniques = pd.factorize(keys, use_na_sentinel=True)
    # hmac.digest is the one-shot C path: the same HMAC-SHA256 as hmac.new(...), about 4x faster.
    digest = hmac.digest
    hashes = [
        digest(secret, str(key).encode("utf-8"), "sha256").hex()[:HASH_HEX_CHARS] for key in uniques
    ]
    lookup = np.array([*hashes, None], dtype=object)  # code -1 (missing) picks the final None
    return pd.Series(lookup[codes], index=keys.index, name=keys.name, dtype=object)


def hmac_pads(secret: bytes) -> tuple[bytes, bytes]:
    """The two padded keys of HMAC-SHA256 (RFC 2104), so SQL can compute the same pseudonyms.

    HMAC(K, m) = H((K' xor opad) || H((K' xor ipad) || m)), where H is SHA-256, K' is the secret
    (first hashed with H if longer than the 64-byte block) padded with zero bytes to 64 bytes,
    ipad is the byte 0x36 and opad the byte 0x5c repeated 64 times. The load stage evaluates
    ``left(sha256(outer || unhex(sha256(inner || encode(key)))), 16)`` in DuckDB, which equals
    :func:`keyed_hash_series` on the same key and secret.

    Parameters
    ----------
    secret : bytes
        At least 16 bytes, as for :func:`keyed_hash_series`.

    Returns
    -------
    inner, outer : bytes
        K' xor ipad and K' xor opad, 64 bytes each.
    """
    if not isinstance(secret, bytes) or len(secret) < 16:
        raise ValueError("the hashing secret must be bytes of length 16 or more (see new_secret)")
    key = hashlib.sha256(secret).digest() if len(secret) > HMAC_BLOCK_BYTES else secret
    key = key.ljust(HMAC_BLOCK_BYTES, b"\0")
    inner = bytes(byte ^ 0x36 for byte in key)
    outer = bytes(byte ^ 0x5C for byte in key)
    return inner, outer
