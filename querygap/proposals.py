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

Every candidate is measured: its affected queries are rewritten (the term replaced in the analyzed
query) and all of them re-scored in one batch against the index; ``rescued`` counts the searches
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
terms that occur in the same queries form one topic. Rejected decisions are never proposed
again.
"""

from __future__ import annotations

import json
from dataclasses import dataclass

import duckdb
import numpy as np
import pandas as pd
import scipy.sparse as sp
from scipy.sparse.csgraph import connected_components

from querygap.analyzer import analyze_series
from querygap.errors import StageOrderError
from querygap.indexing import Index, load_index
from querygap.nearmiss import (
    join_candidates,
    spelling_candidates,
    substitution_scores,
    variant_candidates,
)
from querygap.scoring import score_queries
from querygap.workspace import frame, run, transaction

KINDS = ("spelling", "variant", "synonym", "content_gap")


@dataclass(frozen=True)
class ProposalSettings:
    """Thresholds of the proposal stage (all rules of thumb unless a source is named).

    Parameters
    ----------
    min_searches : int, default=2
        Searches a term needs (in failing queries) before fixes are looked for; a term seen once
        is as likely noise as a pattern (common practice, no source).
    min_gap_searches : int, default=3
        Searches a term without a convincing fix needs to be listed as a content gap.
    max_gap_seconds : float, default=300
        Longest gap between a failing search and its reformulation: a similar query again within
        about 5 minutes signals dissatisfaction (Hassan, Shi, Craswell & Ramsey, CIKM 2013).
    min_pairs : int, default=2
        Reformulation pairs a synonym needs.
    min_g2 : float, default=10.83
        Signed G^2 a synonym needs: the chi-square(1) critical value at the 0.1% level. Jones et
        al. (2006) used about 100 on a web-scale log (memory); a site log is far smaller.
    min_contexts : int, default=2
        Distinct shared query contexts a context-only synonym needs.
    max_context_terms : int, default=100
        A shared context held by more ok-query terms than this is not used: it is too common to
        tell which term replaces which, and it would make the context join grow with the square
        of the queries (the demo's largest context holds 53).
    min_confidence : float, default=0.4
        Confidence at which a candidate is convincing: a one-edit fix of a long word needs to
        rescue some searches or have reformulations behind it, a two-edit fix reformulations.
    max_candidates : int, default=3
        Candidates kept per term.
    """

    min_searches: int = 2
    min_gap_searches: int = 3
    max_gap_seconds: float = 300.0
    min_pairs: int = 2
    min_g2: float = 10.83
    min_contexts: int = 2
    max_context_terms: int = 100
    min_confidence: float = 0.4
    max_candidates: int = 3


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
VARIANT_PRIOR = 0.7


def _stop_words() -> frozenset[str]:
    from sklearn.feature_extraction.text import ENGLISH_STOP_WORDS

    return frozenset(ENGLISH_STOP_WORDS)


def status_of(scores: pd.DataFrame, min_score: float, min_coverage: float) -> pd.Series:
    """The flag stage's rule (sql/review.sql review_flag) applied to re-scored queries."""
    zero = scores["n_known"] == 0
    low = (scores["best_score"] < min_score) | (scores["coverage"] < min_coverage)
    return pd.Series(np.where(zero, "zero", np.where(low, "low", "ok")), index=scores.index)


def rewrite(sequences: pd.DataFrame, candidates: pd.DataFrame) -> pd.DataFrame:
    """Apply each candidate to each query holding its term, in the analyzed term sequence.

    Parameters
    ----------
    sequences : DataFrame
        ``row`` (query), ``pos`` and ``term``: the analyzed queries, terms in order.
    candidates : DataFrame
        ``cand`` (id), ``term`` (one word, or two for a join) and ``suggestion``.

    Returns
    -------
    DataFrame with columns cand, row, rewritten (the terms joined by spaces).
    """
    seq = sequences[["row", "pos", "term"]].reset_index(drop=True)
    seq["term"] = seq["term"].astype(object)  # an empty frame may come back float-typed
    seq["next"] = seq["term"].shift(-1).where(seq["row"].eq(seq["row"].shift(-1)), "")
    cand = candidates[["cand", "term", "suggestion"]].copy()
    cand["term"] = cand["term"].astype(object)
    parts = cand["term"].str.split(" ", n=1, expand=True).reindex(columns=[0, 1])
    cand["first"] = parts[0].astype(object)
    cand["second"] = parts[1].astype(object).fillna("")
    hits = seq.merge(cand, left_on="term", right_on="first", suffixes=("", "_c"))
    hits = hits[(hits["second"] == "") | (hits["second"] == hits["next"])]
    pairs = hits[["cand", "row"]].drop_duplicates()
    full = pairs.merge(seq, on="row").merge(
        cand[["cand", "first", "second", "suggestion"]], on="cand"
    )
    full = full.sort_values(["cand", "row", "pos"], kind="mergesort")
    prev = (
        full["term"]
        .shift(1)
        .where(full["row"].eq(full["row"].shift(1)) & full["cand"].eq(full["cand"].shift(1)), "")
    )
    is_first = (full["term"] == full["first"]) & (
        (full["second"] == "") | (full["next"] == full["second"])
    )
    is_second = (full["second"] != "") & (full["term"] == full["second"]) & (prev == full["first"])
    full["out"] = np.where(is_first, full["suggestion"], np.where(is_second, "", full["term"]))
    full = full[full["out"] != ""]
    # The rows are sorted by (cand, row, pos): join each group's terms with one C-level
    # reduction over object strings (no per-group pandas work).
    cand_ids, row_ids = full["cand"].to_numpy(), full["row"].to_numpy()
    if not len(full):
        return pd.DataFrame({"cand": cand_ids, "row": row_ids, "rewritten": np.empty(0, object)})
    starts = np.flatnonzero(
        np.r_[True, (cand_ids[1:] != cand_ids[:-1]) | (row_ids[1:] != row_ids[:-1])]
    )
    words = full["out"].to_numpy(dtype=object) + " "
    joined = pd.Series(np.add.reduceat(words, starts), dtype=object).str.slice(0, -1)
    return pd.DataFrame(
        {"cand": cand_ids[starts], "row": row_ids[starts], "rewritten": joined.to_numpy()}
    )


def measure(
    candidates: pd.DataFrame,
    failing: pd.DataFrame,
    index: Index,
    min_score: float,
    min_coverage: float,
) -> pd.DataFrame:
    """Searches, queries and rescued searches of every candidate, re-scoring in one batch.

    ``failing`` has one row per failing query (``query``, ``searches``). Returns ``candidates``
    with columns searches, queries, rescued added (0 for a candidate that touches no query).
    """
    queries = failing.reset_index(drop=True)
    occ = analyze_series(queries["query"], index.settings.analyzer)
    occ["pos"] = occ.groupby("row").cumcount()
    done = rewrite(occ, candidates)
    unique = pd.Series(pd.unique(done["rewritten"]), dtype=object)
    if len(unique):
        scores = score_queries(unique, index).scores
        ok = status_of(scores, min_score, min_coverage) == "ok"
        done["ok"] = (
            pd.Series(ok.to_numpy(), index=unique.to_numpy()).reindex(done["rewritten"]).to_numpy()
        )
    else:
        done["ok"] = pd.Series(dtype=bool)
    done["searches"] = queries["searches"].to_numpy()[done["row"].to_numpy()]
    done["rescued"] = np.where(done["ok"], done["searches"], 0)
    agg = done.groupby("cand").agg(
        searches=("searches", "sum"), queries=("row", "nunique"), rescued=("rescued", "sum")
    )
    out = candidates.merge(agg, left_on="cand", right_index=True, how="left")
    for col in ("searches", "queries", "rescued"):
        out[col] = out[col].fillna(0).astype(np.int64)
    return out


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


def candidates_for(
    terms: pd.DataFrame,
    vocab: pd.DataFrame,
    sequences: pd.DataFrame,
    subs: pd.DataFrame,
    contexts: pd.DataFrame,
    settings: ProposalSettings,
) -> pd.DataFrame:
    """All candidates of the eligible terms: term, suggestion, kind, how and evidence counts."""
    unknown = terms.loc[terms["df"] == 0, "term"]
    spell = spelling_candidates(unknown, vocab, limit=settings.max_candidates)
    spell = spell.assign(kind="spelling", how="edit")
    var = pd.concat(
        [variant_candidates(unknown, vocab), join_candidates(sequences, vocab)],
        ignore_index=True,
    ).assign(kind="variant")
    cands = pd.concat([var, spell], ignore_index=True)
    # A plural or another ending is a variant even when it is also one edit away.
    cands = cands.drop_duplicates(["term", "suggestion"])
    scored = (
        substitution_scores(subs)
        if len(subs)
        else pd.DataFrame(columns=["term_from", "term_to", "n_ab", "n_a", "n_b", "total", "g2"])
    )
    scored = scored.rename(columns={"term_from": "term", "term_to": "suggestion"})
    in_vocab = pd.Index(vocab["term"])
    scored = scored[scored["term"].isin(terms["term"]) & scored["suggestion"].isin(in_vocab)]
    ctx = contexts.rename(columns={"term_from": "term", "term_to": "suggestion"})
    ctx = ctx[ctx["term"].isin(unknown)][["term", "suggestion", "contexts"]]
    cands = cands.merge(
        scored[["term", "suggestion", "n_ab", "g2"]], on=["term", "suggestion"], how="outer"
    )
    cands = cands.merge(ctx, on=["term", "suggestion"], how="left")
    cands[["n_ab", "g2", "contexts"]] = cands[["n_ab", "g2", "contexts"]].fillna(0)
    new = cands["kind"].isna()
    behaviour = (cands["n_ab"] >= settings.min_pairs) & (cands["g2"] >= settings.min_g2)
    cands = cands[~new | behaviour]
    new = cands["kind"].isna()
    cands.loc[new, ["kind", "how"]] = ["synonym", "reformulation"]
    ctx_only = ctx[ctx["contexts"] >= settings.min_contexts].merge(
        cands[["term", "suggestion"]], how="left", indicator=True
    )
    ctx_only = ctx_only[ctx_only["_merge"] == "left_only"].drop(columns="_merge")
    ctx_only = ctx_only.assign(kind="synonym", how="contexts", n_ab=0.0, g2=0.0)
    cands = pd.concat([cands, ctx_only], ignore_index=True)
    df_of = pd.Series(vocab["df"].to_numpy(), index=in_vocab)
    ok_of = pd.Series(vocab["ok_searches"].to_numpy(), index=in_vocab)
    first = cands["suggestion"].str.split(" ").str[0]
    cands["df"] = (
        cands["df"].fillna(pd.Series(df_of.reindex(first).to_numpy(), index=cands.index)).fillna(0)
    )
    cands["ok_searches"] = (
        cands["ok_searches"]
        .fillna(pd.Series(ok_of.reindex(first).to_numpy(), index=cands.index))
        .fillna(0)
    )
    cands["distance"] = cands["distance"].fillna(0)
    cands["allowed"] = cands["allowed"].fillna(0)
    return cands.reset_index(drop=True).assign(cand=lambda d: np.arange(len(d)))


def convincing(cands: pd.DataFrame, settings: ProposalSettings) -> pd.Series:
    """Candidates worth proposing: confident enough, with volume, and either rescuing searches
    when re-scored or backed by reformulations (a fix that helps no search is not shown)."""
    behaviour = (cands["n_ab"] >= settings.min_pairs) & (cands["g2"] >= settings.min_g2)
    return (
        (cands["confidence"] >= settings.min_confidence)
        & (cands["searches"] >= settings.min_searches)
        & ((cands["rescued"] > 0) | behaviour)
    )


def confidence(cands: pd.DataFrame, settings: ProposalSettings) -> np.ndarray:
    """The module docstring's confidence of each measured candidate."""
    kind, how = cands["kind"].to_numpy(object), cands["how"].to_numpy(object)
    g2 = np.maximum(cands["g2"].to_numpy(float), 0.0)
    c = cands["contexts"].to_numpy(float)
    prior = np.select(
        [how == "edit", kind == "variant", how == "reformulation", how == "contexts"],
        [
            1 - cands["distance"].to_numpy(float) / (cands["allowed"].to_numpy(float) + 1),
            VARIANT_PRIOR,
            g2 / (g2 + settings.min_g2),
            0.5 * c / (c + 2),
        ],
        0.0,
    )
    n_pairs = cands["n_ab"].to_numpy(float)
    boosted = np.where((kind != "synonym") & (n_pairs > 0), 1 - (1 - prior) * 0.5**n_pairs, prior)
    searches = cands["searches"].to_numpy(float)
    share = np.divide(
        cands["rescued"].to_numpy(float), searches, out=np.zeros(len(cands)), where=searches > 0
    )
    return np.round(boosted * (0.5 + 0.5 * share), 4)


def _rank(found: pd.DataFrame) -> pd.Series:
    order = found.sort_values(
        ["term", "confidence", "rescued", "df", "suggestion"],
        ascending=[True, False, False, False, True],
        kind="mergesort",
    )
    return order.groupby("term").cumcount().add(1).reindex(found.index)


def gap_topics(
    failing_terms: pd.DataFrame, gap_terms: pd.Index
) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Group gap terms that occur in the same failing queries into topics.

    Two gap terms are in one topic when a chain of failing queries links them (connected
    components of the term-term co-occurrence graph). A topic is named by the gap terms of its most
    searched query, in query order.

    Returns
    -------
    (topics, topic_queries): topics has topic, term (the name), terms, searches, queries;
    topic_queries has topic, query, example, searches.
    """
    rows = failing_terms[failing_terms["term"].isin(gap_terms)]
    if rows.empty:
        return (
            pd.DataFrame(columns=["topic", "term", "terms", "searches", "queries"]),
            pd.DataFrame(columns=["topic", "query", "example", "searches"]),
        )
    qcodes, qs = pd.factorize(rows["query"])
    tcodes, ts = pd.factorize(rows["term"])
    incidence = sp.csr_matrix((np.ones(len(rows)), (qcodes, tcodes)), shape=(len(qs), len(ts)))
    _, label = connected_components(incidence.T @ incidence, directed=False)
    rows = rows.assign(topic=label[tcodes])
    per_query = rows.drop_duplicates(["topic", "query"])[["topic", "query", "example", "searches"]]
    per_query = per_query.sort_values(["topic", "searches", "query"], ascending=[True, False, True])
    head = per_query.groupby("topic").head(1)[["topic", "query"]]
    names = rows.merge(head, on=["topic", "query"]).sort_values("position")
    name = names.groupby("topic")["term"].agg(" ".join)
    topics = per_query.groupby("topic").agg(searches=("searches", "sum"), queries=("query", "size"))
    topics["term"] = name
    topics["terms"] = rows.groupby("topic")["term"].agg(lambda t: " ".join(sorted(set(t))))
    return topics.reset_index(), per_query.reset_index(drop=True)


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
    occ = analyze_series(failing["query"], index.settings.analyzer)
    joins = join_candidates(occ, vocab)
    words = joins["term"].str.split(" ", n=1, expand=True)
    unmatched = set(failing_terms["term"])
    cands = candidates_for(eligible, vocab, occ, subs, contexts, settings)
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
    cands = measure(cands, failing, index, thresholds["min_score"], thresholds["min_coverage"])
    cands["confidence"] = confidence(cands, settings)
    good = cands[convincing(cands, settings)].copy()
    # Synonyms from shared contexts alone are weak: only for terms with no other fix.
    other = set(good.loc[good["how"] != "contexts", "term"])
    good = good[(good["how"] != "contexts") | ~good["term"].isin(other)]
    # Keep an alternative only when it is at least half as convincing as the best one.
    top = good.groupby("term")["confidence"].transform("max")
    good = good[good["confidence"] >= 0.5 * top].copy()
    good["rank"] = _rank(good)
    good = good[good["rank"] <= settings.max_candidates]

    covered = set(good["term"]) | {w for t in good["term"] for w in t.split(" ")}
    best_conf = cands.groupby("term")["confidence"].max()
    gap_terms = eligible[
        (eligible["df"] == 0)
        & (eligible["searches"] >= settings.min_gap_searches)
        & eligible["term"].str.contains(r"[^\W\d_]", regex=True)
        & ~eligible["term"].isin(covered)
        & ~eligible["term"].isin(_stop_words())
    ]["term"]
    topics, topic_queries = gap_topics(failing_terms, pd.Index(gap_terms))
    if not topics.empty:
        closest = (
            topics["terms"]
            .str.split(" ")
            .map(lambda ts: float(best_conf.reindex(ts).fillna(0).max()))
        )
        topics["confidence"] = (1 - closest).round(4)
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
