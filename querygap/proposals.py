"""The proposal stage: fixes for the unmatched terms of a review's failing queries.

Reads review_queries, query_terms, terms, searches, search_sessions, decisions; writes proposals
and proposal_examples. A term is *unmatched* in a failing (zero or low) query when no page has it
(df = 0) or the query's best page lacks it. For every unmatched term with at least
``min_searches`` searches, candidates come from :mod:`querygap.nearmiss`:

- spelling: content terms within the edit limit of the term's length;
- variant: same Snowball stem, a compound split into two content terms, two adjacent query terms
  the content writes as one word;
- synonym: reformulations (a failing query followed within ``max_gap_seconds`` in the same
  session, bots excluded, by a query that differs in that term alone), kept when the pair is seen
  ``min_pairs`` times and its signed Dunning G^2 reaches ``min_g2``; or shared query contexts (the
  same other terms around both) in ``min_contexts`` distinct contexts.

A candidate is measured by :mod:`querygap.rescoring`: its affected queries are rewritten (the term
replaced in the analyzed query) and re-scored against the index; ``rescued`` counts the searches
whose query becomes ok under the review's thresholds. Confidence, in [0, 1]::

    confidence = prior * (0.5 + 0.5 * rescued / searches)

    prior(spelling) = 1 - distance / (allowed + 1)          (1 edit of 2 allowed: 0.67)
    prior(variant)  = 0.7
    prior(synonym)  = G2 / (G2 + min_g2)                    (0.5 at the threshold)
    prior(synonym from contexts alone) = 0.5 * c / (c + 2)  (c distinct shared contexts)

and reformulation pairs raise the prior of a spelling or variant candidate: with n pairs seen,
prior' = 1 - (1 - prior) * 0.5 ** n. A candidate is *convincing* at ``min_confidence`` or more
when it rescues at least one search or has reformulation evidence; spelling, variant and
context candidates are looked for only for terms no page has (df = 0); a context-only synonym
is kept only for a term with no other fix, and an alternative only when it is at least half as
confident as the term's best. An unknown term (df = 0, with letters, not a stop word) with no
convincing candidate and at least ``min_gap_searches`` searches becomes a content gap; gap
terms that occur in the same queries form one topic, with confidence 1 - (the highest confidence
of any candidate of its terms). Rejected decisions are never proposed again.

Only the candidates whose rescued searches can change a result are re-scored, so the results
are those of re-scoring every candidate. Since confidence <= prior:

- a candidate whose prior is under ``min_confidence``, or with fewer than ``min_searches``
  searches, is never convincing; the others have their queries re-scored most searched first,
  stopping as soon as rescuing every search left could not lift the confidence to
  ``min_confidence`` (its stored confidence is then a lower bound, and a gap topic that needs
  it re-scores it, as below);
- a context-only synonym of a term that has another convincing fix is never proposed, and one
  whose prior is under half the term's best confidence, or under its ``max_candidates``-th best,
  can no longer be; they are re-scored best prior first, while they can still be proposed,
  and each one's queries most searched first, stopping as soon as rescuing every search left
  could not lift its confidence to ``min_confidence`` (a context-only prior is under 0.5, so
  such a synonym must rescue most of its searches: most stop after a few queries);
- the rest count only through a content-gap topic's confidence (the highest over its terms'
  candidates): re-scored best prior first, only while their prior exceeds the topic's best,
  and each one's queries most searched first, stopping as soon as rescuing every search left
  could not lift its confidence above the topic's best (its stored confidence is then a lower
  bound, at most that best, so no topic's highest confidence changes).

"Best prior first" runs in rounds of the best 1, 2, 4, ... per term or topic. Each distinct
rewritten query is scored once per round.
"""

from __future__ import annotations

import json
from collections.abc import Callable
from dataclasses import dataclass

import duckdb
import numpy as np
import pandas as pd

from querygap.errors import ConfigError, StageOrderError
from querygap.gap_topics import gap_terms, gap_topics, topic_confidence
from querygap.indexing import Index, load_index
from querygap.nearmiss import join_candidates
from querygap.proposal_candidates import (
    candidates_for,
    confidence,
    convincing,
    prior,
    select_fixes,
)
from querygap.proposal_settings import ProposalSettings
from querygap.rescoring import (
    affected_rows,
    measure,
    rescued_unless_beaten,
    rewrite,
    sequences_of,
    status_of,
    volume,
)
from querygap.sessions import STEP_GAP_SECONDS
from querygap.workspace import frame, run, transaction

