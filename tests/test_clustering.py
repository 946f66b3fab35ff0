"""The cluster stage: typos, word order and shared failing terms join; unrelated queries don't."""

from __future__ import annotations

import json
from itertools import combinations
from pathlib import Path

import duckdb
import numpy as np
import pandas as pd
import pytest
from rapidfuzz.distance import OSA
from stored_rows import window_searches

from querygap.clustering import (
    ClusterSettings,
    cluster_queries,
    deletion_keys_of,
    gram_matrix,
    key_terms,
    nearest_words,
    similar_pairs,
    spelling_pairs,
)
from querygap.demo import DEMO_DIR, run_demo
from querygap.edit_neighbours import deletion_keys
from querygap.workspace import connect

VOCAB = pd.DataFrame(
    {
        "term": ["account", "meter", "reading", "water", "bill", "leak"],
        "df": [40, 30, 20, 90, 50, 9],
    }
)


def one_term_each(queries: list[str]) -> pd.DataFrame:
    """Each query fails on its first word (the word no page has)."""
    return pd.DataFrame(
        {"qi": range(len(queries)), "term": [q.split()[0] for q in queries], "df": 0}
    )


def groups(queries: list[str], labels: np.ndarray) -> set[frozenset[str]]:
    out: dict[int, set[str]] = {}
    for q, c in zip(queries, labels, strict=True):
        out.setdefault(int(c), set()).add(q)
    return {frozenset(g) for g in out.values()}


def test_misspellings_of_one_word_end_in_one_cluster() -> None:
    # Each is one edit (Damerau 1964: insertion, deletion, substitution, transposition) from
    # "account"; two of them can be two edits apart, so they meet through the content word.
    typos = ["accont", "acount", "accout", "acocunt", "accoun", "accountt"]
    others = ["solar panels", "fluoride", "bitcoin"]
    queries = typos + others
    result = cluster_queries(queries, np.ones(len(queries)), one_term_each(queries), None, VOCAB)
    assert groups(queries, result.labels) == {
        frozenset(typos),
        frozenset(["solar panels"]),
        frozenset(["fluoride"]),
        frozenset(["bitcoin"]),
    }


def test_long_typos_join_without_a_content_word() -> None:
    queries = ["installatiion", "installatino", "iastallation", "borehole"]
    result = cluster_queries(queries, np.ones(4), one_term_each(queries))
    assert groups(queries, result.labels) == {
        frozenset(queries[:3]),
        frozenset(["borehole"]),
    }


def test_short_unrelated_typos_stay_apart() -> None:
    # Two edits between 6-letter typos would chain unrelated words ("latera" - "waterr").
    queries = ["latera", "waterr"]
    result = cluster_queries(queries, np.ones(2), one_term_each(queries))
    assert len(set(result.labels)) == 2


def test_word_order_changes_join_and_shared_known_words_do_not() -> None:
    queries = ["water meter reading", "reading water meter", "sewer charges", "multi charges"]
    terms = pd.DataFrame({"qi": [2, 3], "term": ["sewer", "multi"], "df": [0, 0]})
    result = cluster_queries(queries, np.ones(4), terms)
    assert groups(queries, result.labels) == {
        frozenset(queries[:2]),
        frozenset(["sewer charges"]),
        frozenset(["multi charges"]),
    }


def test_shared_key_term_joins_and_labels_follow_volume() -> None:
    queries = ["sewer", "sewer smell", "blocked sewer", "fluoride"]
    terms = pd.DataFrame(
        {
            "qi": [0, 1, 1, 2, 2, 3],
            "term": ["sewer", "sewer", "smell", "blocked", "sewer", "fluoride"],
            "df": 0,
        }
    )
    result = cluster_queries(queries, np.array([5, 3, 2, 20]), terms)
    assert list(result.key_terms) == ["sewer", "sewer", "sewer", "fluoride"]
    # cluster 0 is the most searched: fluoride (20) before the sewer cluster (10)
    assert list(result.labels) == [1, 1, 1, 0]


