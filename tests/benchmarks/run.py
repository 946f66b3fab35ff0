"""Time a whole weekly review and the scorer alone on a seeded workload.

    python tests/benchmarks/run.py --size S      # 10k pages, 100k queries, 2M log rows
    python tests/benchmarks/run.py --size M      # 100k pages, 1M queries, 20M log rows

Prints one table (wall s, CPU s, peak RSS, queries/s, postings/s), then one line per reference,
``speedup_vs_<name>: <ratio>`` (the reference's wall time over ours for the scorer alone).
Nothing here is gated on a time; the exit status is 1 only when a method disagrees with ours on a
best score (beyond 1e-5) or on a top-1 page (ties allowed).
"""

from __future__ import annotations

import argparse
import importlib.util
import resource
import sys
import tempfile
import time
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import scipy.sparse as sp

sys.path.insert(0, str(Path(__file__).resolve().parent))
sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

import baselines  # noqa: E402
from workload import SIZES, generate  # noqa: E402

from querygap import scoring_kernel  # noqa: E402
from querygap.indexing import load_index  # noqa: E402
from querygap.logload import LoadOptions, load_log  # noqa: E402
from querygap.pageload import ContentOptions, load_content  # noqa: E402
from querygap.review import run_review  # noqa: E402
from querygap.scoring import query_terms  # noqa: E402
from querygap.settings import ReviewSettings  # noqa: E402
from querygap.weighting import query_weights  # noqa: E402
from querygap.windows import week_of  # noqa: E402
from querygap.workspace import connect  # noqa: E402

LATER_STAGES = {"cluster": "clustering", "propose": "proposals", "report": "report"}


def peak_rss_gb() -> float:
    """Peak resident set size of this process so far, GB (Linux reports ru_maxrss in KiB)."""
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024**2


@dataclass
class Row:
    name: str
    wall: float
    cpu: float
    rss: float
    queries: int = 0
    postings: int = 0
    note: str = ""


class Rows(list):
    """The table's rows; each is echoed to stderr as it lands, so a long run shows progress."""

    def append(self, row: Row) -> None:
        super().append(row)
        print(f"  .. {row.name}: {row.wall:.2f} s", file=sys.stderr, flush=True)


class Clock:
    """Wall and CPU seconds (this process, all threads) of a block, and the peak RSS after it."""

    def __init__(self) -> None:
        self.rows: list[Row] = Rows()

    def time(self, name: str, func: Callable[[], object], queries: int = 0, postings: int = 0):
        w0, c0 = time.perf_counter(), time.process_time()
        value = func()
        self.rows.append(
            Row(
                name,
                time.perf_counter() - w0,
                time.process_time() - c0,
                peak_rss_gb(),
                queries,
                postings,
            )
        )
        return value


class StageClock:
    """A review's progress callback that turns stage announcements into timed rows."""

    def __init__(self, clock: Clock, prefix: str) -> None:
        self.clock, self.prefix, self.open = clock, prefix, None

    def __call__(self, stage: str) -> None:
        stage = stage.split(":")[0]
        if self.open and self.open[0] == stage:
            return
        self.close()
        self.open = (stage, time.perf_counter(), time.process_time())

    def close(self) -> None:
        if self.open:
            name, w0, c0 = self.open
            self.clock.rows.append(
                Row(
                    f"{self.prefix}{name}",
                    time.perf_counter() - w0,
                    time.process_time() - c0,
                    peak_rss_gb(),
                )
            )
            self.open = None


def best_of(triple, n: int) -> tuple[np.ndarray, np.ndarray]:
    """Best score and top-1 doc per query row (0 and -1 when none)."""
    rows, docs, vals = triple
    best = np.zeros(n)
    top = np.full(n, -1, np.int64)
    if rows.size:
        order = np.lexsort((docs, -vals, rows))
        rows, docs, vals = rows[order], docs[order], vals[order]
        first = np.r_[True, rows[1:] != rows[:-1]]
        best[rows[first]] = vals[first]
        top[rows[first]] = docs[first]
    return best, top