__all__ = [
    "KINDS",
    "PROPOSAL_COLUMNS",
    "ProposalRun",
    "ProposalSettings",
    "awaiting_check",
    "candidates_for",
    "confidence",
    "convincing",
    "gap_topics",
    "measure",
    "propose",
    "rewrite",
    "status_of",
    "top_fixes",
]

KINDS = ("spelling", "variant", "synonym", "content_gap")

PROPOSAL_COLUMNS = [
    "kind",
    "term",
    "suggestion",
    "searches",
    "queries",
    "rescued",
    "confidence",
    "rank",
    "evidence",
    "evidence_json",
]


def _evidence(row: pd.Series, settings: ProposalSettings) -> tuple[str, str]:
    """Readable and JSON evidence of one candidate."""
    facts: dict[str, object] = {"searches": int(row["searches"]), "rescued": int(row["rescued"])}
    words = []
    if row["how"] == "edit":
        n = int(row["distance"])
        words.append(
            f"{n} typing slip{'s' if n > 1 else ''} from '{row['suggestion']}', a word on "
            f"{int(row['df'])} pages"
        )
        facts |= {"edits": n, "pages": int(row["df"]), "ok_searches": int(row["ok_searches"])}
    elif row["how"] in ("same stem", "split", "join"):
        text = {
            "same stem": "another form of the same word",
            "split": "the site writes it as two words",
            "join": "the site writes it as one word",
        }[row["how"]]
        words.append(f"{text}: '{row['suggestion']}' (on {int(row['df'])} pages)")
        facts |= {"variant": row["how"], "pages": int(row["df"])}
    if row["n_ab"] > 0:
        minutes = settings.max_gap_seconds / 60
        words.append(
            f"{int(row['n_ab'])} times visitors searched again within {minutes:g} minutes "
            f"with '{row['suggestion']}' instead (G2 = {row['g2']:.1f})"
        )
        facts |= {"reformulations": int(row["n_ab"]), "g2": round(float(row["g2"]), 2)}
    if row["contexts"] > 0:
        words.append(
            f"used with the same other words as '{row['suggestion']}' in "
            f"{int(row['contexts'])} queries"
        )
        facts |= {"shared_contexts": int(row["contexts"])}
    words.append(
        f"with the fix, {int(row['rescued'])} of {int(row['searches'])} searches find a good page"
    )
    return "; ".join(words), json.dumps(facts, sort_keys=True)


def covered_terms(good: pd.DataFrame) -> set[str]:
    """Terms a proposed fix covers: each fix's term and, for a two-word term, both words."""
    return set(good["term"]) | {w for t in good["term"] for w in t.split(" ")}


def term_topics(topics: pd.DataFrame) -> pd.Series:
    """The topic of each gap term, indexed by term."""
    if topics.empty:
        return pd.Series(dtype=np.int64)
    words = topics["terms"].str.split(" ").explode()
    return pd.Series(topics["topic"].to_numpy()[words.index.to_numpy()], index=words.to_numpy())


