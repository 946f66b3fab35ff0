"""The rules file: parsing, checks with file:line:column, and applying rules to queries."""

from __future__ import annotations

from pathlib import Path

import pandas as pd
import pytest

from querygap.analyzer import AnalyzerSettings
from querygap.errors import InputError
from querygap.rules import (
    RULE_COLUMNS,
    Rule,
    apply_rules,
    parse_rules,
    read_rules,
    select_rules,
    targeted,
    write_rules,
)

HEADER = ",".join(RULE_COLUMNS) + "\n"


def test_parses_rows_with_lines_and_counts() -> None:
    text = HEADER + "spelling,meeter,meter,one-way,accepted,42,40,typo\n\n"
    text += 'synonym,sewer,wastewater,both-ways,proposed,,,"a, b"\n'
    rules = parse_rules(text, "r.csv")
    assert [(r.term, r.line, r.searches, r.note) for r in rules] == [
        ("meeter", 2, 42, "typo"),
        ("sewer", 4, None, "a, b"),
    ]
    assert [r.term for r in select_rules(rules)] == ["meeter"]
    assert [r.term for r in select_rules(rules, not_rejected=True)] == ["meeter", "sewer"]


@pytest.mark.parametrize(
    ("row", "message"),
    [
        ("speling,a,b,one-way,accepted,,,", "r.csv:2:kind: unknown kind 'speling'"),
        ("synonym,a,b,sideways,accepted,,,", "r.csv:2:direction: unknown direction 'sideways'"),
        ("synonym,a,b,one-way,done,,,", "r.csv:2:status: unknown status 'done'"),
        ("synonym,,b,one-way,accepted,,,", "r.csv:2:term: term is empty"),
        ("synonym,Sewer,b,one-way,accepted,,,", "r.csv:2:term: term 'Sewer' is not normalized"),
        ("synonym,a,a,one-way,accepted,,,", "r.csv:2:replacement: replacement 'a' equals"),
        ("synonym,a,b,one-way,accepted,many,,", "r.csv:2:searches: searches must be a whole"),
        ("spelling,a,b,both-ways,accepted,,,", "r.csv:2:direction: a spelling rule is one-way"),
        ("synonym,a,b,one-way,accepted,,", "r.csv:2: the row has 7 fields; the header has 8"),
    ],
)
def test_bad_rows_name_file_line_column_and_value(row: str, message: str) -> None:
    with pytest.raises(InputError) as err:
        parse_rules(HEADER + row + "\n", "r.csv")
    assert str(err.value).startswith(message)


def test_bad_header_and_empty_file() -> None:
    with pytest.raises(
        InputError, match=r"r.csv:1: the header must hold exactly .* unknown \['x'\]"
    ):
        parse_rules(HEADER.strip() + ",x\n", "r.csv")
    with pytest.raises(InputError, match="r.csv:1: the file is empty"):
        parse_rules("", "r.csv")


def test_duplicates_and_conflicts_name_both_lines() -> None:
    dup = HEADER + "synonym,a,b,both-ways,accepted,,,\nsynonym,b,a,one-way,accepted,,,\n"
    with pytest.raises(InputError, match="r.csv:3:term: duplicate rule 'b -> a'; line 2"):
        parse_rules(dup, "r.csv")
    clash = HEADER + "spelling,a,b,one-way,accepted,,,\nvariant,a,c,one-way,accepted,,,\n"
    with pytest.raises(InputError, match="r.csv:3:replacement: 'a' is rewritten to 'c' here"):
        parse_rules(clash, "r.csv")
    # One-way in both directions is two different rules, not a duplicate.
    assert (
        len(
            parse_rules(
                HEADER + "synonym,a,b,one-way,accepted,,,\nsynonym,b,a,one-way,accepted,,,\n"
            )
        )
        == 2
    )


def test_write_then_read_round_trips(tmp_path: Path) -> None:
    rules = [
        Rule("variant", "smartmeter", "smart meter", line=2, searches=5, note="=SUM(1)"),
        Rule("synonym", "sewer", "wastewater", "both-ways", "parked", line=3),
    ]
    back = read_rules(write_rules(rules, tmp_path / "rules.csv"))
    assert back == rules
    # The formula-looking note is neutralised on disk.
    assert "'=SUM(1)" in (tmp_path / "rules.csv").read_text()


PLAIN = AnalyzerSettings()
KNOWN = pd.Index(["bill", "leak", "smart", "meter", "report", "a", "pay", "wastewater"])


def _apply(queries: list[str], rules: list[Rule]) -> list[str]:
    return apply_rules(pd.Series(queries), rules, PLAIN, KNOWN).rewritten.tolist()


def test_spelling_and_variant_rewrite_whole_terms_with_phrases() -> None:
    rules = [Rule("spelling", "meeter", "meter"), Rule("variant", "smartmeter", "smart meter")]
    got = _apply(["smartmeter", "meeter reading", "meeters", "my smartmeter meeter"], rules)
    assert got == ["smart meter", "meter reading", "meeters", "my smart meter meter"]


def test_synonym_rewrites_unknown_and_expands_known_terms() -> None:
    one_way = [Rule("synonym", "sewer", "wastewater")]
    assert _apply(["sewer blocked"], one_way) == ["wastewater blocked"]  # sewer unknown
    both = [Rule("synonym", "bill", "leak", "both-ways")]
    # bill and leak are both known: each is kept and the other added; no chaining.
    assert _apply(["pay bill", "report a leak", "water"], both) == [
        "pay bill leak",
        "report a leak bill",
        "water",
    ]


def test_touches_and_changed_flags() -> None:
    rules = [Rule("spelling", "meeter", "meter"), Rule("variant", "ebill", "e-bill")]
    applied = apply_rules(pd.Series(["meeter", "ebill", "pay"]), rules, PLAIN, KNOWN)
    assert applied.changed.tolist() == [True, False, False]  # ebill and e-bill analyze alike
    assert applied.touches.to_dict("list") == {"row": [0], "rule": [0]}


def test_targeted_counts_overlapping_terms() -> None:
    rules = [Rule("synonym", "hosepipe", "restriction"), Rule("synonym", "hosepipe ban", "x")]
    hits = targeted(pd.Series(["hosepipe ban", "hosepipe", "hosepipes"]), rules, PLAIN)
    assert hits.to_dict("list") == {"row": [0, 0, 1], "rule": [0, 1, 0]}