def pair_scores(weights: sp.csr_matrix, postings: sp.csr_matrix, docs: np.ndarray) -> np.ndarray:
    """Exact q . d for each query row and one doc per row (-1 gives 0), vectorised."""
    pages = postings.T.tocsr()
    n_terms = pages.shape[1]
    doc_of = np.repeat(np.arange(pages.shape[0], dtype=np.int64), np.diff(pages.indptr))
    keys = doc_of * n_terms + pages.indices
    qrow = np.repeat(np.arange(weights.shape[0]), np.diff(weights.indptr))
    d = docs[qrow]
    probe = np.maximum(d, 0) * n_terms + weights.indices
    pos = np.minimum(np.searchsorted(keys, probe), keys.size - 1)
    hit = (keys[pos] == probe) & (d >= 0)
    contrib = np.where(hit, weights.data * pages.data[pos], 0.0)
    return np.bincount(qrow, weights=contrib, minlength=weights.shape[0])


def agree(name: str, triple, ours: tuple[np.ndarray, np.ndarray], weights, postings) -> str:
    n = weights.shape[0]
    best, top = best_of(triple, n)
    bad_best = int((np.abs(best - ours[0]) > 1e-5).sum())
    exact_top = pair_scores(weights, postings, top)
    bad_top = int((np.abs(exact_top - ours[0]) > 1e-5).sum())
    if bad_best or bad_top:
        return f"DISAGREES: {bad_best} best scores, {bad_top} top-1 pages"
    return "agrees"


def review_week(clock: Clock, conn, log: Path, week: str, settings, out: Path, tag: str) -> object:
    clock.time(f"{tag}load logs", lambda: load_log(conn, log, LoadOptions()))
    stages = StageClock(clock, tag)
    window = week_of(_monday(week), "UTC")
    result = run_review(conn, window, settings, out / window.review_id, progress=stages)
    stages.close()
    return result


