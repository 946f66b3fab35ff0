"""The rules file: read, check and write it, and apply its rules to normalized queries.

File format (``reports/<review>/rules.csv``, UTF-8, comma-separated, one header row), columns
exactly ``kind, term, replacement, direction, status, searches, rescued, note``:

- ``kind``: ``spelling``, ``synonym`` or ``variant``;
- ``term``, ``replacement``: normalized text (as :func:`querygap.textnorm.normalize_query` makes
  it), a single term or a short phrase;
- ``direction``: ``one-way`` (term -> replacement) or ``both-ways`` (also replacement -> term);
  a spelling rule must be one-way (the reverse would spread the misspelling);
- ``status``: ``proposed``, ``accepted``, ``rejected`` or ``parked``;
- ``searches``, ``rescued``: whole numbers >= 0, or empty when unknown;
- ``note``: free text.

A row that breaks a rule raises :class:`~querygap.errors.InputError` naming ``file:line:column``
(the column by name), the value found and what is allowed. Two rows with the same term and
replacement (in either order for a both-ways rule) are duplicates, and two spelling or variant
rows that rewrite the same term differently conflict: both are refused, naming both lines.

How rules act on a query (:func:`apply_rules`). Rule terms and query text pass through the
index's analyzer, and a rule matches whole terms only (``leak`` matches ``report a leak``, not
``leaks``; a phrase term matches the same terms in a row). For each directed pair ``a -> b``:

- spelling and variant rules **rewrite**: ``a`` is replaced by ``b``;
- a synonym (and the reverse pair ``b -> a`` of any both-ways rule) **rewrites** when ``a`` is
  unknown to the index (some term of ``a`` is on no page: keeping it would only count against
  the query) and **expands** when ``a`` is known: ``a`` stays and ``b`` is added after it.

Rules apply in one pass, never to each other's output; where two terms overlap the longer one
wins. A rule whose term and replacement analyze to the same terms (``ebill`` -> ``e-bill`` when
hyphens are dropped) changes nothing and is reported as having no effect.
"""

from __future__ import annotations

import csv
import io
import re
from dataclasses import dataclass, field, fields
from pathlib import Path

import numpy as np
import pandas as pd

from querygap.analyzer import AnalyzerSettings, analyze_series
from querygap.errors import InputError
from querygap.group_text import joined_runs
from querygap.safe_csv import FORMULA_TRIGGERS, write_csv
from querygap.textnorm import normalize_query

RULE_COLUMNS = (
    "kind",
    "term",
    "replacement",
    "direction",
    "status",
    "searches",
    "rescued",
    "note",
)
KINDS = ("spelling", "synonym", "variant")
DIRECTIONS = ("one-way", "both-ways")
STATUSES = ("proposed", "accepted", "rejected", "parked")
#: Statuses applied by default, and with ``not_rejected=True``.
APPLIED = ("accepted",)
NOT_REJECTED = ("proposed", "accepted", "parked")


@dataclass(frozen=True)
class Rule:
    """One row of a rules file; ``line`` is its record's first line in the file."""

    kind: str
    term: str
    replacement: str
    direction: str = "one-way"
    status: str = "accepted"
    searches: int | None = None
    rescued: int | None = None
    note: str = ""
    line: int = 0

    @property
    def label(self) -> str:
        arrow = "<->" if self.direction == "both-ways" else "->"
        return f"{self.term} {arrow} {self.replacement}"


def _where(source: str, line: int, column: str) -> str:
    return f"{source}:{line}:{column}"


def _choice(source: str, line: int, column: str, value: str, allowed: tuple[str, ...]) -> str:
    if value not in allowed:
        raise InputError(
            f"{_where(source, line, column)}: unknown {column} {value!r}; "
            f"expected one of {', '.join(allowed)}"
        )
    return value


def _text(source: str, line: int, column: str, value: str) -> str:
    if not value.strip():
        raise InputError(f"{_where(source, line, column)}: {column} is empty")
    normalized = normalize_query(value)
    if normalized != value:
        raise InputError(
            f"{_where(source, line, column)}: {column} {value!r} is not normalized; "
            f"write it as {normalized!r}"
        )
    return value


