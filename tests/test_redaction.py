"""Tests for querygap.redaction."""

import hashlib
import hmac

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from querygap.redaction import (
    BUILTIN_KINDS,
    RedactionRules,
    keyed_hash_series,
    luhn_valid,
    luhn_valid_array,
    new_secret,
    redact_series,
    redact_text,
)

RULES = RedactionRules()

# Luhn check values: REFERENCES.md "Check values" (computed).
LUHN_CASES = [
    ("79927398713", True),
    ("79927398710", False),
    ("4111111111111111", True),
    ("4012888888881881", True),
    ("378282246310005", True),
    ("4111111111111112", False),
]


@pytest.mark.parametrize(("digits", "valid"), LUHN_CASES)
def test_luhn_reference_values(digits: str, valid: bool) -> None:
    assert luhn_valid(digits) is valid


def test_luhn_array_matches_scalar() -> None:
    digits = [d for d, _ in LUHN_CASES] + ["0", "18", "059"]
    expected = [luhn_valid(d) for d in digits]
    assert luhn_valid_array(digits).tolist() == expected
    assert luhn_valid_array(np.array(digits)).dtype == bool


def test_luhn_empty_and_bad_input() -> None:
    assert luhn_valid("") is False
    assert luhn_valid_array([]).shape == (0,)
    for bad in ["12a", "-12", "4111 1111", "\u0661\u0662"]:
        with pytest.raises(ValueError, match="ASCII digits only"):
            luhn_valid(bad)


@st.composite
def luhn_numbers(draw: st.DrawFn, length: int | None = None) -> str:
    """A random digit string of 13-19 digits completed with its Luhn check digit."""
    size = length or draw(st.integers(13, 19))
    body = draw(st.text(alphabet="0123456789", min_size=size - 1, max_size=size - 1))
    body = str(draw(st.integers(1, 9))) + body[1:]
    for check in "0123456789":
        if luhn_valid(body + check):
            return body + check
    raise AssertionError("some check digit always completes a Luhn number")


@given(luhn_numbers(), st.integers(0, 18))
def test_luhn_detects_every_single_digit_error(number: str, position: int) -> None:
    # The Luhn scheme detects any single-digit substitution (a property of the scheme).
    position %= len(number)
    wrong = str((int(number[position]) + 1) % 10)
    assert luhn_valid(number)
    assert not luhn_valid(number[:position] + wrong + number[position + 1 :])


# Each row: text, expected output. Reserved ranges: example.com (RFC 2606), 192.0.2.0/24
# (RFC 5737), 2001:db8::/32 (RFC 3849), +44 20 7946 0xxx (Ofcom drama numbers), 555-01xx.
POSITIVE = [
    ("mail ann@example.com", "mail [email]"),
    ("Ann.Lee+shop@mail.example.co.uk.", "[email]."),
    ("o'brien@example.com please", "[email] please"),
    ("card 4111111111111111", "card [card]"),
    ("card 4111 1111 1111 1111 expired", "card [card] expired"),
    ("4012-8888-8888-1881", "[card]"),
    ("amex 3782 822463 10005", "amex [card]"),
    ("order 12 4111 1111 1111 1111", "order 12 [card]"),
    ("from 2001:db8::1 today", "from [ip] today"),
    ("2001:0db8:0000:0000:0000:0000:0000:0001", "[ip]"),
    ("::ffff:192.0.2.1", "[ip]"),
    ("2001:db8:85a3::8a2e:370:7334.", "[ip]."),
    ("ip 192.0.2.44", "ip [ip]"),
    ("192.0.2.1:8080", "[ip]:8080"),
    ("255.255.255.255", "[ip]"),
    ("call +44 20 7946 0958", "call [phone]"),
    ("+44 (0)20 7946 0123", "[phone]"),
    ("+1 (555) 010-0199", "[phone]"),
    ("+4930123456", "[phone]"),
    ("020 7946 0958", "[phone]"),
    ("07700 900123", "[phone]"),
    ("(555) 123-4567", "[phone]"),
    ("555-123-4567 after 6pm", "[phone] after 6pm"),
    ("555.123.4567", "[phone]"),
    ("555 123 4567", "[phone]"),
    ("1-800-555-0199", "[phone]"),
    ("5550100199", "[phone]"),
    ("01 23 45 67 89", "[phone]"),
]