def measure_what_counts(
    cands: pd.DataFrame,
    failing_terms: pd.DataFrame,
    failing: pd.DataFrame,
    sequences: pd.DataFrame,
    index: Index,
    thresholds: dict[str, float],
    eligible: pd.DataFrame,
    settings: ProposalSettings,
) -> tuple[pd.DataFrame, pd.DataFrame, pd.DataFrame, pd.DataFrame]:
    """Measure the candidates whose rescued searches can change a result (module docstring).

    Returns
    -------
    (cands, good, topics, topic_queries): every candidate with searches, queries, rescued (0
    when not re-scored) and confidence (exact for every candidate that may be proposed, and its
    maximum exact over the terms of every gap topic); the proposed fixes (:func:`select_fixes`);
    the content-gap topics and their queries (:func:`querygap.gap_topics.gap_topics`).
    """
    n = failing["searches"].to_numpy()
    pairs = affected_rows(sequences, cands)  # found once, for the counts and every round
    counts = volume(sequences, cands, n, pairs)
    cands = cands.assign(
        searches=counts["searches"].to_numpy(), queries=counts["queries"].to_numpy(), rescued=0
    )
    bound = pd.Series(np.round(prior(cands, settings), 4), index=cands.index)
    measured = pd.Series(False, index=cands.index)
    exact = pd.Series(True, index=cands.index)

    def rescore_until(
        mask: pd.Series, reaches: Callable[[np.ndarray, np.ndarray], np.ndarray]
    ) -> None:
        """Re-score the masked candidates, each one's queries most searched first, stopping a
        candidate once ``reaches(positions, its confidence were every search left rescued)``
        is False: its rescued searches are then a lower bound (``exact`` False)."""
        if not mask.any():
            cands["confidence"] = confidence(cands, settings)
            return
        sub = cands[mask]

        def can_matter(positions: np.ndarray, most: np.ndarray) -> np.ndarray:
            trial = sub.iloc[positions].assign(rescued=most)
            return reaches(positions, confidence(trial, settings))

        found, done = rescued_unless_beaten(
            sequences,
            sub,
            n,
            index,
            thresholds["min_score"],
            thresholds["min_coverage"],
            can_matter,
            pairs=pairs,
        )
        cands.loc[mask, "rescued"] = found.to_numpy()
        measured[mask] = True
        exact[mask] = done.to_numpy()
        cands["confidence"] = confidence(cands, settings)

    def rescore_while_convincing(mask: pd.Series) -> None:
        """Stop a candidate once it can no longer reach min_confidence (never convincing)."""
        rescore_until(mask, lambda _at, most: most >= settings.min_confidence)

    def rescore_unless_beaten(mask: pd.Series, group: pd.Series) -> None:
        """Stop a candidate once it can no longer rise above its group's best."""
        best = cands["confidence"].groupby(group).max()
        floor = best.reindex(group[mask]).to_numpy()
        rescore_until(mask, lambda at, most: most > floor[at])

    def in_rounds(
        group: pd.Series,
        wanted: pd.Series,
        can_count: Callable[[], pd.Series],
        measure: Callable[[pd.Series], None],
    ) -> None:
        """Re-score the wanted candidates best prior first (1, 2, 4, ... per group and round)
        while ``can_count()`` says their result can still matter."""
        size = 1
        while (pending := wanted & ~measured & can_count()).any():
            order = pd.DataFrame({"group": group[pending], "bound": bound[pending]})
            order = order.sort_values("bound", ascending=False, kind="mergesort")
            heads = order[order.groupby("group").cumcount() < size].index
            measure(pd.Series(cands.index.isin(heads), index=cands.index))
            size *= 2

    may_convince = (bound >= settings.min_confidence) & (cands["searches"] >= settings.min_searches)
    from_contexts = cands["how"] == "contexts"
    rescore_while_convincing(may_convince & ~from_contexts)
    # A context-only synonym is proposed only for a term with no other fix, only when at least
    # half as confident as the term's best and among its best max_candidates.
    fixed = cands.loc[convincing(cands, settings) & ~from_contexts, "term"]
    ctx_wanted = may_convince & from_contexts & ~cands["term"].isin(fixed)

    def may_rank() -> pd.Series:
        conv = convincing(cands, settings) & ctx_wanted
        top = cands[conv].sort_values("confidence", ascending=False, kind="mergesort")
        nth = top.groupby("term").cumcount()
        best = top[nth == 0].set_index("term")["confidence"]
        last = top[nth == settings.max_candidates - 1].set_index("term")["confidence"]
        floor = pd.concat([0.5 * best, last], axis=1).max(axis=1)
        return bound >= floor.reindex(cands["term"]).fillna(-np.inf).to_numpy()

    in_rounds(cands["term"], ctx_wanted, may_rank, rescore_while_convincing)
    # A candidate stopped early holds a lower bound: a gap topic re-scores it if it can matter.
    measured &= exact
    good = select_fixes(cands, settings)
    gaps = gap_terms(eligible, covered_terms(good), settings)
    # A gap topic's confidence is the best confidence of its terms' candidates: the others
    # count only while their prior can beat the best confidence found for their topic.
    topics, topic_queries = gap_topics(failing_terms, pd.Index(gaps))
    topic_of = term_topics(topics)
    topic = pd.Series(topic_of.reindex(cands["term"]).to_numpy(), index=cands.index)

    def may_beat() -> pd.Series:
        best = cands["confidence"].groupby(topic).max()
        return bound > best.reindex(topic).to_numpy()

    in_rounds(
        topic,
        topic.notna() & (cands["searches"] > 0),
        may_beat,
        lambda mask: rescore_unless_beaten(mask, topic),
    )
    return cands, good, topics, topic_queries


@dataclass
class ProposalRun:
    """What the stage stored for one review."""

    review_id: str
    proposals: pd.DataFrame  # PROPOSAL_COLUMNS + review_id, proposal_id
    examples: pd.DataFrame  # review_id, proposal_id, query, other_query, searches