def _count(source: str, line: int, column: str, value: str) -> int | None:
    if value.strip() == "":
        return None
    if not re.fullmatch(r"\d+", value.strip()):
        raise InputError(
            f"{_where(source, line, column)}: {column} must be a whole number >= 0 or empty; "
            f"got {value!r}"
        )
    return int(value)


def _unprotect(note: str) -> str:
    """Undo the ``'`` that :func:`write_rules` puts before a note a spreadsheet would run."""
    if note.startswith("'") and note[1:].startswith(FORMULA_TRIGGERS):
        return note[1:]
    return note


def parse_rules(text: str, source: str = "rules.csv") -> list[Rule]:
    """Parse and check the text of a rules file (``source`` names it in errors)."""
    reader = csv.reader(io.StringIO(text.lstrip("\ufeff"), newline=""))
    try:
        header = next(reader)
    except StopIteration:
        raise InputError(
            f"{source}:1: the file is empty; expected the header row {','.join(RULE_COLUMNS)}"
        ) from None
    except csv.Error as exc:
        raise InputError(f"{source}:1: cannot read the header: {exc}") from None
    names = [h.strip() for h in header]
    missing = [c for c in RULE_COLUMNS if c not in names]
    unknown = [c for c in names if c not in RULE_COLUMNS]
    if missing or unknown or len(names) != len(set(names)):
        raise InputError(
            f"{source}:1: the header must hold exactly the columns {','.join(RULE_COLUMNS)}; "
            f"missing {missing or 'none'}, unknown {unknown or 'none'}"
        )
    position = {name: names.index(name) for name in RULE_COLUMNS}
    rules: list[Rule] = []
    first_line = reader.line_num + 1
    while True:
        try:
            row = next(reader)
        except StopIteration:
            break
        except csv.Error as exc:
            raise InputError(f"{source}:{first_line}: cannot read the row: {exc}") from None
        line = first_line
        first_line = reader.line_num + 1
        if not row or all(not cell.strip() for cell in row):
            continue  # a blank line holds no rule
        if len(row) != len(names):
            raise InputError(
                f"{source}:{line}: the row has {len(row)} fields; the header has {len(names)}"
            )
        cell = {name: row[i] for name, i in position.items()}
        kind = _choice(source, line, "kind", cell["kind"].strip(), KINDS)
        direction = _choice(source, line, "direction", cell["direction"].strip(), DIRECTIONS)
        status = _choice(source, line, "status", cell["status"].strip(), STATUSES)
        term = _text(source, line, "term", cell["term"])
        replacement = _text(source, line, "replacement", cell["replacement"])
        if term == replacement:
            raise InputError(
                f"{_where(source, line, 'replacement')}: replacement {replacement!r} equals "
                "the term"
            )
        if kind == "spelling" and direction == "both-ways":
            raise InputError(
                f"{_where(source, line, 'direction')}: a spelling rule is one-way (both-ways "
                f"would rewrite {replacement!r} into the misspelling {term!r})"
            )
        rules.append(
            Rule(
                kind,
                term,
                replacement,
                direction,
                status,
                _count(source, line, "searches", cell["searches"]),
                _count(source, line, "rescued", cell["rescued"]),
                _unprotect(cell["note"]),
                line,
            )
        )
    check_unique(rules, source)
    return rules


def check_unique(rules: list[Rule], source: str) -> None:
    """Refuse duplicate rules and conflicting rewrites, naming both lines."""
    pairs: dict[tuple[str, str], Rule] = {}
    rewrites: dict[str, Rule] = {}
    for rule in rules:
        key = (rule.term, rule.replacement)
        earlier = pairs.get(key)
        reverse = pairs.get(key[::-1])
        if (
            earlier is None
            and reverse is not None
            and "both-ways"
            in (
                rule.direction,
                reverse.direction,
            )
        ):
            earlier = reverse
        if earlier is not None:
            raise InputError(
                f"{_where(source, rule.line, 'term')}: duplicate rule {rule.label!r}; "
                f"line {earlier.line} already has {earlier.label!r}"
            )
        pairs[key] = rule
        if rule.kind in ("spelling", "variant") and rule.status != "rejected":
            earlier = rewrites.get(rule.term)
            if earlier is not None:
                raise InputError(
                    f"{_where(source, rule.line, 'replacement')}: {rule.term!r} is rewritten "
                    f"to {rule.replacement!r} here and to {earlier.replacement!r} on line "
                    f"{earlier.line}; keep one"
                )
            rewrites[rule.term] = rule