NEGATIVE = [
    "no personal data here",
    "acct 4111111111111112",  # fails Luhn: maybe an account or part number
    "4111 1111 1111 1112",
    "@home and @sum(1+1)",
    "user@localhost",
    "v2.3.1 release",
    "1.2.3",
    "1.2.3.4.5",
    "256.1.1.1",
    "v192.0.2.1",
    "std::vector and abc::def",
    "::",
    "fe80::1",  # fewer than three groups
    "10:30:45",
    "meeting 2026-11-02 10:30",
    "02.11.2026",
    "KV-2210-45",
    "KV-2210-4567-890",
    "abc5551234567",
    "5551234567abc",
    "1999 2000 2001",
    "form 1040 2023 2024",
    "size 10 12 14 16 18",
    "12345678",  # 8 digits: too short for a phone
    "3.14159265358",
    "12.34567890",
    "978-0-306-40615-7",  # hyphenated ISBN: a one-digit group
    "1,234,567,890",
]


@pytest.mark.parametrize(("text", "expected"), POSITIVE)
def test_redacts(text: str, expected: str) -> None:
    assert redact_text(text, RULES) == expected


@pytest.mark.parametrize("text", NEGATIVE)
def test_keeps(text: str) -> None:
    assert redact_text(text, RULES) == text


def test_counts_per_kind_and_order() -> None:
    texts = pd.Series(
        [
            "ann@example.com 4111 1111 1111 1111",
            "192.0.2.1 2001:db8::7 020 7946 0958",
            None,
            "nothing",
        ]
    )
    out, counts = redact_series(texts, RULES)
    assert out[0] == "[email] [card]"
    assert out[1] == "[ip] [ip] [phone]"
    assert pd.isna(out[2])
    assert out[3] == "nothing"
    assert counts == {"email": 1, "card": 1, "ipv6": 1, "ipv4": 1, "phone": 1}
    assert out.dtype == texts.dtype


def test_card_is_not_taken_as_phone() -> None:
    # 16 digits grouped like a phone: the card step runs first.
    assert redact_text("4111 1111 1111 1111", RULES) == "[card]"


def test_extra_patterns_and_kinds() -> None:
    rules = RedactionRules(extra_patterns=[("customer", r"\bCUST-\d{6}\b")], kinds={"email"})
    out, counts = redact_series(pd.Series(["CUST-123456 a@example.com 555-123-4567"]), rules)
    assert out[0] == "[customer] [email] 555-123-4567"
    assert counts == {**dict.fromkeys(BUILTIN_KINDS, 0), "email": 1, "customer": 1}


def test_disabled_rules_change_nothing() -> None:
    texts = pd.Series(["a@example.com"])
    out, counts = redact_series(texts, RedactionRules(enabled=False))
    assert out.tolist() == ["a@example.com"]
    assert set(counts.values()) == {0}


@pytest.mark.parametrize(
    ("extra", "message"),
    [
        ([("order", "(unclosed")], r"'order' \('\(unclosed'\): not a valid regular expression"),
        ([("order", "x*")], "matches the empty string"),
        ([("Order", "x")], "label must match"),
        ([("email", "x")], "already used"),
        ([("a", "x"), ("a", "y")], "already used"),
    ],
)
def test_bad_extra_patterns(extra: list[tuple[str, str]], message: str) -> None:
    with pytest.raises(ValueError, match=message):
        RedactionRules(extra_patterns=extra)


def test_unknown_kind() -> None:
    with pytest.raises(ValueError, match="unknown redaction kind"):
        RedactionRules(kinds=frozenset({"ssn"}))


def test_non_string_value_is_named() -> None:
    with pytest.raises(TypeError, match="row 1 holds float"):
        redact_series(pd.Series(["a", 1.5], dtype=object), RULES)