def propose(
    conn: duckdb.DuckDBPyConnection, review_id: str, settings: ProposalSettings | None = None
) -> ProposalRun:
    """Build, measure, rank and store the proposals of a review (replacing an earlier run)."""
    settings = settings or ProposalSettings()
    if settings.max_gap_seconds > STEP_GAP_SECONDS:
        raise ConfigError(
            f"max_gap_seconds {settings.max_gap_seconds:g}: the session stage keeps steps at "
            f"most {STEP_GAP_SECONDS} s apart"
        )
    review = frame(conn, "propose_review", {"review_id": review_id})
    if review.empty:
        raise StageOrderError(f"review {review_id} does not exist; run 'querygap review' first")
    rv = review.iloc[0]
    index = load_index(conn)
    if index.index_id != rv["index_id"]:
        raise StageOrderError(
            f"review {review_id} was scored against index {rv['index_id']}, but the current "
            f"index is {index.index_id}; rerun 'querygap review' for it"
        )
    thresholds = json.loads(rv["settings"])
    key = {"review_id": review_id, "index_id": index.index_id}
    failing_terms = frame(conn, "propose_failing_terms", key)
    vocab = frame(conn, "propose_vocabulary", key)
    subs = frame(
        conn,
        "propose_substitutions",
        key
        | {
            "start": rv["window_start"],
            "end": rv["window_end"],
            "max_gap_seconds": settings.max_gap_seconds,
        },
    )
    contexts = frame(
        conn, "propose_contexts", {**key, "max_context_terms": settings.max_context_terms}
    )
    decisions = frame(conn, "propose_decisions")

    failing = failing_terms.drop_duplicates("query")[["query", "example", "searches"]]
    failing = failing.reset_index(drop=True)
    term_stats = failing_terms.groupby("term").agg(
        searches=("searches", "sum"), queries=("query", "size"), df=("df", "max")
    )
    eligible = term_stats[term_stats["searches"] >= settings.min_searches].reset_index()
    occ = sequences_of(failing["query"], index)
    joins = join_candidates(occ, vocab)
    words = joins["term"].str.split(" ", n=1, expand=True)
    unmatched = set(failing_terms["term"].unique())  # 2M rows, some 100k terms
    cands = candidates_for(eligible, vocab, occ, subs, contexts, settings, joins)
    if not joins.empty:
        keep = words[0].isin(unmatched) | words[1].isin(unmatched)
        cands = cands[~cands["term"].isin(joins.loc[~keep, "term"])]
    rejected = decisions[decisions["decision"] == "rejected"]
    gone = cands.merge(
        rejected[["kind", "term", "replacement"]],
        left_on=["kind", "term", "suggestion"],
        right_on=["kind", "term", "replacement"],
        how="left",
        indicator=True,
    )["_merge"].eq("both")
    cands = cands[~gone.to_numpy()].reset_index(drop=True)
    cands, good, topics, topic_queries = measure_what_counts(
        cands, failing_terms, failing, occ, index, thresholds, eligible, settings
    )
    best_conf = cands.groupby("term")["confidence"].max()
    if not topics.empty:
        topics["confidence"] = topic_confidence(topics, best_conf)
        gap_rejected = set(rejected.loc[rejected["kind"] == "content_gap", "term"])
        topics = topics[~topics["term"].isin(gap_rejected)]

    good = good.sort_values(
        ["rescued", "searches", "term", "rank"], ascending=[False, False, True, True]
    )
    records = []
    for row in good.itertuples(index=False):  # one per proposal (hundreds), not per query
        text, facts = _evidence(pd.Series(row._asdict()), settings)
        records.append(
            {
                "kind": row.kind,
                "term": row.term,
                "suggestion": row.suggestion,
                "searches": row.searches,
                "queries": row.queries,
                "rescued": row.rescued,
                "confidence": row.confidence,
                "rank": int(row.rank),
                "evidence": text,
                "evidence_json": facts,
                "cand": row.cand,
            }
        )
    fixes = pd.DataFrame(records, columns=[*PROPOSAL_COLUMNS, "cand"])
    gaps = pd.DataFrame(
        {
            "kind": "content_gap",
            "term": topics["term"] if not topics.empty else [],
            "suggestion": "",
            "searches": topics["searches"] if not topics.empty else [],
            "queries": topics["queries"] if not topics.empty else [],
            "rescued": 0,
            "confidence": topics["confidence"] if not topics.empty else [],
            "rank": 1,
            "evidence": [
                f"{int(t.searches)} searches in {int(t.queries)} queries use words no page has "
                f"({t.terms}), and no near-miss word fixes them"
                for t in topics.itertuples()
            ],
            "evidence_json": [
                json.dumps(
                    {
                        "searches": int(t.searches),
                        "queries": int(t.queries),
                        "terms": t.terms.split(" "),
                    }
                )
                for t in topics.itertuples()
            ],
            "cand": -1 - topics["topic"].to_numpy() if not topics.empty else [],
        }
    ).sort_values(["searches", "term"], ascending=[False, True])
    out = pd.concat([fixes, gaps], ignore_index=True)
    out.insert(0, "proposal_id", np.arange(1, len(out) + 1, dtype=np.int32))
    out.insert(0, "review_id", review_id)

    examples = _examples(out, failing_terms, subs, topic_queries)
    stored = out.drop(columns="cand")
    with transaction(conn):
        run(conn, "propose_clear_examples", {"review_id": review_id})
        run(conn, "propose_clear", {"review_id": review_id})
        for name, data in (("proposals", stored), ("proposal_examples", examples)):
            conn.register("proposal_df", data)
            conn.execute(f"INSERT INTO {name} BY NAME SELECT * FROM proposal_df")
            conn.unregister("proposal_df")
    return ProposalRun(review_id, stored, examples)