def test_deletion_keys_cover_the_edit_limit() -> None:
    # A term's keys are the keys of the strings left by deleting up to edit_limit letters: for
    # "abc" (one edit) the term and its 3 one-letter deletions; for "abcdef" (two edits)
    # 1 + C(6, 1) + C(6, 2) strings, all distinct.
    for term, limit in (("abc", 1), ("abcdef", 2)):
        strings = {
            "".join(np.delete(np.array(list(term)), list(gone)))
            for k in range(limit + 1)
            for gone in combinations(range(len(term)), k)
        }
        whole = np.array(sorted(strings), dtype=object)
        want = set(next(deletion_keys(whole, np.zeros(len(whole), np.int64)))[0].tolist())
        key, owner = deletion_keys_of(np.array([term], dtype=object))
        assert set(key.tolist()) == want
        assert len(key) == len(strings) and set(owner.tolist()) == {0}
    assert len(want) == 1 + 6 + 15


def test_spelling_pairs_match_brute_force() -> None:
    # Reference: every pair compared with rapidfuzz's OSA distance, against the same limits.
    rng = np.random.default_rng(3)
    letters = np.array(list("abcdeh"))
    terms = np.array(
        sorted({"".join(rng.choice(letters, rng.integers(3, 9))) for _ in range(400)}),
        dtype=object,
    )
    a, b, _ = spelling_pairs(terms, max_block=10**6)
    lengths = np.array([len(t) for t in terms])
    want = set()
    for i in range(len(terms)):
        for j in range(i + 1, len(terms)):
            short = min(lengths[i], lengths[j])
            limit = 0 if short < 3 else (1 if short < 8 else 2)
            if OSA.distance(terms[i], terms[j]) <= limit:
                want.add((i, j))
    assert set(zip(a.tolist(), b.tolist(), strict=True)) == want
    assert want  # the check compares something


def test_nearest_words_match_brute_force() -> None:
    # Reference: every (term, word) pair compared with rapidfuzz's OSA distance; the nearest
    # word within edit_limit of the term (3+ letters, not the term itself), then higher df,
    # then alphabetical. No deletion string is left out (max_block above every group).
    rng = np.random.default_rng(11)
    letters = np.array(list("abcdeh"))

    def draw(n: int) -> np.ndarray:
        found = {"".join(rng.choice(letters, rng.integers(2, 9))) for _ in range(n)}
        return np.array(sorted(found), dtype=object)

    terms, words = draw(300), draw(600)
    words = words[rng.permutation(len(words))]  # the alphabetical tie-break is not row order
    vocab = pd.DataFrame({"term": words, "df": rng.integers(1, 3, len(words))})
    best, examined = nearest_words(terms, vocab, max_block=10**6)
    want = np.full(len(terms), -1)
    for i, t in enumerate(terms):
        limit = 0 if len(t) < 3 else (1 if len(t) < 6 else 2)
        near = [
            (OSA.distance(t, w), -int(vocab["df"][j]), w, j)
            for j, w in enumerate(words)
            if len(w) >= 3 and 1 <= OSA.distance(t, w) <= limit
        ]
        if near:
            want[i] = min(near)[3]
    assert (want >= 0).sum() > 50  # the check compares something
    assert best.tolist() == want.tolist()
    assert examined >= (want >= 0).sum()


def test_similar_pairs_match_the_full_product() -> None:
    # Reference: scipy's full sparse product X @ X.T, thresholded.
    rng = np.random.default_rng(5)
    words = ["meter", "reading", "water", "bill", "pay", "leak", "sewer", "smart", "drain"]
    queries = sorted({" ".join(rng.choice(words, rng.integers(1, 4))) for _ in range(300)})
    x = gram_matrix(queries, max_df=10**6)
    a, b, examined = similar_pairs(x, 0.7, chunk_rows=17)
    full = (x @ x.T).toarray()
    i, j = np.nonzero(np.triu(full >= 0.7 - 1e-9, k=1))
    assert set(zip(a.tolist(), b.tolist(), strict=True)) == set(
        zip(i.tolist(), j.tolist(), strict=True)
    )
    assert examined == int(np.triu(full > 0, k=1).sum())


