"""Time a whole weekly review and the scorer alone on a seeded workload.

    python tests/benchmarks/workload.py --size M --folder /tmp/qg-M   # once, beforehand
    python tests/benchmarks/run.py --size M --workload /tmp/qg-M

The workload is written beforehand (``--workload`` reuses a finished one, else a temp folder is
filled first), so its memory is not counted. The review (log load included) and the scorers
each run in a child process; this process samples the child's resident set size (with its
children) with psutil every 20 ms and keeps the peak of each stage. Prints one table (wall s,
CPU s, peak RSS, queries/s, postings/s), then one line per reference,
``speedup_vs_<name>: <ratio>`` (the reference's wall time over ours for the scorer alone).
Nothing here is gated on a time; the exit status is 1 only when a method disagrees with ours on a
best score (beyond 1e-5) or on a top-1 page (ties allowed), or a child fails.
"""

from __future__ import annotations

import argparse
import json
import subprocess
import sys
import tempfile
import threading
import time
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import psutil
import scipy.sparse as sp

sys.path.insert(0, str(Path(__file__).resolve().parent))
sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

import baselines  # noqa: E402
from workload import SIZES, ensure  # noqa: E402

from querygap import scoring_kernel  # noqa: E402
from querygap.indexing import load_index  # noqa: E402
from querygap.logload import LoadOptions, load_log  # noqa: E402
from querygap.pageload import ContentOptions, load_content  # noqa: E402
from querygap.review import run_review  # noqa: E402
from querygap.scoring import query_terms  # noqa: E402
from querygap.settings import ReviewSettings  # noqa: E402
from querygap.weighting import query_weights  # noqa: E402
from querygap.windows import week_of  # noqa: E402
from querygap.workspace import connect, memory_limit  # noqa: E402


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


def emit(kind: str, **fields: object) -> None:
    """One line of the child's report to the parent (JSON after a keyword)."""
    print(kind, json.dumps(fields), flush=True)


class ChildStages:
    """A review's progress callback: announces each stage to the parent and times it."""

    def __init__(self, prefix: str) -> None:
        self.prefix, self.open = prefix, None

    def __call__(self, stage: str) -> None:
        stage = stage.split(":")[0]
        if self.open and self.open[0] == stage:
            return
        self.close()
        emit("stage", name=self.prefix + stage)
        self.open = (stage, time.perf_counter(), time.process_time())

    def timed(self, stage: str, func: Callable[[], object]) -> object:
        self(stage)
        value = func()
        self.close()
        return value

    def close(self) -> None:
        if self.open:
            name, w0, c0 = self.open
            emit(
                "row",
                name=self.prefix + name,
                wall=time.perf_counter() - w0,
                cpu=time.process_time() - c0,
            )
            self.open = None


def _monday(week: str):
    from datetime import datetime

    return datetime.strptime(week + "-1", "%G-W%V-%u")


def child_review(work, folder: Path) -> None:
    """Week 1 (load logs, load content, every review stage), then week 2 (index reused)."""
    settings = ReviewSettings()
    conn = connect(folder / "ws.duckdb")
    warm_kernel()
    for week, log, tag in (
        (work.week1_id, work.week1, ""),
        (work.week2_id, work.week2, "week 2: "),
    ):
        t0, c0 = time.perf_counter(), time.process_time()
        stages = ChildStages(tag)
        stages.timed("load logs", lambda log=log: load_log(conn, log, LoadOptions()))
        if not tag:
            stages.timed(
                "load content", lambda: load_content(conn, work.content, ContentOptions("site"))
            )
        window = week_of(_monday(week), "UTC")
        result = run_review(conn, window, settings, folder / "reports" / window.review_id, stages)
        stages.close()
        emit(
            "total",
            name=f"= whole review, {'week 2' if tag else 'week 1'}",
            wall=time.perf_counter() - t0,
            cpu=time.process_time() - c0,
            queries=result.queries,
            scored_now=result.scored_now,
            index_reused=result.index_reused,
            timings=result.timings,
            report_bytes=result.report_html.stat().st_size if result.report_html else 0,
        )
    conn.close()


