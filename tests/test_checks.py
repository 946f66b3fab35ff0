"""Simulate and observe on the demo data, and the statistics of the verdicts against scipy."""

from __future__ import annotations

import csv
import json
from datetime import UTC, datetime
from pathlib import Path

import duckdb
import numpy as np
import pandas as pd
import pytest
from scipy import stats as scipy_stats
from typer.testing import CliRunner

from querygap.cli import app
from querygap.demo import DEMO_DIR, run_demo
from querygap.observe import (
    change_instant,
    check_accepted,
    observation_windows,
    observe,
    verdicts,
    weekday_counts,
    window_warnings,
)
from querygap.rules import RULE_COLUMNS
from querygap.simulate import classify, simulate
from querygap.windows import iso_week
from querygap.workspace import connect

TRUTH = json.loads((DEMO_DIR / "truth.json").read_text())


# --- statistics of the verdicts -----------------------------------------------------------------


def _counts(x1: int, n1: int, x2: int, n2: int) -> pd.DataFrame:
    return pd.DataFrame(
        {"before_empty": [x1], "before_engine": [n1], "after_empty": [x2], "after_engine": [n2]}
    )


def test_z_test_p_value_matches_scipy_chi_square() -> None:
    # scipy.stats.chi2_contingency without continuity correction: its p equals the pooled
    # two-proportion z-test's two-sided p (z^2 = Pearson chi-square).
    got = verdicts(_counts(120, 1000, 80, 1000), 0.05, 30).iloc[0]
    chi2 = scipy_stats.chi2_contingency([[120, 880], [80, 920]], correction=False)
    assert got["test"] == "z"
    assert got["p_value"] == pytest.approx(chi2.pvalue, rel=1e-9)
    assert got["p_value"] == pytest.approx(0.0029, abs=1e-4)  # REFERENCES.md, computed
    assert got["verdict"] == "fixed"


def test_zero_failures_after_uses_a_sensible_interval_and_scipy_fisher() -> None:
    # 0 of 25 after: pooled expected failures per side 12.5 * 30/55 > 5, so z is trusted; the
    # Newcombe interval stays inside [-1, 1] and excludes 0.
    row = verdicts(_counts(30, 30, 0, 25), 0.05, 20).iloc[0]
    assert row["test"] == "z" and row["verdict"] == "fixed"
    assert -1.0 <= row["newcombe_lower"] < row["newcombe_upper"] < 0.0
    # Closed forms of the Wilson bounds at the ends (x = 0: upper z^2/(n + z^2); x = n: lower
    # n/(n + z^2)), computed, give Newcombe's interval for 30/30 -> 0/25 exactly.
    z2 = scipy_stats.norm.isf(0.025) ** 2
    assert row["difference"] == -1.0
    assert row["newcombe_lower"] == pytest.approx(-1.0)
    expected_upper = -1.0 + np.hypot(z2 / (25 + z2), 1.0 - 30 / (30 + z2))
    assert row["newcombe_upper"] == pytest.approx(expected_upper, rel=1e-12)
    # 3 of 40 failing on both sides when nothing changed: too few expected failures for z;
    # the p-value is Fisher's exact test (scipy.stats.fisher_exact).
    flat = verdicts(_counts(3, 40, 3, 40), 0.05, 30).iloc[0]
    fisher = scipy_stats.fisher_exact([[3, 37], [3, 37]]).pvalue
    assert flat["test"] == "exact" and flat["p_value"] == pytest.approx(fisher)
    assert flat["verdict"] == "not fixed"
    assert verdicts(_counts(3, 40, 3, 40), 0.05, 30, exact=False).iloc[0]["verdict"] == (
        "not enough data"
    )


def test_below_the_minimum_volume_there_is_no_verdict() -> None:
    row = verdicts(_counts(29, 29, 0, 29), 0.05, 30).iloc[0]
    assert row["verdict"] == "not enough data"
    assert row["reason"].startswith("not enough searches to tell: 29 before, 29 after")
    assert verdicts(_counts(0, 0, 0, 50), 0.05, 30).iloc[0]["verdict"] == "not enough data"


def test_rising_failure_is_not_fixed() -> None:
    assert verdicts(_counts(80, 1000, 120, 1000), 0.05, 30).iloc[0]["verdict"] == "not fixed"


def test_weekday_mix_and_length_warnings() -> None:
    change = change_instant("2026-11-16")
    before, after = observation_windows(change, days=7)
    assert weekday_counts(before) == dict.fromkeys(
        ("Mon", "Tue", "Wed", "Thu", "Fri", "Sat", "Sun"), 1
    )
    assert window_warnings(before, after) == []
    short_before, short_after = observation_windows(change, days=3)
    assert any("mix of weekdays" in w for w in window_warnings(short_before, short_after))
    _, week_after = observation_windows(change, after_week="2026-W47", days=3)
    assert any("differ in length" in w for w in window_warnings(short_before, week_after))


