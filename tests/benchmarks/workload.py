"""A seeded synthetic workload for the benchmarks: a content export and two weeks of search logs.

Shape (all drawn from ``numpy.random.default_rng(seed)``):

- vocabulary: made-up words of consonant-vowel syllables, drawn by Zipf's law over rank r,
  ``P(r) ~ 1 / r**ZIPF_S`` (Zipf's law for word frequency; the exponent is common practice, no
  source);
- pages: lognormal body lengths in words (``exp(N(PAGE_MU, PAGE_SIGMA))``, at least 5), a title of
  3-8 words and 0-3 two-word headings; written as a CSV export (id, title, body, url);
- unique queries: 1-5 terms drawn by Zipf's law below the ``QUERY_SKIP`` most frequent words;
  about ``ABSENT_SHARE`` of them carry one term that no page has (a word with the suffix
  ``qz``, which the syllables never make);
- week 1 log: every unique query at least once, the remaining rows by Zipf's law over query rank,
  timestamps uniform over one ISO week; week 2 log: a quarter as many rows in the next week, 90%
  from week 1's queries and 10% new ones (for the incremental review).

The generator is vectorised; it writes with pyarrow in blocks so memory stays bounded.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import datetime, timedelta
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.csv as pacsv

ZIPF_S = 1.05
PAGE_MU, PAGE_SIGMA = 5.0, 0.8  # median ~150 words per page body
ABSENT_SHARE = 0.12
# Query terms skip the most frequent words (people seldom search for function words) and follow
# Zipf's law with exponent 1 below them (both common practice, no source).
QUERY_SKIP, QUERY_S = 200, 1.0
WEEK1 = datetime(2025, 3, 3)  # Monday of ISO week 2025-W10
CONSONANTS = "bdfgklmnprstv"
VOWELS = "aeiou"


@dataclass(frozen=True)
class Size:
    name: str
    pages: int
    queries: int
    rows: int
    vocabulary: int


SIZES = {
    "XS": Size("XS", 1_000, 10_000, 100_000, 20_000),
    "S": Size("S", 10_000, 100_000, 2_000_000, 60_000),
    "M": Size("M", 100_000, 1_000_000, 20_000_000, 300_000),
}


@dataclass(frozen=True)
class Workload:
    size: Size
    content: Path
    week1: Path
    week2: Path
    week1_id: str
    week2_id: str


def make_words(n: int) -> np.ndarray:
    """``n`` distinct made-up words: ``i + 65`` written in base 65 with one syllable per digit."""
    syll = [c + v for c in CONSONANTS for v in VOWELS]
    base = len(syll)
    out = []
    for i in range(n):  # generator only, once per word
        x, parts = i + base, []
        while x:
            parts.append(syll[x % base])
            x //= base
        out.append("".join(parts))
    return np.array(out, dtype=object)


def zipf_draw(rng: np.random.Generator, n_items: int, size: int, s: float = ZIPF_S) -> np.ndarray:
    """``size`` draws of ranks 0..n_items-1 with ``P(r) ~ 1/(r+1)**s``."""
    cdf = np.cumsum(1.0 / np.arange(1, n_items + 1) ** s)
    cdf /= cdf[-1]
    return np.minimum(np.searchsorted(cdf, rng.random(size)), n_items - 1)


def _join(words: np.ndarray, lengths: np.ndarray) -> list[str]:
    cuts = np.cumsum(lengths)[:-1]
    return [" ".join(chunk) for chunk in np.split(words, cuts)]


def write_content(rng: np.random.Generator, size: Size, words: np.ndarray, path: Path) -> None:
    n = size.pages
    body_len = np.maximum(5, np.exp(rng.normal(PAGE_MU, PAGE_SIGMA, n)).astype(np.int64))
    bodies = _join(words[zipf_draw(rng, len(words), int(body_len.sum()))], body_len)
    title_len = rng.integers(3, 9, n)
    titles = _join(words[zipf_draw(rng, len(words), int(title_len.sum()))], title_len)
    n_head = rng.integers(0, 4, n)
    heads = _join(words[zipf_draw(rng, len(words), int(n_head.sum()) * 2)], n_head * 2)
    html = [
        "".join(f"<h2>{h}</h2>" for h in _pairs(hd)) + f"<p>{b}</p>"
        for hd, b in zip(heads, bodies, strict=True)
    ]
    ids = [f"p{i:07d}" for i in range(n)]
    table = pa.table(
        {
            "id": ids,
            "title": titles,
            "body": html,
            "url": [f"https://example.org/{i}" for i in ids],
        }
    )
    pacsv.write_csv(table, path)


def _pairs(text: str) -> list[str]:
    parts = text.split()
    return [" ".join(parts[i : i + 2]) for i in range(0, len(parts), 2)]


def make_queries(rng: np.random.Generator, n: int, words: np.ndarray) -> np.ndarray:
    """``n`` distinct query texts (1-5 terms, some with a term absent from every page)."""
    out: list[str] = []
    seen: set[str] = set()
    while len(out) < n:
        m = int((n - len(out)) * 1.3) + 100
        lens = rng.integers(1, 6, m)
        ranks = QUERY_SKIP + zipf_draw(rng, len(words) - QUERY_SKIP, int(lens.sum()), QUERY_S)
        toks = words[ranks].copy()
        absent = rng.random(m) < ABSENT_SHARE
        first = np.r_[0, np.cumsum(lens)[:-1]]
        toks[first[absent]] = toks[first[absent]] + "qz"
        for q in _join(toks, lens):
            if q not in seen:
                seen.add(q)
                out.append(q)
                if len(out) == n:
                    break
    return np.array(out, dtype=object)


def write_log(
    rng: np.random.Generator, queries: np.ndarray, rows: int, start: datetime, path: Path
) -> None:
    """A CSV log: every query at least once, the rest by Zipf over query rank, in blocks."""
    nq = len(queries)
    block = 2_000_000
    order = rng.permutation(nq)  # query rank -> query
    writer = None
    sessions = max(1, rows // 3)
    for lo in range(0, rows, block):
        m = min(block, rows - lo)
        pick = zipf_draw(rng, nq, m, 0.9)
        first = np.arange(lo, lo + m)
        once = first < nq
        pick[once] = first[once]  # the first nq rows name every query once
        q = queries[order[pick]]
        secs = rng.integers(0, 7 * 86400, m)
        ts = np.datetime64(start) + secs.astype("timedelta64[s]")
        results = np.where(rng.random(m) < 0.15, 0, rng.integers(1, 60, m))
        table = pa.table(
            {
                "timestamp": pa.array(ts.astype("datetime64[s]")),
                "query": pa.array(q, pa.string()),
                "session": rng.integers(0, sessions, m),
                "user": rng.integers(0, sessions // 2 + 1, m),
                "results": results,
                "clicks": np.where(results > 0, rng.integers(0, 3, m), 0),
            }
        )
        if writer is None:
            writer = pacsv.CSVWriter(path, table.schema)
        writer.write_table(table)
    assert writer is not None
    writer.close()


def generate(size: Size, folder: Path, seed: int = 20250303) -> Workload:
    """Write the workload of ``size`` into ``folder`` (created)."""
    folder.mkdir(parents=True, exist_ok=True)
    rng = np.random.default_rng(seed)
    words = make_words(size.vocabulary)
    content = folder / "content.csv"
    write_content(rng, size, words, content)
    queries = make_queries(rng, size.queries + size.queries // 10, words)
    week1_q, new_q = queries[: size.queries], queries[size.queries :]
    week1 = folder / "week1.csv"
    write_log(rng, week1_q, size.rows, WEEK1, week1)
    keep = week1_q[rng.permutation(size.queries)[: size.queries - len(new_q)]]
    week2_q = np.concatenate([keep, new_q])
    week2 = folder / "week2.csv"
    write_log(rng, week2_q, size.rows // 4, WEEK1 + timedelta(days=7), week2)
    return Workload(size, content, week1, week2, "2025-W10", "2025-W11")


def ensure(size: Size, folder: Path, seed: int = 20250303) -> Workload:
    """The workload of ``size`` in ``folder``: reused when a finished one is there, else written.

    A file ``done-<size>-<seed>`` marks a finished workload, so an interrupted one is rewritten.
    """
    mark = folder / f"done-{size.name}-{seed}"
    if mark.exists():
        return Workload(
            size,
            folder / "content.csv",
            folder / "week1.csv",
            folder / "week2.csv",
            "2025-W10",
            "2025-W11",
        )
    work = generate(size, folder, seed)
    mark.write_text("finished\n")
    return work


def main(argv: list[str] | None = None) -> None:
    """Write a workload beforehand: ``python workload.py --size M --folder /tmp/qg-M``."""
    import argparse

    parser = argparse.ArgumentParser(description=main.__doc__)
    parser.add_argument("--size", choices=sorted(SIZES), default="S")
    parser.add_argument("--folder", type=Path, required=True)
    args = parser.parse_args(argv)
    work = ensure(SIZES[args.size], args.folder)
    print(f"workload {work.size.name} in {args.folder}")


if __name__ == "__main__":
    main()