def _monday(week: str):
    from datetime import datetime

    return datetime.strptime(week + "-1", "%G-W%V-%u")


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--size", choices=sorted(SIZES), default="S")
    parser.add_argument("--folder", type=Path, help="work folder (default: a temp folder)")
    parser.add_argument(
        "--skip", default="", help="comma-separated references to leave out, e.g. hand_written"
    )
    args = parser.parse_args(argv)
    skip = {s for s in args.skip.split(",") if s}
    size = SIZES[args.size]
    tmp = tempfile.TemporaryDirectory(prefix=f"qg-bench-{size.name}-")
    folder = args.folder or Path(tmp.name)
    clock = Clock()
    print(
        f"size {size.name}: {size.pages:,} pages, {size.queries:,} unique queries, "
        f"{size.rows:,} log rows; numba {'on' if scoring_kernel.HAVE_NUMBA else 'off'}"
        + (
            f" ({scoring_kernel.numba.get_num_threads()} threads)"
            if scoring_kernel.HAVE_NUMBA
            else ""
        ),
        flush=True,
    )
    w0 = time.perf_counter()
    work = generate(size, folder / "input")
    print(f"workload written in {time.perf_counter() - w0:.1f} s to {folder}", flush=True)
    if scoring_kernel.HAVE_NUMBA:  # load the cached compiled kernel outside the timings
        tiny = sp.csr_matrix(np.ones((1, 1)))
        scoring_kernel.top_k_scores(tiny, tiny, 1)

    settings = ReviewSettings()
    conn = connect(folder / "ws.duckdb")
    t_review = time.perf_counter()
    n0 = len(clock.rows)
    clock.time("load logs", lambda: load_log(conn, work.week1, LoadOptions()))
    clock.time("load content", lambda: load_content(conn, work.content, ContentOptions("site")))
    stages = StageClock(clock, "")
    window = week_of(_monday(work.week1_id), "UTC")
    result = run_review(conn, window, settings, folder / "reports" / window.review_id, stages)
    stages.close()
    for stage, module in LATER_STAGES.items():
        if importlib.util.find_spec(f"querygap.{module}") is None:
            clock.rows.append(Row(stage, 0, 0, peak_rss_gb(), note="skipped: not built yet"))
        else:
            clock.rows.append(Row(stage, 0, 0, peak_rss_gb(), note="present; no timing hook"))
    review_wall = time.perf_counter() - t_review
    review_cpu = sum(r.cpu for r in clock.rows[n0:])
    clock.rows.append(Row("= whole review, week 1", review_wall, review_cpu, peak_rss_gb()))
    n_queries = result.queries
    for row in clock.rows[n0:]:
        row.queries = n_queries if row.wall and not row.note else 0

    t2 = time.perf_counter()
    n1 = len(clock.rows)
    second = review_week(
        clock, conn, work.week2, work.week2_id, settings, folder / "reports", "week 2: "
    )
    clock.rows.append(
        Row(
            "= whole review, week 2",
            time.perf_counter() - t2,
            sum(r.cpu for r in clock.rows[n1:]),
            peak_rss_gb(),
            note=f"index reused: {second.index_reused}; "
            f"scored {second.scored_now:,} new of {second.queries:,}",
        )
    )

    # The scorer alone: the same unique queries and index, every method in this process.
    index = load_index(conn)
    queries = conn.execute(
        "SELECT DISTINCT query FROM searches WHERE searched_at >= ? AND searched_at < ?",
        [window.start, window.end],
    ).df()["query"]
    qt = query_terms(queries, index)
    weights = query_weights(qt.known, index.idf, qt.unknown, index.n_docs, index.settings.weighting)
    weights = sp.csr_matrix(weights)
    weights.sort_indices()
    postings = index.vectors.T.tocsr()
    nq = weights.shape[0]
    touched = int((postings.indptr[weights.indices + 1] - postings.indptr[weights.indices]).sum())
    ours = clock.time(
        "scorer: ours", lambda: scoring_kernel.top_k_scores(weights, postings, 5), nq, touched
    )
    ours_best = best_of(ours, nq)
    ours_row = clock.rows[-1]
    references = {
        "numpy_path": lambda: scoring_kernel.top_k_scores(weights, postings, 5, use_compiled=False),
        "hand_written": lambda: baselines.hand_written(weights, postings, 5, chunk=2000),
        "sparse_dot_topn": lambda: baselines.sparse_dot_topn(weights, postings, 5),
        "scatter_add": lambda: baselines.scatter_add(weights, postings),
        "postings_pass": lambda: baselines.postings_pass(weights, postings),
    }
    failed = False
    ratios = {}
    for name, func in references.items():
        if name in skip:
            continue
        out = clock.time(f"scorer: {name}", func, nq, touched)
        row = clock.rows[-1]
        if name == "postings_pass":
            row.note = "lower bound, not a scorer"
        else:
            row.note = agree(name, out, ours_best, weights, postings)
            failed |= row.note != "agrees"
        ratios[name] = row.wall / ours_row.wall
    ours_row.note = f"{touched:,} postings touched"

    print()
    print(
        f"{'stage':34} {'wall s':>8} {'CPU s':>8} {'peak RSS GB':>11} {'queries/s':>11} "
        f"{'postings/s':>11}  note"
    )
    for r in clock.rows:
        qps = f"{r.queries / r.wall:,.0f}" if r.queries and r.wall else ""
        pps = f"{r.postings / r.wall:.3g}" if r.postings and r.wall else ""
        print(f"{r.name:34} {r.wall:8.2f} {r.cpu:8.2f} {r.rss:11.2f} {qps:>11} {pps:>11}  {r.note}")
    print()
    for name, ratio in ratios.items():
        print(f"speedup_vs_{name}: {ratio:.2f}")
    conn.close()
    tmp.cleanup()
    return 1 if failed else 0


if __name__ == "__main__":
    sys.exit(main())