def test_classify_outcomes() -> None:
    got = classify(
        np.array(["low", "zero", "ok", "ok", "ok", "ok"]),
        np.array([0.1, 0.0, 0.5, 0.5, 0.5, 0.5]),
        np.array(["a", None, "a", "a", "a", "a"], dtype=object),
        np.array(["ok", "low", "low", "ok", "ok", "ok"]),
        np.array([0.6, 0.2, 0.3, 0.5, 0.35, 0.45]),
        np.array(["a", "b", "a", "b", "a", "a"], dtype=object),
        0.1,
    )
    assert got.tolist() == [
        "fixed",
        "still failing",
        "newly failing",
        "regressed",
        "regressed",
        "unchanged",
    ]


# --- the demo -----------------------------------------------------------------------------------


def _rules_file(path: Path, rows: list[tuple[str, str, str, str]]) -> Path:
    with path.open("w", newline="", encoding="utf-8") as handle:
        writer = csv.writer(handle)
        writer.writerow(RULE_COLUMNS)
        for kind, term, replacement, direction in rows:
            writer.writerow([kind, term, replacement, direction, "accepted", "", "", ""])
    return path


def _truth_rows() -> list[tuple[str, str, str, str]]:
    return [
        (kind, term, replacement, "one-way")
        for kind in ("spelling", "synonym", "variant")
        for term, replacement in TRUTH[kind].items()
    ]