def read_rules(path: Path) -> list[Rule]:
    """Read and check a rules file."""
    try:
        text = Path(path).read_text(encoding="utf-8")
    except FileNotFoundError:
        raise InputError(f"{path}: no such rules file") from None
    except UnicodeDecodeError as exc:
        raise InputError(f"{path}: not UTF-8 text ({exc.reason} at byte {exc.start})") from None
    return parse_rules(text, str(path))


def rules_frame(rules: list[Rule]) -> pd.DataFrame:
    """The rules as a table in the file's column order (plus ``line``)."""
    data = pd.DataFrame([{f.name: getattr(r, f.name) for f in fields(Rule)} for r in rules])
    if data.empty:
        data = pd.DataFrame(columns=[f.name for f in fields(Rule)])
    for column in ("searches", "rescued"):
        data[column] = data[column].astype("Int64")
    return data


def write_rules(rules: list[Rule], path: Path) -> Path:
    """Write a rules file (spreadsheet-safe: see :mod:`querygap.safe_csv`)."""
    path.parent.mkdir(parents=True, exist_ok=True)
    return write_csv(rules_frame(rules)[list(RULE_COLUMNS)], path)


def select_rules(rules: list[Rule], not_rejected: bool = False) -> list[Rule]:
    """The rules to apply: accepted ones, or every rule not rejected."""
    wanted = NOT_REJECTED if not_rejected else APPLIED
    return [r for r in rules if r.status in wanted]


def analyzed_text(texts: pd.Series, analyzer: AnalyzerSettings) -> pd.Series:
    """Each text as its analyzer terms joined by single spaces ('' when it has none)."""
    texts = pd.Series(texts, dtype=object).reset_index(drop=True)
    occ = analyze_series(texts, analyzer)  # rows ascending, terms in text order
    joined = joined_runs(occ["row"].to_numpy(), occ["term"].to_numpy(object))
    return joined.reindex(np.arange(len(texts)), fill_value="").astype(object)


@dataclass(frozen=True)
class CompiledRules:
    """Directed pairs ready to match: analyzed 'from' text -> output text and rule numbers."""

    output: dict[str, str]  # analyzed from-text -> text that replaces it
    rules_of: dict[str, list[int]]  # analyzed from-text -> positions of the rules in the list
    no_effect: list[int] = field(default_factory=list)
    pattern: re.Pattern[str] | None = None


def compile_rules(
    rules: list[Rule], analyzer: AnalyzerSettings, known_terms: pd.Index | None = None
) -> CompiledRules:
    """Turn rules into one whole-term pattern (``known_terms``: the index's terms)."""
    sides = analyzed_text(
        pd.Series([r.term for r in rules] + [r.replacement for r in rules], dtype=object),
        analyzer,
    ).tolist()
    terms, replacements = sides[: len(rules)], sides[len(rules) :]
    known = set(known_terms) if known_terms is not None else set()
    actions: dict[str, list[tuple[str, bool, int]]] = {}  # from -> [(to, rewrite, rule)]
    no_effect: list[int] = []
    for number, (rule, a, b) in enumerate(zip(rules, terms, replacements, strict=True)):
        if not a or not b or a == b:
            no_effect.append(number)
            continue
        pairs = [(a, b, rule.kind != "synonym")]
        if rule.direction == "both-ways":
            pairs.append((b, a, False))
        for source, target, always_rewrite in pairs:
            is_known = all(t in known for t in source.split(" "))
            actions.setdefault(source, []).append((target, always_rewrite or not is_known, number))
    output: dict[str, str] = {}
    rules_of: dict[str, list[int]] = {}
    for source, acts in actions.items():
        targets = list(dict.fromkeys(t for t, _, _ in acts))
        keep = not any(rewrite for _, rewrite, _ in acts)
        output[source] = " ".join(([source] if keep else []) + targets)
        rules_of[source] = sorted({n for _, _, n in acts})
    pattern = None
    if output:
        alternatives = sorted(output, key=lambda s: (-len(s.split(" ")), -len(s), s))
        pattern = re.compile(r"(?<= )(?:" + "|".join(map(re.escape, alternatives)) + r")(?= )")
    return CompiledRules(output, rules_of, no_effect, pattern)


