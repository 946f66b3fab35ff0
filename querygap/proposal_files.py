"""The proposal stage's files in a review folder: proposals.csv, rules.csv, gaps.csv, gaps.md.

Every CSV goes through :func:`querygap.safe_csv.write_csv` (formula cells neutralised). In
gaps.md every text that comes from the log or the pages is escaped: HTML special characters
become entities (Python's ``html.escape``) and Markdown punctuation gets a backslash, so a query
like ``<script>`` or ``[link](x)`` shows as typed and does nothing.
"""

from __future__ import annotations

import html
import re
from pathlib import Path

import duckdb
import pandas as pd

from querygap.proposals import PROPOSAL_COLUMNS
from querygap.rules import RULE_COLUMNS
from querygap.safe_csv import write_csv
from querygap.workspace import frame

RULES_COLUMNS = list(RULE_COLUMNS)  # the rules file's format is defined once, in rules.py
PROPOSAL_CSV_COLUMNS = ["proposal_id", *PROPOSAL_COLUMNS]
GAP_COLUMNS = ["topic", "searches", "wordings", "missing_words", "example_queries", "closest_pages"]
_MD_SPECIAL = re.compile(r"([\\`*_{}\[\]()#!|~>])")
# ".", "-" and "+" only start a list (or a numbered list with digits) at the start of the text.
_MD_LEADING = re.compile(r"^(\d*)([.\-+])")
_SAFE_URL = re.compile(r"^https?://[^\s<>\\`]+$")


def md_text(text: object) -> str:
    """Log- or page-derived text made inert in Markdown and HTML (one line).

    HTML is entity-encoded; Markdown's inline markers are backslash-escaped everywhere, list
    markers only where they would start a list, so plain words and numbers stay readable.
    """
    flat = " ".join(str(text).split())
    escaped = _MD_SPECIAL.sub(r"\\\1", html.escape(flat, quote=True))
    return _MD_LEADING.sub(r"\1\\\2", escaped)


def md_url(url: object) -> str:
    """A page address as a Markdown autolink ``<https://...>``, or as inert text if it is odd."""
    text = str(url)
    return f"<{text}>" if _SAFE_URL.match(text) else md_text(text)


def rules_frame(proposals: pd.DataFrame, decisions: pd.DataFrame) -> pd.DataFrame:
    """One rule per top-ranked fix (not gaps); status is the stored decision, else 'proposed'."""
    top = proposals[(proposals["rank"] == 1) & (proposals["kind"] != "content_gap")]
    rules = pd.DataFrame(
        {
            "kind": top["kind"],
            "term": top["term"],
            "replacement": top["suggestion"],
            "direction": "one-way",
            "searches": top["searches"],
            "rescued": top["rescued"],
            "note": top["evidence"],
        }
    )
    known = decisions.rename(columns={"decision": "status"})[
        ["kind", "term", "replacement", "status", "direction"]
    ]
    rules = rules.drop(columns="direction").merge(
        known, on=["kind", "term", "replacement"], how="left"
    )
    rules["status"] = rules["status"].fillna("proposed")
    rules["direction"] = rules["direction"].fillna("one-way")
    return rules[RULES_COLUMNS].reset_index(drop=True)


def gap_frame(proposals: pd.DataFrame, examples: pd.DataFrame, pages: pd.DataFrame) -> pd.DataFrame:
    """The content gaps for writers: topic, volumes, example queries, closest pages."""
    gaps = proposals[proposals["kind"] == "content_gap"]
    ex = examples[examples["proposal_id"].isin(gaps["proposal_id"])]
    typed = ex.assign(item=ex["example"] + " (" + ex["searches"].astype(str) + ")")
    typed = typed.groupby("proposal_id")["item"].agg(" | ".join)
    near = pages.groupby("proposal_id").head(3)
    near = near.assign(
        item=near["title"].where(near["title"] != "", near["url"]) + " <" + near["url"] + ">"
    )
    near = near.groupby("proposal_id")["item"].agg(" | ".join)
    missing = gaps["evidence_json"].str.extract(r'"terms": \[([^\]]*)\]')[0].str.replace('"', "")
    return pd.DataFrame(
        {
            "topic": gaps["term"].to_numpy(),
            "searches": gaps["searches"].to_numpy(),
            "wordings": gaps["queries"].to_numpy(),
            "missing_words": missing.str.replace(",", "").to_numpy(),
            "example_queries": typed.reindex(gaps["proposal_id"]).fillna("").to_numpy(),
            "closest_pages": near.reindex(gaps["proposal_id"]).fillna("").to_numpy(),
        }
    )


