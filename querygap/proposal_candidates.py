"""Candidate fixes of the proposal stage and how convincing each is (see :mod:`querygap.proposals`
for the formulas). Pure computation on frames."""

from __future__ import annotations

import numpy as np
import pandas as pd

from querygap.nearmiss import (
    join_candidates,
    spelling_candidates,
    substitution_scores,
    variant_candidates,
)
from querygap.proposal_settings import ProposalSettings
from querygap.string_sets import in_set

VARIANT_PRIOR = 0.7


def candidates_for(
    terms: pd.DataFrame,
    vocab: pd.DataFrame,
    sequences: pd.DataFrame,
    subs: pd.DataFrame,
    contexts: pd.DataFrame,
    settings: ProposalSettings,
    joins: pd.DataFrame | None = None,
) -> pd.DataFrame:
    """All candidates of the eligible terms: term, suggestion, kind, how and evidence counts.

    ``joins``: :func:`querygap.nearmiss.join_candidates` of ``sequences``, when the caller has it.
    """
    unknown = terms.loc[terms["df"] == 0, "term"]
    spell = spelling_candidates(unknown, vocab, limit=settings.max_candidates)
    spell = spell.assign(kind="spelling", how="edit")
    var = pd.concat(
        [
            variant_candidates(unknown, vocab),
            join_candidates(sequences, vocab) if joins is None else joins,
        ],
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
    scored = scored[
        in_set(scored["term"], terms["term"]) & in_set(scored["suggestion"], vocab["term"])
    ]
    ctx = contexts.rename(columns={"term_from": "term", "term_to": "suggestion"})
    ctx = ctx[in_set(ctx["term"], unknown)][["term", "suggestion", "contexts"]]
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


def prior(cands: pd.DataFrame, settings: ProposalSettings) -> np.ndarray:
    """The module docstring's prior of each candidate, raised by its reformulation pairs.

    It bounds the confidence from above: ``confidence = prior * (0.5 + 0.5 * rescued /
    searches) <= prior``, so a candidate whose prior (rounded as the confidence is) is under
    ``min_confidence`` can never be convincing, whatever re-scoring finds.
    """
    kind, how = cands["kind"].to_numpy(object), cands["how"].to_numpy(object)
    g2 = np.maximum(cands["g2"].to_numpy(float), 0.0)
    c = cands["contexts"].to_numpy(float)
    base = np.select(
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
    return np.where((kind != "synonym") & (n_pairs > 0), 1 - (1 - base) * 0.5**n_pairs, base)


def confidence(cands: pd.DataFrame, settings: ProposalSettings) -> np.ndarray:
    """The module docstring's confidence of each measured candidate, rounded to 4 places."""
    searches = cands["searches"].to_numpy(float)
    share = np.divide(
        cands["rescued"].to_numpy(float), searches, out=np.zeros(len(cands)), where=searches > 0
    )
    return np.round(prior(cands, settings) * (0.5 + 0.5 * share), 4)


def rank_within_term(found: pd.DataFrame) -> pd.Series:
    """1 for the best candidate of each term: confidence, rescued, df falling, then A-Z."""
    order = found.sort_values(
        ["term", "confidence", "rescued", "df", "suggestion"],
        ascending=[True, False, False, False, True],
        kind="mergesort",
    )
    return order.groupby("term").cumcount().add(1).reindex(found.index)


def select_fixes(cands: pd.DataFrame, settings: ProposalSettings) -> pd.DataFrame:
    """The proposed fixes among measured candidates, with their ``rank`` (1 = best of a term).

    Convincing candidates only; a synonym from shared contexts alone only for a term with no
    other fix; an alternative only when at least half as confident as the term's best; at most
    ``max_candidates`` per term.
    """
    good = cands[convincing(cands, settings)].copy()
    other = set(good.loc[good["how"] != "contexts", "term"])
    good = good[(good["how"] != "contexts") | ~good["term"].isin(other)]
    top = good.groupby("term")["confidence"].transform("max")
    good = good[good["confidence"] >= 0.5 * top].copy()
    good["rank"] = rank_within_term(good)
    return good[good["rank"] <= settings.max_candidates]