words = st.text(alphabet="abcxyz -.,:()+", min_size=0, max_size=8)
emails = st.builds(
    "{}@{}.{}".format,
    st.text(alphabet="abcdefghij0123456789._+-", min_size=1, max_size=10).filter(
        lambda s: s[0].isalnum()
    ),
    st.text(alphabet="abcdefghij0123456789-", min_size=1, max_size=10).filter(
        lambda s: s[0].isalnum() and s[-1].isalnum()
    ),
    st.sampled_from(["com", "org", "example", "co.uk"]),
)


CARD_LAYOUTS = {  # printed layouts by number length (one block is always allowed)
    14: [[4, 6, 4]],
    15: [[4, 6, 5], [4, 4, 4, 3]],
    16: [[4, 4, 4, 4]],
    19: [[4, 4, 4, 4, 3]],
}


@st.composite
def grouped_cards(draw: st.DrawFn) -> tuple[str, str]:
    number = draw(luhn_numbers())
    sep = draw(st.sampled_from([" ", "-"]))
    layout = draw(st.sampled_from([[len(number)], *CARD_LAYOUTS.get(len(number), [])]))
    ends = np.cumsum([0, *layout]).tolist()
    grouped = sep.join(number[a:b] for a, b in zip(ends[:-1], ends[1:], strict=True))
    return number, grouped


@settings(max_examples=300)
@given(words, emails, words)
def test_email_never_survives(before: str, email: str, after: str) -> None:
    out = redact_text(f"{before} {email} {after}", RULES)
    assert email not in out
    assert "@" not in out


@settings(max_examples=300)
@given(words, grouped_cards(), words)
def test_card_digits_never_survive(before: str, card: tuple[str, str], after: str) -> None:
    number, grouped = card
    out = redact_text(f"{before} {grouped} {after}", RULES)
    assert grouped not in out
    assert number not in out.replace(" ", "").replace("-", "")


mixed_text = st.text(alphabet="0123456789abcdef:.-+() @x/,", max_size=40)


@settings(max_examples=500)
@given(mixed_text)
def test_idempotent(text: str) -> None:
    once = redact_text(text, RULES)
    assert redact_text(once, RULES) == once


@settings(max_examples=300)
@given(st.text(max_size=40).filter(lambda t: "@" not in t and not any(c.isdigit() for c in t)))
def test_text_without_digits_or_at_is_unchanged(text: str) -> None:
    assert redact_text(text, RULES) == text


@settings(max_examples=100)
@given(st.lists(mixed_text, max_size=15))
def test_series_equals_per_text(texts: list[str]) -> None:
    out, _ = redact_series(pd.Series(texts, dtype=object), RULES)
    assert out.tolist() == [redact_text(t, RULES) for t in texts]


def test_keyed_hash_matches_hmac_and_keeps_missing() -> None:
    secret = b"k" * 32
    keys = pd.Series(["s1", None, "s2", "s1", np.nan], index=list("abcde"), name="session")
    out = keyed_hash_series(keys, secret)
    # Reference: the standard library's hmac module (RFC 2104 HMAC with SHA-256).
    expected = hmac.new(secret, b"s1", hashlib.sha256).hexdigest()[:16]
    assert out["a"] == out["d"] == expected
    assert out["c"] != out["a"] and len(out["c"]) == 16
    assert out["b"] is None and out["e"] is None
    assert out.index.tolist() == list("abcde") and out.name == "session"


def test_keyed_hash_depends_on_secret() -> None:
    keys = pd.Series(["u1"])
    first, second = new_secret(), new_secret()
    assert len(first) == 32 and first != second
    assert keyed_hash_series(keys, first)[0] != keyed_hash_series(keys, second)[0]


def test_keyed_hash_rejects_short_secret() -> None:
    with pytest.raises(ValueError, match="16 or more"):
        keyed_hash_series(pd.Series(["u1"]), b"short")


@pytest.mark.parametrize(
    "text",
    [
        "2024 2024 493029",  # passes Luhn, but 4-4-6 is no card layout
        "4111 1111-1111 1111",  # mixed separators
        "41 11 11 11 11 11 11 11",
    ],
)
def test_only_card_layouts_are_cards(text: str) -> None:
    digits = text.replace(" ", "").replace("-", "")
    assert luhn_valid(digits)  # so only the layout rule keeps it
    assert "[card]" not in redact_text(text, RULES)