@dataclass(frozen=True)
class Applied:
    """Queries after the rules: ``rewritten`` (analyzer terms), ``changed`` and the rules used."""

    rewritten: pd.Series  # object, analyzed text after the rules
    changed: pd.Series  # bool
    touches: pd.DataFrame  # row (position of the query), rule (position in the rules list)


def match_rules(analyzed: pd.Series, compiled: CompiledRules) -> pd.DataFrame:
    """Which rules match which texts: columns ``row`` and ``rule``, one row per pair."""
    empty = pd.DataFrame({"row": np.empty(0, np.int64), "rule": np.empty(0, np.int64)})
    if compiled.pattern is None or analyzed.empty:
        return empty
    padded = " " + analyzed.reset_index(drop=True).astype(object) + " "
    found = padded.str.findall(compiled.pattern).explode().dropna()
    if found.empty:
        return empty
    rules_of = pd.Series(compiled.rules_of, dtype=object)
    pairs = pd.DataFrame({"row": found.index.to_numpy(np.int64), "hit": found.to_numpy()})
    pairs["rule"] = rules_of.reindex(pairs["hit"]).to_numpy()
    pairs = pairs.explode("rule")
    pairs = pairs.drop_duplicates(["row", "rule"]).sort_values(["row", "rule"])
    return pairs[["row", "rule"]].astype(np.int64).reset_index(drop=True)


def apply_rules(
    queries: pd.Series,
    rules: list[Rule],
    analyzer: AnalyzerSettings,
    known_terms: pd.Index | None = None,
) -> Applied:
    """Apply ``rules`` to normalized ``queries`` (semantics in the module docstring).

    ``rewritten`` holds analyzer terms joined by spaces: score it with the analyzer's stemming
    and stop words turned off, since its terms are already final.
    """
    compiled = compile_rules(rules, analyzer, known_terms)
    analyzed = analyzed_text(queries, analyzer)
    if compiled.pattern is None:
        return Applied(
            analyzed, pd.Series(False, index=analyzed.index), match_rules(analyzed, compiled)
        )
    padded = " " + analyzed + " "
    rewritten = padded.str.replace(
        compiled.pattern, lambda m: compiled.output[m.group(0)], regex=True
    ).str.strip()
    return Applied(rewritten, rewritten != analyzed, match_rules(analyzed, compiled))


def targeted(analyzed: pd.Series, rules: list[Rule], analyzer: AnalyzerSettings) -> pd.DataFrame:
    """Which texts contain each rule's term (whole terms): columns ``row`` and ``rule``.

    Unlike :func:`match_rules`, overlapping terms all count: ``hosepipe ban`` contains both the
    term ``hosepipe`` and the term ``hosepipe ban``. Single-term rules are matched by a join on
    the texts' terms; phrase terms by one vectorised substring search each.
    """
    analyzed = analyzed.reset_index(drop=True).astype(object)
    terms = analyzed_text(pd.Series([r.term for r in rules], dtype=object), analyzer)
    words = analyzed.str.split(" ").explode()
    words = words[words.fillna("") != ""]
    long = pd.DataFrame({"row": words.index.to_numpy(np.int64), "term": words.to_numpy()})
    rule_terms = pd.DataFrame({"rule": np.arange(len(rules), dtype=np.int64), "term": terms})
    single = rule_terms[(rule_terms["term"] != "") & ~rule_terms["term"].str.contains(" ")]
    parts = [long.merge(single, on="term")[["row", "rule"]]]
    padded = " " + analyzed + " "
    for rule, phrase in rule_terms[rule_terms["term"].str.contains(" ")].itertuples(index=False):
        hit = np.flatnonzero(padded.str.contains(f" {phrase} ", regex=False).to_numpy())
        parts.append(pd.DataFrame({"row": hit, "rule": rule}))
    pairs = pd.concat(parts, ignore_index=True).astype(np.int64)
    return pairs.drop_duplicates().sort_values(["row", "rule"]).reset_index(drop=True)