def warm_kernel() -> None:
    """Load the cached compiled kernel outside the timings."""
    if scoring_kernel.HAVE_NUMBA:
        tiny = sp.csr_matrix(np.ones((1, 1)))
        scoring_kernel.top_k_scores(tiny, tiny, 1)


def child_scorers(work, folder: Path, skip: set[str]) -> None:
    """The scorer alone on week 1's unique queries and index: ours, then every reference."""
    conn = connect(folder / "ws.duckdb")
    warm_kernel()
    window = week_of(_monday(work.week1_id), "UTC")
    index = load_index(conn)
    queries = conn.execute(
        "SELECT DISTINCT query FROM searches WHERE searched_at >= ? AND searched_at < ?",
        [window.start, window.end],
    ).df()["query"]
    conn.close()
    qt = query_terms(queries, index)
    weights = query_weights(qt.known, index.idf, qt.unknown, index.n_docs, index.settings.weighting)
    weights = sp.csr_matrix(weights)
    weights.sort_indices()
    postings = index.vectors.T.tocsr()
    nq = weights.shape[0]
    touched = int((postings.indptr[weights.indices + 1] - postings.indptr[weights.indices]).sum())
    methods = {
        "ours": lambda: scoring_kernel.top_k_scores(weights, postings, 5),
        "numpy_path": lambda: scoring_kernel.top_k_scores(weights, postings, 5, use_compiled=False),
        "hand_written": lambda: baselines.hand_written(weights, postings, 5, chunk=2000),
        "sparse_dot_topn": lambda: baselines.sparse_dot_topn(weights, postings, 5),
        "scatter_add": lambda: baselines.scatter_add(weights, postings),
        "postings_pass": lambda: baselines.postings_pass(weights, postings),
    }
    ours_best = None
    for name, func in methods.items():
        if name in skip:
            continue
        emit("stage", name=f"scorer: {name}")
        w0, c0 = time.perf_counter(), time.process_time()
        out = func()
        wall, cpu = time.perf_counter() - w0, time.process_time() - c0
        if name == "ours":
            ours_best = best_of(out, nq)
            note = f"{touched:,} postings touched"
        elif name == "postings_pass":
            note = "lower bound, not a scorer"
        else:
            note = agree(name, out, ours_best, weights, postings)
        del out
        emit(
            "row",
            name=f"scorer: {name}",
            wall=wall,
            cpu=cpu,
            queries=nq,
            postings=touched,
            note=note,
        )


class Sampler(threading.Thread):
    """Peak RSS (bytes) of a process and its children, sampled every ``every`` s, per stage."""

    def __init__(self, pid: int, every: float = 0.02) -> None:
        super().__init__(daemon=True)
        self.proc, self.every = psutil.Process(pid), every
        self.stage = "(start)"
        self.peaks: dict[str, int] = {}
        self.peak = 0
        self.done = threading.Event()

    def rss(self) -> int:
        try:
            procs = [self.proc, *self.proc.children(recursive=True)]
            return sum(p.memory_info().rss for p in procs)
        except psutil.Error:
            return 0

    def run(self) -> None:
        while not self.done.is_set():
            value = self.rss()
            self.peak = max(self.peak, value)
            self.peaks[self.stage] = max(self.peaks.get(self.stage, 0), value)
            time.sleep(self.every)