def gap_markdown(
    review_id: str,
    gaps: pd.DataFrame,
    examples: pd.DataFrame,
    pages: pd.DataFrame,
    proposals: pd.DataFrame,
) -> str:
    """gaps.md: one section per topic, in plain words for a content writer."""
    lines = [
        f"# What visitors looked for and did not find ({md_text(review_id)})",
        "",
        "Each topic below is something visitors searched for where no page on the site answers.",
        "The words in the searches do not appear on any page, and no spelling or wording change",
        "would lead to a good page. Consider writing a page, or adding a section to one of the",
        "closest pages listed.",
        "",
    ]
    if gaps.empty:
        lines.append("No topics this week: every failing search has a suggested fix.")
    ids = proposals.loc[proposals["kind"] == "content_gap", "proposal_id"].to_numpy()
    typed = _lines_by_proposal(
        examples["proposal_id"],
        [
            f"  - {md_text(text)} ({int(n)})"
            for text, n in zip(examples["example"], examples["searches"], strict=True)
        ],
    )
    near = pages[pages.groupby("proposal_id", sort=False).cumcount() < 3]
    closest = _lines_by_proposal(
        near["proposal_id"],
        [
            f"  - {md_text(title or url)}: {md_url(url)}"
            for title, url in zip(near["title"], near["url"], strict=True)
        ],
    )
    for n, (pid, gap) in enumerate(zip(ids, gaps.itertuples(index=False), strict=True), start=1):
        lines += [
            f"## {n}\\. {md_text(gap.topic)}",
            "",
            f"- Searches this week: {int(gap.searches)}, "
            f"typed in {int(gap.wordings)} different ways",
            f"- Words no page uses: {md_text(gap.missing_words)}",
            "- What visitors typed (searches):",
            *typed.get(pid, []),
        ]
        if pid not in closest:
            lines.append("- Closest pages: none come close.")
        else:
            lines.append("- Closest pages (they share some words but do not answer):")
            lines += closest[pid]
        lines.append("")
    return "\n".join(lines) + "\n"


def _lines_by_proposal(ids: pd.Series, lines: list[str]) -> dict[object, list[str]]:
    """Lines grouped by proposal id, each group in its rows' order (one pass, no filtering)."""
    grouped: dict[object, list[str]] = {}
    for pid, line in zip(ids, lines, strict=True):
        grouped.setdefault(pid, []).append(line)
    return grouped


def write_proposal_files(
    conn: duckdb.DuckDBPyConnection, review_id: str, index_id: str, out_dir: Path
) -> dict[str, Path]:
    """Write the four files from the stored proposals of ``review_id``; returns their paths."""
    out_dir.mkdir(parents=True, exist_ok=True)
    proposals = frame(conn, "propose_list", {"review_id": review_id})
    examples = frame(conn, "propose_example_texts", {"review_id": review_id})
    pages = frame(conn, "propose_gap_pages", {"review_id": review_id, "index_id": index_id})
    decisions = frame(conn, "propose_decisions")
    gaps = gap_frame(proposals, examples, pages)
    paths = {
        "proposals": write_csv(proposals[PROPOSAL_CSV_COLUMNS], out_dir / "proposals.csv"),
        "rules": write_csv(rules_frame(proposals, decisions), out_dir / "rules.csv"),
        "gaps_csv": write_csv(gaps[GAP_COLUMNS], out_dir / "gaps.csv"),
    }
    md = out_dir / "gaps.md"
    md.write_text(gap_markdown(review_id, gaps, examples, pages, proposals), encoding="utf-8")
    paths["gaps_md"] = md
    return paths
