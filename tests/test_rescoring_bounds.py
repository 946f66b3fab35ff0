"""Re-scoring only the candidates that can matter gives the proposals of re-scoring them all.

The stage skips a candidate when its prior (an upper bound of its confidence) shows its rescued
searches cannot change what is proposed or a gap's confidence. Giving every candidate the prior
1 turns every skip off, and re-scoring every query of a candidate turns the early stops (of the
context-synonym and the gap-topic rounds) off: the proposals must come out the same, field for
field. Besides the demo, a workload of the benchmark generator (random words, so thousands of
context-only synonyms) takes the case the demo lacks: a synonym stopped early in the
context rounds whose term becomes a content gap.
"""

from __future__ import annotations

from collections.abc import Iterator
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

import querygap.proposals as stage
from querygap.rescoring import rescued_searches
from querygap.workspace import connect


@pytest.fixture(scope="module")
def demo_db(tmp_path_factory: pytest.TempPathFactory) -> Iterator[Path]:
    from querygap.demo import run_demo

    root = tmp_path_factory.mktemp("demo")
    run_demo(root / "demo.duckdb", root / "reports", say=lambda _m: None)
    yield root / "demo.duckdb"


def _run(
    db: Path, review_id: str, stop_early: bool = True
) -> tuple[pd.DataFrame, pd.DataFrame, int]:
    """The stored proposals and examples, and how many candidates were re-scored.

    ``stop_early=False`` re-scores every query of every candidate asked for (no early stop).
    """
    seen = []
    real_unless = stage.rescued_unless_beaten

    def counting_unless(sequences, cands, *args, **kwargs):  # type: ignore[no-untyped-def]
        seen.append(len(cands))
        if stop_early:
            return real_unless(sequences, cands, *args, **kwargs)
        found = rescued_searches(sequences, cands, *args[:4])
        return found, pd.Series(True, index=found.index)

    stage.rescued_unless_beaten = counting_unless
    try:
        conn = connect(db)
        done = stage.propose(conn, review_id)
        conn.close()
    finally:
        stage.rescued_unless_beaten = real_unless
    return done.proposals, done.examples, sum(seen)


@pytest.mark.parametrize("review_id", ["2026-W45", "2026-W46"])
def test_skipping_candidates_changes_no_proposal(
    demo_db: Path, review_id: str, monkeypatch: pytest.MonkeyPatch
) -> None:
    proposals, examples, rescored = _run(demo_db, review_id)
    monkeypatch.setattr(stage, "prior", lambda cands, _settings: np.ones(len(cands)))
    all_proposals, all_examples, all_rescored = _run(demo_db, review_id, stop_early=False)
    assert rescored < all_rescored  # the bounds do skip candidates on the demo
    assert len(proposals) > 0
    pd.testing.assert_frame_equal(proposals, all_proposals)
    pd.testing.assert_frame_equal(examples, all_examples)


@pytest.fixture(scope="module")
def random_words_db(tmp_path_factory: pytest.TempPathFactory) -> Path:
    import sys
    from datetime import datetime

    sys.path.insert(0, str(Path(__file__).parent / "benchmarks"))
    from workload import Size, generate

    from querygap.logload import LoadOptions, load_log
    from querygap.pageload import ContentOptions, load_content
    from querygap.review import run_review
    from querygap.settings import ReviewSettings
    from querygap.windows import week_of

    root = tmp_path_factory.mktemp("words")
    # 10k pages, 100k distinct queries, 500k searches: the smallest of the sizes tried (3k/30k,
    # 5k/50k) where a gap topic's confidence depends on re-scoring an early-stopped synonym.
    work = generate(Size("test", 10_000, 100_000, 500_000, 60_000), root / "in", 20250303)
    conn = connect(root / "ws.duckdb")
    load_log(conn, work.week1, LoadOptions())
    load_content(conn, work.content, ContentOptions("site"))
    run_review(conn, week_of(datetime(2025, 3, 3), "UTC"), ReviewSettings(), None)
    conn.close()
    return root / "ws.duckdb"


def test_skipping_candidates_changes_no_proposal_on_random_words(
    random_words_db: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    proposals, examples, rescored = _run(random_words_db, "2025-W10")
    monkeypatch.setattr(stage, "prior", lambda cands, _settings: np.ones(len(cands)))
    all_proposals, all_examples, all_rescored = _run(random_words_db, "2025-W10", stop_early=False)
    assert rescored < all_rescored
    assert (proposals["kind"] == "content_gap").sum() > 100
    pd.testing.assert_frame_equal(proposals, all_proposals)
    pd.testing.assert_frame_equal(examples, all_examples)


def test_an_early_stop_keeps_a_lower_bound_and_the_rest_exact(
    demo_db: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    # Against re-scoring every query of the same candidates (rescued_searches): a candidate
    # re-scored to the end has the same figure, one stopped early a figure no higher.
    real, full = stage.rescued_unless_beaten, rescued_searches
    checked = []

    def checking(sequences, cands, *args, **kwargs):  # type: ignore[no-untyped-def]
        found, exact = real(sequences, cands, *args, **kwargs)
        every = full(sequences, cands, *args[:4])
        assert (found <= every).all()
        assert (found[exact] == every[exact]).all()
        checked.append(len(cands))
        return found, exact

    monkeypatch.setattr(stage, "rescued_unless_beaten", checking)
    conn = connect(demo_db)
    stage.propose(conn, "2026-W46")
    conn.close()
    assert sum(checked) > 0
