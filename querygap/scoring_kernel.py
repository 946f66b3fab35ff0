"""The exact top-k kernel behind the score stage: every query against every page, best ``k`` kept.

For a query q (a sparse unit vector, CSR row) and the postings of each term t (the pages d with
weight ``w(t, d) > 0``, a CSR row of the transposed page matrix), the score of page d is

    score(q, d) = sum over terms t of q: q(t) * w(t, d)

computed term at a time into a dense accumulator of one float64 per page. Only the pages a query
touched are read back (and reset), so the cost per query is the number of postings of its terms,
not the number of pages. The ``k`` best pages are kept while reading back (a sorted array of
length ``k``), ordered by score falling, ties by the lower page row; pages scoring exactly 0 are
not kept.

Terms are renumbered rarest first, and each query's terms are summed in that order on both paths,
so the compiled kernel and the numpy path agree bit for bit (and with ``weights @ pages.T`` on
the renumbered matrices).

Max-score stop (the max_score bound of Turtle & Flood, 1995, in the term-at-a-time "continue"
form of Moffat & Zobel, 1996; both cited from memory). Let ``m(t)`` be term t's largest page
weight. After a query's first j terms, a page not touched yet can gain at most
``R_j = sum over the later terms of q(t) m(t)``. Once ``R_j`` is below theta, the k-th best
partial score so far (a lower bound on the final k-th best, since weights are >= 0), no such page
can enter the top k: the later terms only update the touched pages that can still reach theta
(``acc + R_j >= theta``), looked up in a dense row (the commonest terms) or by binary search or a
merge pass in the term's sorted postings. Every bound carries a relative slack of 1e-9, far above
the rounding of the sums, so the result is exactly the exhaustive one; tests check it against
scikit-learn's cosine and against the numpy path. The long postings of common terms come last
in each query, so they are the ones skipped. The stop is tried only where the later terms'
postings outnumber the pages touched so far ``STOP_WORTH`` times: elsewhere the look-ups cost
more than the sequential reads they save. At size M it skips 27% of the postings touched
(trying everywhere skipped 54%), and the kernel runs in about 0.77 of the time it takes trying
everywhere (see ``STOP_WORTH``).

Impact cut (the impact-sorted postings of Anh & Moffat, "Pruned query evaluation using
pre-computed impacts", SIGIR 2006, pp. 372-379; here kept exact). Each term's
postings are also kept by weight falling. A page not touched before term t ends at most
``q(t) w(t, d) + R_t`` (``R_t``: the most the later terms can add), so of t's postings only a
prefix by weight can bring in a new page that reaches theta; the touched pages get their
weight of t by look-up (a dense row or a binary search). The prefix is read in doubling steps,
theta re-taken between them. It is tried only where the prefix read and the look-ups cost under
half the list (``CUT_GAIN``); it cuts the postings read at size M by a further quarter (7.5 to
5.6 billion of 10.3 billion touched) and the kernel's time to about 0.85.

A floor (pages scoring under it are not wanted) is a bound from the first term on: theta is at
least the floor, so a query whose terms cannot reach it reads nothing, and one whose later terms
cannot lift a page to it stops there.

Queries run in an order that puts those sharing their commonest terms next to each other, so
the long postings are read from cache. With numba installed the kernel is compiled (cached on
disk after the first call) and runs chunks of queries in parallel threads (``numba.prange``, one
per core by default). Without numba, :func:`top_k_numpy` computes the same result with chunked
scipy products and a vectorised sort.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp

try:  # numba is optional: the pure numpy path below gives identical results, slower.
    import numba

    HAVE_NUMBA = True
except ImportError:  # pragma: no cover - exercised only where numba is absent
    numba = None
    HAVE_NUMBA = False

prange = numba.prange if HAVE_NUMBA else range

QUERY_CHUNK = 1024  # queries per parallel task: large enough to amortise the accumulator


def top_k_rows(scores: sp.csr_matrix, k: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The ``k`` largest non-zero entries of each row: (row, column, value).

    Rows ascending, values falling, ties broken by the lower column index.
    """
    scores = scores.tocsr()
    scores.eliminate_zeros()
    rows = np.repeat(np.arange(scores.shape[0]), np.diff(scores.indptr))
    order = np.lexsort((scores.indices, -scores.data, rows))
    rows_sorted = rows[order]
    starts = scores.indptr[:-1][rows_sorted]
    rank = np.arange(order.size) - starts
    keep = rank < k
    picked = order[keep]
    return rows_sorted[keep], scores.indices[picked], scores.data[picked]


