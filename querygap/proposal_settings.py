"""Thresholds of the proposal stage (:mod:`querygap.proposals`)."""

from __future__ import annotations

from dataclasses import dataclass


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