@pytest.fixture(scope="module")
def demo(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """The demo workspace (W45, W46 reviewed; W47 loaded), built once for this module."""
    folder = tmp_path_factory.mktemp("demo")
    run_demo(folder / "demo.duckdb", folder / "reports", say=lambda _m: None)
    return folder


@pytest.fixture
def demo_conn(demo: Path, tmp_path: Path) -> duckdb.DuckDBPyConnection:
    copy = tmp_path / "demo.duckdb"
    copy.write_bytes((demo / "demo.duckdb").read_bytes())
    c = connect(copy)
    yield c
    c.close()


def test_truth_rules_fix_the_truth_queries(
    demo_conn: duckdb.DuckDBPyConnection, tmp_path: Path
) -> None:
    rules = _rules_file(tmp_path / "truth.csv", _truth_rows())
    result = simulate(demo_conn, rules, "2026-W46", tmp_path / "out")
    fixed = result.overall["fixed"]["searches"]
    changed = sum(v["searches"] for v in result.overall.values())
    assert fixed / changed > 0.9
    per_rule = {r["term"]: r for r in result.per_rule}
    # Every frequent misspelling and every single-word synonym or variant that the analyzer
    # does not already fold is fixed in all the searches it touches.
    for term in [
        *TRUTH["spelling_frequent"],
        "sewer",
        "invoice",
        "outage",
        "tariff",
        "sewage",
        "cutoff",
        "smartmeter",
        "standpipes",
        "stopcocks",
        "watermain",
    ]:
        row = per_rule[term]
        assert row["searches"] > 0, term
        assert row["fixed_searches"] + row["unchanged_searches"] == row["searches"], term
    # Hyphen variants analyze alike (e-bill = ebill), so they change nothing.
    assert per_rule["ebill"]["effect"] == per_rule["prepayment"]["effect"] == "no effect"
    # 'hosepipe' -> 'restriction' alone leaves "hosepipe ban" low; the phrase rule fixes it.
    assert per_rule["hosepipe"]["still_failing_searches"] == per_rule["hosepipe"]["searches"]
    phrase = _rules_file(
        tmp_path / "phrase.csv",
        [("synonym", "hosepipe ban", "temporary use restriction", "one-way")],
    )
    assert simulate(demo_conn, phrase, "2026-W46", None).overall["fixed"]["queries"] >= 1
    written = pd.read_csv(tmp_path / "out" / "simulation.csv")
    assert len(written) == sum(v["queries"] for v in result.overall.values())
    stored = demo_conn.execute(
        "SELECT count(*) FROM simulation_queries WHERE simulation_id = ?", [result.simulation_id]
    ).fetchall()[0][0]
    assert stored == len(written)


def test_broad_rule_is_reported_as_regressing(
    demo_conn: duckdb.DuckDBPyConnection, tmp_path: Path
) -> None:
    rules = _rules_file(tmp_path / "bad.csv", [("synonym", "bill", "leak", "both-ways")])
    result = simulate(demo_conn, rules, "2026-W46", None)
    assert result.regressions > 0
    worse = demo_conn.execute(
        "SELECT query FROM simulation_queries WHERE outcome IN ('newly failing', 'regressed')"
    ).fetchall()
    worse_queries = {q for (q,) in worse}
    good = set(TRUTH["good_queries"])
    assert worse_queries & good, "no good query of the demo's truth got worse"
    runner = CliRunner()
    db = demo_conn.execute(
        "SELECT file FROM pragma_database_list WHERE name = current_database()"
    ).fetchall()[0][0]
    demo_conn.close()
    outcome = runner.invoke(
        app,
        [
            "simulate",
            str(rules),
            "--db",
            db,
            "--week",
            "2026-W46",
            "--json",
            "--out",
            str(tmp_path),
        ],
    )
    assert outcome.exit_code == 3, outcome.output
    assert json.loads(outcome.output)["regressions"] == result.regressions


def _deployed() -> set[str]:
    return {
        t for kind in ("spelling", "synonym", "variant") for t in TRUTH["deployed_in_w47"][kind]
    }


def test_observe_finds_exactly_the_deployed_fixes(
    demo_conn: duckdb.DuckDBPyConnection, tmp_path: Path
) -> None:
    rules = _rules_file(tmp_path / "truth.csv", _truth_rows())
    change = change_instant(TRUTH["change_at"][:10])
    assert change == datetime(2026, 11, 16, tzinfo=UTC)
    before, after = observation_windows(change)
    result = observe(demo_conn, rules, change, before, after)
    rows = pd.DataFrame(result.rows)
    rows = rows[rows["scope"] == "rule"].set_index("term")
    fixed = set(rows.index[rows["verdict"] == "fixed"])
    deployed = _deployed()
    # No rule the engine did not deploy is reported fixed.
    assert fixed <= deployed
    # A deployed rule missing from 'fixed' is one with too few searches on a side: with the
    # default minimum of 30, 'hardnes' has 26 before and 28 after (all failing, then none).
    missed = deployed - fixed
    assert missed == {"hardnes"}
    assert rows.loc["hardnes", "verdict"] == "not enough data"
    assert (rows.loc["hardnes", ["before_engine", "after_engine"]] < 30).any()
    # With a minimum of 20 searches a side the verdicts pick out exactly the deployed subset.
    lower = observe(demo_conn, rules, change, before, after, min_searches=20)
    rows20 = pd.DataFrame(lower.rows)
    rows20 = rows20[rows20["scope"] == "rule"]
    assert set(rows20.loc[rows20["verdict"] == "fixed", "term"]) == deployed
    assert result.not_fixed > 0
    assert demo_conn.execute("SELECT count(*) FROM observation_rules").fetchall()[0][0] > 0


def test_accepted_decisions_are_checked_at_the_next_review(
    demo_conn: duckdb.DuckDBPyConnection,
) -> None:
    decided = datetime(2026, 11, 16, tzinfo=UTC)
    rows = [
        ("spelling", "recieve", "receive"),
        ("synonym", "sewer", "wastewater"),
        ("synonym", "tariff", "charges"),
        ("spelling", "complant", "complaint"),
    ]
    for kind, term, replacement in rows:
        demo_conn.execute(
            "INSERT INTO decisions VALUES (?, ?, ?, 'one-way', 'accepted', '2026-W46', ?, '')",
            [kind, term, replacement, decided],
        )
    checked = check_accepted(demo_conn, iso_week("2026-W47")).set_index("term")
    assert checked.loc["recieve", "verdict"] == checked.loc["sewer", "verdict"] == "fixed"
    assert checked.loc["tariff", "verdict"] == "not fixed"  # 45 and 36 searches, all failing
    assert checked.loc["complant", "verdict"] == "not enough data"  # 8 and 14 searches
    stored = demo_conn.execute("SELECT count(*) FROM decision_checks WHERE review_id = '2026-W47'")
    assert stored.fetchall()[0][0] == 4
    # A decision made after the review window is not checked yet.
    assert check_accepted(demo_conn, iso_week("2026-W45")).empty


def test_each_changed_query_lists_the_lines_of_its_rules(
    demo_conn: duckdb.DuckDBPyConnection, tmp_path: Path
) -> None:
    # Reference: pandas' groupby(...).agg(" ".join) of the rule touches, in touch order.
    from querygap.indexing import load_index
    from querygap.rules import read_rules
    from querygap.simulate import simulate_queries
    from querygap.workspace import frame

    rows = [*_truth_rows(), ("synonym", "bill", "invoice", "one-way")]
    rules = read_rules(_rules_file(tmp_path / "truth.csv", rows))
    review = frame(demo_conn, "checks_review_queries", {"review_id": "2026-W46"})
    queries, touches = simulate_queries(review, rules, load_index(demo_conn), 0.1, 0.5)
    lines = pd.Series([r.line for r in rules])
    want = (
        pd.DataFrame({"row": touches["row"], "line": lines.to_numpy()[touches["rule"]]})
        .astype({"line": str})
        .groupby("row")["line"]
        .agg(" ".join)
    )
    got = queries.set_index("row")["rules"]
    assert (got.str.count(" ") > 0).any()  # some query is touched by two rules
    assert got.to_dict() == want.reindex(got.index).fillna("").to_dict()
