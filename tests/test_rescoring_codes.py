"""Re-scoring from word codes against its plain definition: write the rewritten query, analyze
it again, score it (``rewrite`` then ``ok_queries``)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from index_helpers import index_of_pages

from querygap import rescoring
from querygap.analyzer import AnalyzerSettings
from querygap.indexing import Index, IndexSettings
from querygap.rescoring import (
    _pairs,
    _prepared,
    _same_counts,
    ok_rewrites,
    rescued_searches,
    rewrite,
    sequences_of,
)
from querygap.scoring import ok_queries


def index_of(bodies: list[str], stem: bool = False) -> Index:
    pages = pd.DataFrame(
        {
            "doc_id": [f"p{i}" for i in range(len(bodies))],
            "title": ["" for _ in bodies],
            "headings": ["" for _ in bodies],
            "body": bodies,
        }
    )
    return index_of_pages(pages, IndexSettings(analyzer=AnalyzerSettings(stem=stem)))


BODIES = [
    "replace a broken water meter",
    "pay your water bill online or by phone",
    "report a leak in the street",
    "how to read the meter and send the reading",
    "smart meter install and smart meter faults",
    "wastewater and sewer charges explained",
    "wifi at the library and the wifi password",
]


def random_case(seed: int) -> tuple[pd.DataFrame, pd.DataFrame, np.ndarray, Index]:
    """Failing queries of known and unknown words (with repeats and adjacent pairs) and
    candidates of every shape: one word for one, two words for one, one for two."""
    index = index_of(BODIES)
    rng = np.random.default_rng(seed)
    known = np.array(list(index.terms), dtype=object)
    unknown = np.array(["smartmeter", "wi", "fi", "recieve", "sewage", "metre", "zebra"], object)
    words = np.concatenate([known, unknown, unknown])
    queries = pd.Series(
        [" ".join(rng.choice(words, size=rng.integers(1, 6))) for _ in range(800)]
    ).drop_duplicates()
    queries = pd.concat([queries, pd.Series(["wi fi password", "metre metre", "zebra"])])
    queries = queries.drop_duplicates().reset_index(drop=True)
    cands = pd.DataFrame(
        {
            "term": ["smartmeter", "wi fi", "recieve", "sewage", "metre", "metre", "zebra", "fi"],
            "suggestion": [
                "smart meter",
                "wifi",
                "receive",  # no page has it: stays unknown after the fix
                "wastewater",
                "meter",
                "water meter",  # a suggestion word the query may already hold
                "meter",
                "wifi",
            ],
        }
    )
    cands.insert(0, "cand", np.arange(10, 10 + len(cands)))
    searches = rng.integers(1, 50, size=len(queries))
    return sequences_of(queries, index), cands, searches, index


def plain_rescued(seq, cands, searches, index, min_score, min_coverage) -> pd.Series:
    """The definition: each rewritten query written out, analyzed again and scored."""
    done = rewrite(seq, cands)
    ok = ok_queries(done["rewritten"], index, min_score, min_coverage)
    got = np.where(ok, searches[done["row"].to_numpy()], 0)
    out = pd.Series(got, dtype=np.int64).groupby(done["cand"].to_numpy()).sum()
    return out.reindex(cands["cand"].to_numpy(), fill_value=0).astype(np.int64)


@pytest.mark.parametrize("seed", [0, 1, 2])
@pytest.mark.parametrize(("min_score", "min_coverage"), [(0.05, 0.6), (0.3, 0.9), (0.0, 0.0)])
def test_rescued_from_codes_equal_rescued_from_rewritten_text(
    seed: int, min_score: float, min_coverage: float
) -> None:
    seq, cands, searches, index = random_case(seed)
    got = rescued_searches(seq, cands, searches, index, min_score, min_coverage)
    want = plain_rescued(seq, cands, searches, index, min_score, min_coverage)
    pd.testing.assert_series_equal(got, want)
    assert want.sum() > 0  # some fixes rescue searches, so the check compares something


def test_each_rewrite_gets_the_status_of_its_text() -> None:
    seq, cands, _searches, index = random_case(4)
    s, c = _prepared(seq, cands)
    pairs = _pairs(s, c).reset_index(drop=True)
    got = ok_rewrites(s, c, pairs, index, 0.05, 0.6)
    text = rewrite(seq, cands).set_index(["cand", "row"])["rewritten"]
    want = ok_queries(
        text.reindex(pd.MultiIndex.from_frame(pairs[["cand", "row"]])), index, 0.05, 0.6
    )
    np.testing.assert_array_equal(got, want)
    assert 0 < got.sum() < len(got)
    # In waves, as rescued_unless_beaten calls it: the codes made once, the pairs in parts.
    codes = rescoring.rewrite_codes(s, c, index)
    half = len(pairs) // 2
    waves = [
        ok_rewrites(s, c, part, index, 0.05, 0.6, codes)
        for part in (pairs.iloc[half:], pairs.iloc[:half])
    ]
    np.testing.assert_array_equal(np.concatenate([waves[1], waves[0]]), want)


def test_stemmed_suggestions_are_not_stemmed_again() -> None:
    # Porter2 is not idempotent: 'organisational' stems to 'organis', and 'organis' to 'organi'
    # (the Snowball stemmer, checked here by running it). A suggestion is an index term, so it
    # must be used as it is; analyzing the rewritten text again would lose it.
    index = index_of(["organisational chart of the council", "council tax bands"], stem=True)
    assert "organis" in index.terms and "organi" not in index.terms
    seq = sequences_of(pd.Series(["organisationl chart"]), index)
    cands = pd.DataFrame({"cand": [0], "term": ["organisationl"], "suggestion": ["organis"]})
    got = rescued_searches(seq, cands, np.array([7]), index, 0.05, 0.6)
    assert got.tolist() == [7]
    assert plain_rescued(seq, cands, np.array([7]), index, 0.05, 0.6).tolist() == [0]


def test_equal_counts_share_a_query_even_when_hashes_collide(
    monkeypatch: pytest.MonkeyPatch,
) -> None:
    # Pairs 0 and 2 hold the same words; 1 and 3 differ from them and from each other.
    pair = np.array([0, 0, 1, 1, 2, 2, 3, 3])
    code = np.array([3, 5, 3, 6, 3, 5, 3, 5])
    count = np.array([1, 1, 1, 1, 1, 1, 1, 2])
    honest = _same_counts(pair, code, count, 4)[0]
    # A hash that maps everything to 0: only the entry-by-entry comparison tells them apart.
    monkeypatch.setattr(rescoring, "_MIX", (np.uint64(0), np.uint64(0)))
    colliding = _same_counts(pair, code, count, 4)[0]
    for got in (honest, colliding):
        assert got[0] == got[2]
        assert len({got[0], got[1], got[3]}) == 3


@pytest.mark.parametrize("seed", [0, 3])
def test_word_codes_follow_their_plain_definition(seed: int) -> None:
    # The plain definition, written with pandas: the following term is the next row's term
    # when it belongs to the same query, else the empty word; codes are positions among the
    # distinct terms after "" in order of first occurrence; repeats marks queries holding a
    # term twice.
    seq, _cands, _searches, _index = random_case(seed)
    plain = seq[["row", "pos", "term"]].reset_index(drop=True)
    nxt = plain["term"].shift(-1).where(plain["row"].eq(plain["row"].shift(-1)), "")
    words = pd.Index(pd.unique(pd.concat([pd.Series([""]), plain["term"]])))
    np.testing.assert_array_equal(seq.attrs["words"], words)
    np.testing.assert_array_equal(seq["term_code"], words.get_indexer(plain["term"]))
    np.testing.assert_array_equal(seq["next_code"], words.get_indexer(nxt))
    twice = plain.groupby("row")["term"].transform(lambda t: t.duplicated().any())
    np.testing.assert_array_equal(seq["repeats"], twice.to_numpy(bool))
    assert seq["repeats"].any() and (seq["next_code"] == 0).any() and (seq["next_code"] > 0).any()