def _examples(
    out: pd.DataFrame, failing_terms: pd.DataFrame, subs: pd.DataFrame, topic_queries: pd.DataFrame
) -> pd.DataFrame:
    """Up to 3 affected queries and 3 reformulation pairs per fix, 5 queries per gap."""
    cols = ["review_id", "proposal_id", "query", "other_query", "searches"]
    fixes = out[out["kind"] != "content_gap"]
    fixes = fixes.assign(first=fixes["term"].str.split(" ").str[0])
    affected = fixes.merge(
        failing_terms[["term", "query", "searches"]].rename(
            columns={"term": "first", "searches": "n"}
        ),
        on="first",
    )
    affected = affected.sort_values(["proposal_id", "n", "query"], ascending=[True, False, True])
    affected = affected.groupby("proposal_id").head(3).assign(other_query="")
    parts = [affected[["review_id", "proposal_id", "query", "other_query", "n"]]]
    if not subs.empty:
        pairs = fixes.merge(
            subs.rename(
                columns={"term_from": "term", "term_to": "suggestion", "next_query": "other_query"}
            ),
            on=["term", "suggestion"],
        )
        pairs = pairs.sort_values(["proposal_id", "pairs"], ascending=[True, False])
        pairs = pairs.groupby("proposal_id").head(3).rename(columns={"pairs": "n"})
        parts.append(pairs[["review_id", "proposal_id", "query", "other_query", "n"]])
    gaps = out[out["kind"] == "content_gap"].assign(topic=lambda d: -1 - d["cand"])
    if not gaps.empty:
        tq = gaps.merge(topic_queries.rename(columns={"searches": "n"}), on="topic")
        tq = tq.sort_values(["proposal_id", "n"], ascending=[True, False]).groupby("proposal_id")
        parts.append(
            tq.head(5).assign(other_query="")[
                ["review_id", "proposal_id", "query", "other_query", "n"]
            ]
        )
    found = pd.concat(parts, ignore_index=True).rename(columns={"n": "searches"})
    found["searches"] = found["searches"].astype(np.int64)
    return found[cols].reset_index(drop=True)


def top_fixes(proposals: pd.DataFrame, n: int = 5) -> list[dict[str, object]]:
    """The ``n`` best fixes (rank 1, not gaps) by rescued searches, for the terminal summary."""
    top = proposals[(proposals["rank"] == 1) & (proposals["kind"] != "content_gap")]
    top = top.sort_values(["rescued", "searches", "term"], ascending=[False, False, True]).head(n)
    cols = ["kind", "term", "suggestion", "searches", "rescued", "confidence"]
    return [
        {k: (v.item() if hasattr(v, "item") else v) for k, v in r.items()}
        for r in top[cols].to_dict("records")
    ]


def awaiting_check(
    conn: duckdb.DuckDBPyConnection, review_id: str, index_id: str
) -> list[dict[str, object]]:
    """Accepted decisions of earlier reviews, with this review's searches of their term."""
    found = frame(conn, "propose_awaiting_check", {"review_id": review_id, "index_id": index_id})
    found["decided_at"] = found["decided_at"].astype(str)
    return [
        {k: (v.item() if hasattr(v, "item") else v) for k, v in r.items()}
        for r in found.to_dict("records")
    ]