def synthetic_failing(n: int, seed: int = 11) -> list[str]:
    """n distinct queries of 1-3 words from a random 5000-word vocabulary, 30% with a typo."""
    rng = np.random.default_rng(seed)
    letters = np.array(list("abcdefghijklmnopqrstuvwxyz"))
    vocab = ["".join(rng.choice(letters, rng.integers(4, 10))) for _ in range(5000)]
    out: set[str] = set()
    while len(out) < n:
        words = [vocab[k] for k in rng.integers(0, len(vocab), rng.integers(1, 4))]
        if rng.random() < 0.3:
            cut = int(rng.integers(len(words[0])))
            words[0] = words[0][:cut] + words[0][cut + 1 :]
        out.add(" ".join(words))
    return sorted(out)


def test_work_is_bounded_not_quadratic() -> None:
    # Counted work, not wall time. Every 3-gram pairs at most gram_cap queries, so the pairs whose
    # cosine is computed are at most gram_cap x non-zeros / 2; spelling candidates at most
    # max_block per deletion string. Both must be far below the n(n-1)/2 pairs of all queries.
    n = 20_000
    queries = synthetic_failing(n)
    result = cluster_queries(queries, np.ones(n), one_term_each(queries))
    counts = result.counts
    all_pairs = n * (n - 1) / 2
    assert counts["text_candidates"] <= counts["gram_cap"] * counts["gram_nonzeros"] / 2
    assert counts["text_candidates"] < 0.02 * all_pairs
    assert counts["spelling_candidates"] < 5 * n
    assert counts["spelling_edges"] > 0 and counts["text_edges"] > 0  # work was done


def test_settings_are_checked() -> None:
    from querygap.errors import ConfigError

    with pytest.raises(ConfigError, match="--cluster-cosine"):
        cluster_queries(["a"], np.ones(1), one_term_each(["a"]), ClusterSettings(min_cosine=0))


@pytest.fixture(scope="module")
def demo_conn(tmp_path_factory: pytest.TempPathFactory) -> duckdb.DuckDBPyConnection:
    folder = tmp_path_factory.mktemp("demo")
    run_demo(folder / "demo.duckdb", folder / "reports", say=lambda _m: None)
    conn = connect(folder / "demo.duckdb", read_only=True)
    yield conn
    conn.close()


def demo_cluster_of(conn: duckdb.DuckDBPyConnection, word: str) -> set[int]:
    rows = conn.execute(
        "SELECT DISTINCT cluster_id FROM cluster_members WHERE review_id = '2026-W46'"
        " AND list_contains(string_split(query, ' '), ?)",
        [word],
    ).fetchall()
    return {r[0] for r in rows}


def test_demo_truth_families_cluster_together(demo_conn: duckdb.DuckDBPyConnection) -> None:
    # demo_logs/truth.json: synonyms (sewer, tariff, invoice, outage) and gaps (solar, fluoride)
    # the generator put into the log; each family's failing queries share one cluster, and the
    # families do not merge.
    truth = json.loads((DEMO_DIR / "truth.json").read_text())
    words = ["sewer", "tariff", "invoice", "outage", "solar", "fluoride"]
    assert set(words[:4]) <= set(truth["synonym"])
    seen = []
    for word in words:
        found = demo_cluster_of(demo_conn, word)
        assert len(found) == 1, word
        seen.append(found.pop())
    assert len(set(seen)) == len(words)


def test_demo_clusters_are_stored_and_exported(demo_conn: duckdb.DuckDBPyConnection) -> None:
    review = "2026-W46"
    members, failing = demo_conn.execute(
        "SELECT (SELECT count(*) FROM cluster_members WHERE review_id = $r),"
        " (SELECT count(*) FROM review_queries WHERE review_id = $r AND status <> 'ok')",
        {"r": review},
    ).fetchall()[0]
    assert members == failing  # every failing query is in exactly one cluster
    top = demo_conn.execute(
        "SELECT label, searches, previous_searches, change FROM clusters"
        " WHERE review_id = $r ORDER BY cluster_id LIMIT 1",
        {"r": review},
    ).fetchall()[0]
    label, searches, previous, change = top
    assert previous is not None and change == searches - previous
    # W45 is the first week: nothing before it, so no previous volume.
    assert demo_conn.execute(
        "SELECT count(*) FROM clusters WHERE review_id = '2026-W45'"
        " AND previous_searches IS NOT NULL"
    ).fetchall() == [(0,)]