def top_k_numpy(
    weights: sp.csr_matrix,
    postings: sp.csr_matrix,
    k: int,
    chunk: int = 20_000,
    floor: float = 0.0,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Pure numpy/scipy path: chunked product ``weights @ postings`` then :func:`top_k_rows`.

    Parameters
    ----------
    weights : csr_matrix, shape (n_queries, n_terms)
        Query unit vectors.
    postings : csr_matrix, shape (n_terms, n_docs)
        Page weights, one row of postings per term.
    k : int
        Pages kept per query.
    floor : float
        Pages scoring under it are not kept.
    """
    n = weights.shape[0]
    rows_out, cols_out, vals_out = [], [], []
    for start in range(0, n, chunk):
        product = weights[start : start + chunk] @ postings
        if floor > 0:
            product.data[product.data < floor] = 0.0
        r, c, v = top_k_rows(product, k)
        rows_out.append(r + start)
        cols_out.append(c)
        vals_out.append(v)
    if not rows_out:
        return np.empty(0, np.int64), np.empty(0, np.int64), np.empty(0)
    return (
        np.concatenate(rows_out).astype(np.int64),
        np.concatenate(cols_out).astype(np.int64),
        np.concatenate(vals_out),
    )


SAFETY = 1.0 + 1e-9  # slack on every bound: float sums of <= 10^6 terms err by far less
# The stop is tried only when the later terms have at least this many postings per page touched
# so far: trying costs a pass over the touched pages, and each page kept then costs a random
# look-up per later term, against a sequential read per posting skipped. Measured at size M
# (1.1M queries, 2 threads, paired runs), as a share of the time of the kernel before (which
# tried everywhere and appended touched pages with a branch): branch-free and trying everywhere
# 0.87-0.94; with this gate at 3: 0.63-0.68, 4: 0.69-0.70, 8: 0.69-0.75, 16: 0.68-0.70; never
# trying: 0.80-0.85.
STOP_WORTH = 4
# Impact cut (see ``_read_by_impact``): tried on lists of at least CUT_MIN postings, and only
# while the postings it may read plus the look-ups it costs stay under 1/CUT_GAIN of the list.
# Measured at size M (1M queries, 2 threads, paired runs of the kernel alone): 0.83-0.87 of the
# time without it; CUT_GAIN 3 and CUT_MIN 256 measured the same within noise.
CUT_MIN = 64
CUT_GAIN = 2


def _kth_largest(acc: np.ndarray, touched: np.ndarray, n: int, k: int, buf: np.ndarray) -> float:
    """The ``k``-th largest of ``acc[touched[:n]]`` (0 when fewer than ``k`` are positive)."""
    n_buf = 0
    for i in range(n):
        v = acc[touched[i]]
        if n_buf == k and v <= buf[k - 1]:
            continue
        pos = n_buf if n_buf < k else k - 1
        while pos > 0 and buf[pos - 1] < v:
            if pos < k:
                buf[pos] = buf[pos - 1]
            pos -= 1
        buf[pos] = v
        if n_buf < k:
            n_buf += 1
    return buf[k - 1] if n_buf == k else 0.0


def _first_at_least(p_idx: np.ndarray, lo: int, hi: int, d: int) -> int:
    """The first position in ``lo:hi`` of the sorted ``p_idx`` holding ``d`` or more (binary
    search; ``hi`` when none)."""
    while lo < hi:
        mid = (lo + hi) >> 1
        if p_idx[mid] < d:
            lo = mid + 1
        else:
            hi = mid
    return lo


def _read_by_impact(
    acc: np.ndarray,
    touched: np.ndarray,
    n_touched: int,
    k: int,
    buf: np.ndarray,
    floor: float,
    wq: float,
    rest: float,
    lo: int,
    hi: int,
    budget: int,
    i_idx: np.ndarray,
    i_val: np.ndarray,
    p_idx: np.ndarray,
    p_val: np.ndarray,
    row: np.ndarray,
) -> tuple[int, int, int]:
    """Add term t's postings ``lo:hi`` to the touched pages and to the pages that can still
    enter the top k: (pages touched, postings read, pages looked up).

    A page not touched yet ends at most ``wq w(t, d) + rest``. Its postings are read by weight
    falling (``i_idx``/``i_val``) while that bound reaches theta, the k-th best partial score
    (at least ``floor``; re-taken as the read doubles); the pages touched before then get
    their weight of t unless the read already gave it: from the dense ``row`` when it has one
    entry or more, else by binary search in the rows-sorted postings. When the read would
    pass ``budget`` postings the whole list is read instead and nothing is looked up.
    """
    n_before = n_touched
    theta = floor
    if n_touched >= k:
        theta = max(theta, _kth_largest(acc, touched, n_touched, k, buf))
    pos = lo
    step = k
    while True:
        first = pos  # first posting (weights falling) whose bound is under theta
        right = hi
        while first < right:
            mid = (first + right) >> 1
            if (wq * i_val[mid] + rest) * SAFETY >= theta:
                first = mid + 1
            else:
                right = mid
        end = min(first, pos + step)
        whole = end - lo > budget
        if whole:
            end = hi
        for p in range(pos, end):
            d = i_idx[p]
            v = acc[d]
            touched[n_touched] = d
            n_touched += v == 0.0
            acc[d] = v + wq * i_val[p]
        pos = end
        if whole:
            return n_touched, hi - lo, 0
        if pos == first:
            break
        step *= 2
        if n_touched >= k:
            theta = max(theta, _kth_largest(acc, touched, n_touched, k, buf))
    # Read: the postings before (v_cut, d_cut) in (weight falling, row rising) order.
    v_cut = i_val[pos - 1] if pos > lo else np.inf
    d_cut = i_idx[pos - 1] if pos > lo else -1
    for i in range(n_before):
        d = touched[i]
        if row.size:
            v = row[d]
        else:
            left = _first_at_least(p_idx, lo, hi, d)
            v = p_val[left] if left < hi and p_idx[left] == d else 0.0
        if v > 0.0 and (v < v_cut or (v == v_cut and d > d_cut)):
            acc[d] += wq * v
    return n_touched, pos - lo, n_before


def _kernel_py(
    q_ptr: np.ndarray,
    q_idx: np.ndarray,
    q_val: np.ndarray,
    p_ptr: np.ndarray,
    p_idx: np.ndarray,
    p_val: np.ndarray,
    i_idx: np.ndarray,
    i_val: np.ndarray,
    max_w: np.ndarray,
    dense_slot: np.ndarray,
    dense: np.ndarray,
    order: np.ndarray,
    chunk_order: np.ndarray,
    n_docs: int,
    k: int,
    floor: float,
    chunk: int,
    max_terms: int,
    out_doc: np.ndarray,
    out_val: np.ndarray,
    stats: np.ndarray,
) -> None:
    """Fill ``out_doc``/``out_val`` (n_queries, k) with each query's top pages (-1/0 when fewer)
    among those scoring ``floor`` or more.

    Queries are taken in the sequence ``order``, chunk ``chunk_order[i]`` as the i-th parallel
    task; ``dense[dense_slot[t]]`` is term t's weights
    as a dense row when ``dense_slot[t] >= 0``; ``i_idx``/``i_val`` are the postings of each
    term by weight falling (:func:`impact_order`). ``stats[c]`` gets (postings scanned,
    look-ups, queries that stopped early, impact cuts) of chunk c.
    """
    n_q = q_ptr.size - 1
    n_chunks = (n_q + chunk - 1) // chunk
    for ci in prange(n_chunks):
        c = chunk_order[ci]
        acc = np.zeros(n_docs, np.float64)
        touched = np.empty(n_docs + 1, np.int32)
        top_d = np.empty(k, np.int64)
        top_v = np.empty(k, np.float64)
        rest = np.empty(max_terms, np.float64)
        later = np.empty(max_terms, np.int64)
        no_row = np.empty(0, np.float64)
        scanned = 0
        looked_up = 0
        stopped = 0
        cut = 0
        stop = min(n_q, (c + 1) * chunk)
        for qq in range(c * chunk, stop):
            q = order[qq]
            a = q_ptr[q]
            n_t = q_ptr[q + 1] - a
            total = 0.0
            later_len = 0
            for jj in range(n_t - 1, -1, -1):  # rest[jj]: the most the terms after jj can add
                rest[jj] = total  # later[jj]: their postings
                later[jj] = later_len
                total += q_val[a + jj] * max_w[q_idx[a + jj]]
                later_len += p_ptr[q_idx[a + jj] + 1] - p_ptr[q_idx[a + jj]]
            if total * SAFETY < floor:  # no page can reach the floor
                continue
            n_touched = 0
            pruned = False  # True once no page not touched yet can reach the top k
            reached = 0.0  # the most any page can have so far
            for jj in range(n_t):
                t = q_idx[a + jj]
                wq = q_val[a + jj]
                lo = p_ptr[t]
                hi = p_ptr[t + 1]
                if not pruned:
                    slot = dense_slot[t]
                    budget = 0
                    if hi - lo >= CUT_MIN:  # the impact cut, when its look-ups cost little
                        steps = 1
                        while (1 << steps) < hi - lo:
                            steps += 1
                        budget = (hi - lo) // CUT_GAIN - n_touched * (1 if slot >= 0 else steps)
                    if budget > 0:
                        row = dense[slot] if slot >= 0 else no_row
                        n_touched, read, looked = _read_by_impact(
                            acc, touched, n_touched, k, top_v, floor, wq, rest[jj], lo, hi,
                            budget, i_idx, i_val, p_idx, p_val, row,
                        )  # fmt: skip
                        scanned += read
                        looked_up += looked
                        cut += read < hi - lo
                    else:
                        for p in range(lo, hi):  # acc > 0 marks a touched page (weights > 0)
                            d = p_idx[p]
                            v = acc[d]
                            touched[n_touched] = d  # branch-free append: kept only when new
                            n_touched += v == 0.0
                            acc[d] = v + wq * p_val[p]
                        scanned += hi - lo
                    reached += wq * max_w[t]
                    if jj == n_t - 1 or later[jj] < STOP_WORTH * n_touched:
                        continue  # reading the rest costs less than trying to stop
                    bound = rest[jj] * SAFETY
                    theta = floor
                    if n_touched >= k and bound < reached:  # else the k-th best <= the bound
                        theta = max(theta, _kth_largest(acc, touched, n_touched, k, top_v))
                    if not bound < theta:
                        continue
                    # Max-score: a page not touched yet ends below theta, the k-th best so far.
                    # Keep the touched pages that can still reach theta, sorted by row.
                    n_keep = 0
                    for i in range(n_touched):
                        d = touched[i]
                        if (acc[d] + rest[jj]) * SAFETY >= theta:
                            touched[n_keep] = d
                            n_keep += 1
                        else:
                            acc[d] = 0.0
                    n_touched = n_keep
                    touched[:n_touched].sort()
                    pruned = True
                    stopped += 1
                    continue
                # Only the kept pages: read their weights of term t.
                slot = dense_slot[t]
                looked_up += n_touched
                if slot >= 0:
                    row = dense[slot]
                    for i in range(n_touched):
                        d = touched[i]
                        v = row[d]
                        if v > 0.0:
                            acc[d] += wq * v
                    continue
                length = hi - lo
                steps = 1
                while (1 << steps) < length:
                    steps += 1
                pos = lo
                if 4 * n_touched * steps < length:  # binary search from the last hit
                    for i in range(n_touched):
                        d = touched[i]
                        pos = _first_at_least(p_idx, pos, hi, d)
                        if pos == hi:
                            break
                        if p_idx[pos] == d:
                            acc[d] += wq * p_val[pos]
                else:  # one merge pass
                    for i in range(n_touched):
                        d = touched[i]
                        while pos < hi and p_idx[pos] < d:
                            pos += 1
                        if pos == hi:
                            break
                        if p_idx[pos] == d:
                            acc[d] += wq * p_val[pos]
                    scanned += pos - lo
            n_top = 0
            for i in range(n_touched):
                d = touched[i]
                v = acc[d]
                acc[d] = 0.0
                if v <= 0.0 or v < floor:
                    continue
                if n_top == k and (v < top_v[k - 1] or (v == top_v[k - 1] and d > top_d[k - 1])):
                    continue
                pos = n_top if n_top < k else k - 1
                while pos > 0 and (
                    top_v[pos - 1] < v or (top_v[pos - 1] == v and top_d[pos - 1] > d)
                ):
                    if pos < k:
                        top_v[pos] = top_v[pos - 1]
                        top_d[pos] = top_d[pos - 1]
                    pos -= 1
                top_v[pos] = v
                top_d[pos] = d
                if n_top < k:
                    n_top += 1
            for i in range(n_top):
                out_doc[q, i] = top_d[i]
                out_val[q, i] = top_v[i]
        stats[c, 0] = scanned
        stats[c, 1] = looked_up
        stats[c, 2] = stopped
        stats[c, 3] = cut


if HAVE_NUMBA:
    _kth_largest = numba.njit(cache=True, nogil=True)(_kth_largest)
    _first_at_least = numba.njit(cache=True, nogil=True, inline="always")(_first_at_least)
    _read_by_impact = numba.njit(cache=True, nogil=True)(_read_by_impact)
    _kernel = numba.njit(parallel=True, cache=True, nogil=True)(_kernel_py)
else:  # pragma: no cover
    _kernel = None


DENSE_BYTES = 256 * 2**20  # at most this much for dense rows of the commonest terms
DENSE_SHARE = 1 / 16  # a term gets a dense row when at least this share of pages have it


def dense_rows(postings: sp.csr_matrix) -> tuple[np.ndarray, np.ndarray]:
    """Dense weight rows for the commonest terms: (slot per term, -1 when none; rows).

    A term gets one when at least ``DENSE_SHARE`` of the pages have it, the longest lists first,
    within ``DENSE_BYTES``; the kernel reads a kept page's weight from it in one step.
    """
    n_terms, n_docs = postings.shape
    lengths = np.diff(postings.indptr)
    budget = DENSE_BYTES // max(8 * n_docs, 1)
    common = np.flatnonzero(lengths >= max(1, int(np.ceil(DENSE_SHARE * n_docs))))
    common = common[np.argsort(-lengths[common], kind="stable")][:budget]
    slot = np.full(n_terms, -1, np.int64)
    slot[common] = np.arange(common.size)
    rows = np.zeros((common.size, n_docs))
    if common.size:
        picked = postings[common]
        rows[np.repeat(np.arange(common.size), np.diff(picked.indptr)), picked.indices] = (
            picked.data
        )
    return slot, rows


def locality_order(weights: sp.csr_matrix) -> np.ndarray:
    """Queries sorted by their last term, then the one before (the commonest, longest lists).

    Queries sharing those terms run one after another, so the long postings stay in cache.
    """
    n = weights.shape[0]
    if not weights.nnz:
        return np.arange(n, dtype=np.int64)
    lengths = np.diff(weights.indptr)
    last = np.where(lengths > 0, weights.indices[np.maximum(weights.indptr[1:] - 1, 0)], -1)
    before = np.where(lengths > 1, weights.indices[np.maximum(weights.indptr[1:] - 2, 0)], -1)
    return np.lexsort((np.arange(n), before, last)).astype(np.int64)


def top_k_compiled(
    weights: sp.csr_matrix,
    postings: sp.csr_matrix | Postings,
    k: int,
    chunk: int = QUERY_CHUNK,
    counts: dict[str, int] | None = None,
    floor: float = 0.0,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The compiled term-at-a-time path; same arguments and result as :func:`top_k_numpy`.

    The max-score stop pays off when each query's terms come rarest first (:func:`term_order`);
    the result is exact in any order. ``counts``, when given, receives ``scanned`` (postings
    read), ``looked_up`` (kept pages looked up in a later term), ``stopped`` (queries whose
    later terms only updated kept pages) and ``cut`` (terms whose postings were read only as
    far as the impact cut).
    """
    if _kernel is None:
        raise RuntimeError("numba is not installed; use top_k_numpy")
    n = weights.shape[0]
    out_doc = np.full((n, k), -1, np.int64)
    out_val = np.zeros((n, k), np.float64)
    n_chunks = max(1, (n + chunk - 1) // chunk)
    stats = np.zeros((n_chunks, 4), np.int64)
    if isinstance(postings, Postings):
        ready = postings
    else:
        matrix = sp.csr_matrix(postings)
        if not matrix.has_sorted_indices:
            matrix = matrix.sorted_indices()
        ready = _made_ready(matrix)
    postings = ready.matrix
    _kernel(
        weights.indptr.astype(np.int64),
        weights.indices.astype(np.int32),
        weights.data.astype(np.float64),
        postings.indptr.astype(np.int64),
        postings.indices.astype(np.int32),
        postings.data.astype(np.float64),
        ready.impact_rows,
        ready.impact_weights,
        ready.max_w,
        ready.dense_slot,
        ready.dense,
        locality_order(weights),
        # Chunks in a fixed shuffled order: the threads' share of the heavy chunks (those of
        # common terms, which the locality order puts together) evens out.
        np.random.default_rng(0).permutation(n_chunks).astype(np.int64),
        postings.shape[1],
        k,
        float(floor),
        chunk,
        int(np.diff(weights.indptr).max(initial=0)) + 1,
        out_doc,
        out_val,
        stats,
    )
    if counts is not None:
        scanned, looked_up, stopped, cut = stats.sum(axis=0)
        counts.update(
            scanned=int(scanned), looked_up=int(looked_up), stopped=int(stopped), cut=int(cut)
        )
    keep = out_doc >= 0
    rows_out = np.broadcast_to(np.arange(n, dtype=np.int64)[:, None], (n, k))[keep]
    return rows_out, out_doc[keep], out_val[keep]


def largest_weight(postings: sp.csr_matrix) -> np.ndarray:
    """Each term's largest page weight (0 for a term no page has): the max-score bound."""
    out = np.zeros(postings.shape[0])
    rows = np.flatnonzero(np.diff(postings.indptr))
    if rows.size:
        out[rows] = np.maximum.reduceat(postings.data, postings.indptr[rows])
    return out


def term_order(postings: sp.csr_matrix) -> np.ndarray:
    """Terms renumbered rarest first (fewest pages), ties by term id: a permutation."""
    return np.argsort(np.diff(postings.indptr), kind="stable")


def _products_stay_normal(weights: sp.csr_matrix, postings: sp.csr_matrix) -> bool:
    """True when every product q(t) w(t, d) > 0 is a normal float, so a sum never stays 0."""
    if not weights.nnz or not postings.nnz:
        return True
    return bool(weights.data.min() * postings.data.min() >= np.finfo(np.float64).tiny)


@dataclass(frozen=True)
class Postings:
    """Page postings made ready for scoring once, then reused by every call on the same index.

    ``matrix`` holds one row per term renumbered by ``order`` (:func:`term_order`), rows sorted;
    ``max_w``, ``dense_slot`` and ``dense`` are its largest weights and dense rows
    (:func:`dense_rows`); ``impact_rows``/``impact_weights`` the same postings by weight
    falling within each term (:func:`impact_order`).
    """

    order: np.ndarray
    matrix: sp.csr_matrix
    max_w: np.ndarray
    dense_slot: np.ndarray
    dense: np.ndarray
    impact_rows: np.ndarray
    impact_weights: np.ndarray


def _by_weight_py(
    ptr: np.ndarray, idx: np.ndarray, val: np.ndarray, out_idx: np.ndarray, out_val: np.ndarray
) -> None:
    """Each row's entries by value falling; a stable sort, so ties keep the rising ``idx``."""
    for t in prange(ptr.size - 1):
        lo = ptr[t]
        hi = ptr[t + 1]
        if hi - lo < 2:
            out_idx[lo:hi] = idx[lo:hi]
            out_val[lo:hi] = val[lo:hi]
            continue
        picked = np.argsort(-val[lo:hi], kind="mergesort")
        out_idx[lo:hi] = idx[lo:hi][picked]
        out_val[lo:hi] = val[lo:hi][picked]


_by_weight = (
    numba.njit(parallel=True, cache=True, nogil=True)(_by_weight_py) if HAVE_NUMBA else None
)


def impact_order(matrix: sp.csr_matrix) -> tuple[np.ndarray, np.ndarray]:
    """Each term's postings by weight falling, ties by the lower page row: (page rows, weights).

    ``matrix`` has its rows sorted (page rows rising within a term).
    """
    idx = matrix.indices.astype(np.int32)
    val = matrix.data.astype(np.float64)
    if _by_weight is None:  # pragma: no cover - exercised only where numba is absent
        rows = np.repeat(np.arange(matrix.shape[0]), np.diff(matrix.indptr))
        order = np.lexsort((idx, -val, rows))
        return idx[order], val[order]
    out_idx = np.empty_like(idx)
    out_val = np.empty_like(val)
    _by_weight(matrix.indptr.astype(np.int64), idx, val, out_idx, out_val)
    return out_idx, out_val


def _made_ready(matrix: sp.csr_matrix, order: np.ndarray | None = None) -> Postings:
    """The :class:`Postings` of a rows-sorted ``matrix`` (its terms renumbered by ``order``)."""
    slot, rows = dense_rows(matrix)
    by_rows, by_weights = impact_order(matrix)
    if order is None:
        order = np.arange(matrix.shape[0])
    return Postings(order, matrix, largest_weight(matrix), slot, rows, by_rows, by_weights)


def prepare_postings(postings: sp.csr_matrix) -> Postings:
    """Renumber the terms rarest first and build the kernel's bounds, dense rows and impact
    order."""
    postings = sp.csr_matrix(postings)
    postings.eliminate_zeros()
    order = term_order(postings)
    matrix = postings[order]
    matrix.sort_indices()
    return _made_ready(matrix, order)


def top_k_scores(
    weights: sp.csr_matrix,
    postings: sp.csr_matrix | Postings,
    k: int,
    use_compiled: bool | None = None,
    chunk: int | None = None,
    counts: dict[str, int] | None = None,
    floor: float = 0.0,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Each query's ``k`` best pages: (row, page row, score), rows ascending, scores falling.

    Only pages scoring ``floor`` or more are kept (a query may keep none). A floor is a
    max-score bound from the start: a query's terms stop reading new pages as soon as the most
    its later terms can add is under it, so asking only for pages that can pass a threshold is
    much cheaper than the whole top k.

    Both paths first renumber the terms by :func:`term_order`, so each score is summed over the
    query's terms rarest first and the two paths agree bit for bit. ``use_compiled=None`` takes
    the compiled kernel when numba is installed; ``chunk`` is the number of queries per chunk
    (default: each path's own); ``counts`` as in :func:`top_k_compiled`. ``postings`` may be
    a :class:`Postings` made once by :func:`prepare_postings`, so repeated calls on one index
    (the propose stage re-scores in rounds) do not renumber it each time.
    """
    ready = postings if isinstance(postings, Postings) else prepare_postings(postings)
    weights = sp.csr_matrix(weights)[:, ready.order]
    weights.eliminate_zeros()
    weights.sort_indices()
    compiled = HAVE_NUMBA if use_compiled is None else use_compiled
    if compiled and _products_stay_normal(weights, ready.matrix):
        return top_k_compiled(weights, ready, k, chunk or QUERY_CHUNK, counts, floor)
    return top_k_numpy(weights, ready.matrix, k, chunk or 20_000, floor)