def run_child(args: list[str]) -> tuple[list[Row], int, int]:
    """Run this file as a child with ``args``; its rows (with per-stage peak RSS), peak, status."""
    cmd = [sys.executable, str(Path(__file__).resolve()), *args]
    proc = subprocess.Popen(cmd, stdout=subprocess.PIPE, text=True)
    sampler = Sampler(proc.pid)
    sampler.start()
    rows = Rows()
    assert proc.stdout is not None
    for line in proc.stdout:
        kind, _, payload = line.partition(" ")
        if kind not in {"stage", "row", "total"}:
            print(line, end="", file=sys.stderr)
            continue
        data = json.loads(payload)
        if kind == "stage":
            sampler.stage = data["name"]
            continue
        if kind == "total":
            note = (
                f"index reused: {data['index_reused']}; scored {data['scored_now']:,} new of "
                f"{data['queries']:,}; report {data['report_bytes'] / 1e6:.1f} MB"
            )
            rows.append(Row(data["name"], data["wall"], data["cpu"], sampler.peak / 1e9, note=note))
            for r in rows[:-1]:
                if not r.queries and not r.name.startswith("="):
                    r.queries = data["queries"]
            continue
        rows.append(
            Row(
                data["name"],
                data["wall"],
                data["cpu"],
                sampler.peaks.get(data["name"], 0) / 1e9,
                data.get("queries", 0),
                data.get("postings", 0),
                data.get("note", ""),
            )
        )
    status = proc.wait()
    sampler.done.set()
    sampler.join()
    return rows, sampler.peak, status


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--size", choices=sorted(SIZES), default="S")
    parser.add_argument("--workload", type=Path, help="workload folder (reused when finished)")
    parser.add_argument("--folder", type=Path, help="work folder (default: a temp folder)")
    parser.add_argument(
        "--skip", default="", help="comma-separated references to leave out, e.g. hand_written"
    )
    parser.add_argument(
        "--scorers-only",
        action="store_true",
        help="time only the scorers, on the workspace a finished run left in --folder",
    )
    parser.add_argument("--child", choices=["review", "scorers"], help=argparse.SUPPRESS)
    args = parser.parse_args(argv)
    skip = {s for s in args.skip.split(",") if s}
    size = SIZES[args.size]
    if args.child:
        work = ensure(size, args.workload)
        if args.child == "review":
            child_review(work, args.folder)
        else:
            child_scorers(work, args.folder, skip)
        return 0

    tmp = tempfile.TemporaryDirectory(prefix=f"qg-bench-{size.name}-")
    folder = args.folder or Path(tmp.name)
    folder.mkdir(parents=True, exist_ok=True)
    workload = args.workload or folder / "input"
    print(
        f"size {size.name}: {size.pages:,} pages, {size.queries:,} unique queries, "
        f"{size.rows:,} log rows; numba {'on' if scoring_kernel.HAVE_NUMBA else 'off'}"
        + (
            f" ({scoring_kernel.numba.get_num_threads()} threads)"
            if scoring_kernel.HAVE_NUMBA
            else ""
        )
        + f"; DuckDB memory limit {memory_limit()}",
        flush=True,
    )
    w0 = time.perf_counter()
    ensure(size, workload)
    print(f"workload ready in {time.perf_counter() - w0:.1f} s in {workload}", flush=True)
    common = ["--size", size.name, "--workload", str(workload), "--folder", str(folder)]
    review_rows, review_peak, s1 = [], 0, 0
    if args.scorers_only:
        if not (folder / "ws.duckdb").exists():
            parser.error(f"--scorers-only needs a finished run's workspace in {folder}")
    else:
        review_rows, review_peak, s1 = run_child([*common, "--child", "review"])
    scorer_rows, scorer_peak, s2 = [], 0, 0
    if s1:
        print("the review failed (see above); the scorers need its index, so they are left out")
    else:
        scorer_rows, scorer_peak, s2 = run_child(
            [*common, "--child", "scorers", "--skip", args.skip]
        )
    rows = review_rows + scorer_rows
    failed = bool(s1 or s2) or any(r.note.startswith("DISAGREES") for r in scorer_rows)

    print()
    print(
        f"{'stage':34} {'wall s':>8} {'CPU s':>8} {'peak RSS GB':>11} {'queries/s':>11} "
        f"{'postings/s':>11}  note"
    )
    for r in rows:
        qps = f"{r.queries / r.wall:,.0f}" if r.queries and r.wall else ""
        pps = f"{r.postings / r.wall:.3g}" if r.postings and r.wall else ""
        print(f"{r.name:34} {r.wall:8.2f} {r.cpu:8.2f} {r.rss:11.2f} {qps:>11} {pps:>11}  {r.note}")
    print()
    print(f"peak_rss_review_gb: {review_peak / 1e9:.2f}")
    print(f"peak_rss_scorers_gb: {scorer_peak / 1e9:.2f}")
    ours = next((r for r in scorer_rows if r.name == "scorer: ours"), None)
    for r in scorer_rows:
        if ours and r is not ours and ours.wall:
            print(f"speedup_vs_{r.name.removeprefix('scorer: ')}: {r.wall / ours.wall:.2f}")
    tmp.cleanup()
    return 1 if failed else 0


if __name__ == "__main__":
    sys.exit(main())