def test_demo_clusters_csv(tmp_path: Path) -> None:
    from querygap.review import export_clusters

    conn = connect(None)
    conn.execute(
        "INSERT INTO clusters VALUES ('r', 1, '=cmd', 5, 2, '[\"=cmd\", \"x\"]', '[\"cmd\"]',"
        " NULL, NULL)"
    )
    path = export_clusters(conn, "r", tmp_path)
    text = path.read_text()
    conn.close()
    assert "'=cmd" in text and "'=cmd | x" in text  # formula cells neutralised (OWASP, CWE-1236)


def test_gram_matrix_equals_scikit_learn_char_wb() -> None:
    # Reference: scikit-learn's TfidfVectorizer(analyzer="char_wb", ngram_range=(3, 3),
    # lowercase=False, max_df=<count>) with its default smoothed idf and l2 norm; columns are in
    # sorted gram order in both, so the matrices must agree entry by entry.
    from sklearn.feature_extraction.text import TfidfVectorizer

    texts = [
        *synthetic_failing(3000, seed=5),
        "a",
        "aaaa aaaa",
        "  x  y ",
        "tab\tand\nnewline",
        "meter meter reading",
    ]
    for max_df in (3, 50, 10_000):
        ref = TfidfVectorizer(
            analyzer="char_wb", ngram_range=(3, 3), lowercase=False, max_df=max_df
        ).fit_transform(texts)
        got = gram_matrix(texts, max_df)
        assert got.shape == ref.shape
        assert abs(got - ref).max() < 1e-12
    assert gram_matrix(["", " "], 5).shape == (2, 0)


def test_previous_volumes_match_the_searches_counted_by_pandas(
    demo_conn: duckdb.DuckDBPyConnection,
) -> None:
    # Reference: pandas on the stored rows; a cluster's previous volume is the non-bot searches
    # of its member queries in the window before (2026-W45), bots left out as in the review.
    prev = window_searches(demo_conn, "2026-W45", "s.query")
    members = demo_conn.execute(
        "SELECT cluster_id, query FROM cluster_members WHERE review_id = '2026-W46'"
    ).df()
    stored = demo_conn.execute(
        "SELECT cluster_id, previous_searches FROM clusters WHERE review_id = '2026-W46'"
    ).df()
    assert prev["bot"].any()  # the demo's bots are there to be left out
    per_query = prev.loc[~prev["bot"], "query"].value_counts()
    want = (
        members.assign(n=members["query"].map(per_query).fillna(0).astype(int))
        .groupby("cluster_id")["n"]
        .sum()
    )
    got = stored.set_index("cluster_id")["previous_searches"]
    assert got.sort_index().tolist() == want.reindex(got.index).sort_index().tolist()
    assert want.sum() > 0


def _key_terms_by_pandas(n: int, searches: np.ndarray, terms: pd.DataFrame) -> np.ndarray:
    # Reference: the rule written with pandas' own sort and de-duplication.
    keys = np.full(n, None, dtype=object)
    t = terms[["qi", "term", "df"]].drop_duplicates(["qi", "term"])
    volume = pd.Series(searches[t["qi"].to_numpy()], index=t.index).groupby(t["term"]).sum()
    t = t.assign(volume=t["term"].map(volume))
    t = t.sort_values(["qi", "volume", "df", "term"], ascending=[True, False, True, True])
    first = t.drop_duplicates("qi")
    keys[first["qi"].to_numpy()] = first["term"].to_numpy(object)
    return keys


@pytest.mark.parametrize("seed", range(5))
def test_key_terms_equal_pandas_sort(seed: int) -> None:
    rng = np.random.default_rng(seed)
    words = np.array(["sewer", "sewage", "bill", "Zebra", "éclair", "a", "meter", "meters"])
    n = 60
    rows = 300
    df_of = {w: int(rng.integers(0, 3)) for w in words}
    terms = pd.DataFrame({"qi": rng.integers(0, n - 5, rows), "term": rng.choice(words, rows)})
    terms["df"] = terms["term"].map(df_of)
    searches = rng.integers(1, 4, n)
    got = key_terms(n, searches, terms)
    want = _key_terms_by_pandas(n, searches, terms)
    assert list(got) == list(want)
    assert got[-1] is None  # queries without unmatched terms have no key
