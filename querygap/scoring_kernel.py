"""The exact top-k kernel behind the score stage: every query against every page, best ``k`` kept.

For a query q (a sparse unit vector, CSR row) and the postings of each term t (the pages d with
weight ``w(t, d) > 0``), the score of page d is

    score(q, d) = sum over terms t of q: q(t) * w(t, d)

Each term's postings are kept twice: by page row (for look-ups) and by weight falling (the
impact order of Anh & Moffat, "Pruned query evaluation using pre-computed impacts", SIGIR
2006). A query is evaluated in three steps, with a dense accumulator of one float64 per page of
which only the pages touched are read back and reset, so the cost follows the postings read,
not the number of pages:

1. Read the terms' postings by weight falling, always from the term whose next posting can add
   the most, in blocks that double per term. A page not touched yet scores at most
   ``B = sum over terms t of q(t) w_next(t)``, ``w_next(t)`` being the weight of t's next
   unread posting (the threshold of Fagin, Lotem & Naor's threshold algorithm, "Optimal
   aggregation algorithms for middleware", PODS 2001; cited from memory). Theta, the k-th best
   partial score so far (a lower bound on the final k-th best, since weights are >= 0), is
   taken from the pages that reached it, kept in a short list. Reading stops once ``B`` is
   under theta: no page not touched yet can enter the top k.
2. The touched pages that can still reach theta (``acc + B >= theta``) are kept and get their
   weights of the unread postings, always from the term that can add the most: either looked
   up (a dense row for the commonest terms, else a binary search in the rows-sorted postings),
   when that costs less than the term's unread postings, or by reading on in the term by
   weight, in doubling blocks, adding only to kept pages. As ``B`` falls and theta rises, the
   pages that fall out of reach are dropped (a pass over the kept pages whenever the work
   since the last one reaches half their number, and before each look-up).
3. The pages left within the slack of theta are summed again over the query's terms in order,
   rarest first, and the ``k`` best kept, ordered by score falling, ties by the lower page row;
   pages scoring exactly 0 are not kept.

Every bound carries a relative slack of 1e-9, far above the rounding of the sums, so the result
is exactly the exhaustive one. Terms are renumbered rarest first and step 3 sums in that order,
so the compiled kernel and the numpy path agree bit for bit (and with ``weights @ pages.T`` on
the renumbered matrices); tests check this and against scikit-learn's cosine. At size M (1M
queries against 100k pages, 10.3 billion postings touched, top 5) the kernel reads 0.96 billion
postings and looks up 0.41 billion pages, against 5.6 and 0.37 billion for the term-at-a-time
kernel with a max-score stop and impact cut it replaced, in 0.45 to 0.5 of its time (paired
runs; see DEVELOPERS.md).

A floor (pages scoring under it are not wanted) is theta's least value: a query whose terms
cannot reach it reads nothing, and reading stops as soon as ``B`` is under it.

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
# A kept page's binary search costs about this many postings read in sequence per step (the
# choice between looking kept pages up in a term and reading on in its postings).
LOOK_UP_COST = 4


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


def _steps(length: int) -> int:
    """Steps of a binary search over ``length`` entries: the least s >= 1 with 2^s >= length."""
    s = 1
    while (1 << s) < length:
        s += 1
    return s


def _insert(buf: np.ndarray, n_buf: int, k: int, v: float) -> int:
    """Put ``v`` into ``buf[:n_buf]``, the ``k`` largest so far kept falling; the new fill."""
    if n_buf == k and v <= buf[k - 1]:
        return n_buf
    pos = n_buf if n_buf < k else k - 1
    while pos > 0 and buf[pos - 1] < v:
        if pos < k:
            buf[pos] = buf[pos - 1]
        pos -= 1
    buf[pos] = v
    return n_buf + 1 if n_buf < k else k


def _theta_of_hot(
    acc: np.ndarray,
    hot: np.ndarray,
    n_hot: int,
    k: int,
    buf: np.ndarray,
    mark: np.ndarray,
    theta: float,
) -> tuple[float, int]:
    """Raise ``theta`` to the ``k``-th largest score of the distinct pages in ``hot[:n_hot]``,
    then keep in ``hot`` (once each) only the pages within the slack of it: (theta, kept).

    ``hot`` may hold a page more than once; ``mark`` (all False before and after) counts each
    page once.
    """
    n_buf = 0
    for i in range(n_hot):
        d = hot[i]
        if mark[d]:
            continue
        mark[d] = True
        n_buf = _insert(buf, n_buf, k, acc[d])
    if n_buf == k and buf[k - 1] > theta:
        theta = buf[k - 1]
    n_keep = 0
    for i in range(n_hot):
        d = hot[i]
        if mark[d]:
            mark[d] = False
            if acc[d] * SAFETY >= theta:
                hot[n_keep] = d
                n_keep += 1
    return theta, n_keep


def _prune(
    acc: np.ndarray, kept: np.ndarray, n: int, rest: float, theta: float, k: int, buf: np.ndarray
) -> tuple[int, float]:
    """Keep the pages of ``kept[:n]`` that can still reach ``theta`` (``acc + rest``), in
    their order, and reset the others' ``acc``; then raise theta to the ``k``-th largest kept
    score: (kept, theta)."""
    n_keep = 0
    n_buf = 0
    for i in range(n):
        d = kept[i]
        v = acc[d]
        if (v + rest) * SAFETY >= theta:
            kept[n_keep] = d
            n_keep += 1
            n_buf = _insert(buf, n_buf, k, v)
        else:
            acc[d] = 0.0
    if n_buf == k and buf[k - 1] > theta:
        theta = buf[k - 1]
    return n_keep, theta


def _look_up_unread(
    acc: np.ndarray,
    kept: np.ndarray,
    n_kept: int,
    is_sorted: bool,
    wq: float,
    lo: int,
    hi: int,
    p0: int,
    p_idx: np.ndarray,
    p_val: np.ndarray,
    i_idx: np.ndarray,
    i_val: np.ndarray,
    row: np.ndarray,
) -> bool:
    """Add to each kept page its weight of a term whose postings ``lo:p0`` (by weight falling)
    were read and ``p0:hi`` were not; returns True (``kept`` is now sorted when it had to be).

    From the term's dense ``row`` when it has one (``row.size`` > 0), else by a binary search
    per page, from the last hit, in the rows-sorted postings (``kept`` sorted first). A
    looked-up weight was read already when it comes before the last read posting in (weight
    falling, row rising) order.
    """
    v_cut = i_val[p0 - 1] if p0 > lo else np.inf
    d_cut = i_idx[p0 - 1] if p0 > lo else -1
    if row.size:
        for i in range(n_kept):
            d = kept[i]
            v = row[d]
            if v > 0.0 and (v < v_cut or (v == v_cut and d > d_cut)):
                acc[d] += wq * v
        return is_sorted
    if not is_sorted:
        kept[:n_kept].sort()
    at = lo
    for i in range(n_kept):
        d = kept[i]
        at = _first_at_least(p_idx, at, hi, d)
        if at == hi:
            break
        if p_idx[at] == d:
            v = p_val[at]
            if v < v_cut or (v == v_cut and d > d_cut):
                acc[d] += wq * v
    return True


def _most_left(cur: np.ndarray, n_t: int) -> int:
    """The term whose next unread posting can add the most (``cur`` largest, > 0); -1 when
    every term is read or given."""
    best = -1
    most = 0.0
    for j in range(n_t):
        if cur[j] > most:
            most = cur[j]
            best = j
    return best


def _read_to(
    pos: np.ndarray,
    cur: np.ndarray,
    n_t: int,
    j: int,
    end: int,
    hi: int,
    wq: float,
    i_val: np.ndarray,
) -> float:
    """Mark term j's postings read up to ``end`` (of ``hi``); the new bound ``sum of cur``."""
    pos[j] = end
    cur[j] = 0.0 if end == hi else wq * i_val[end]
    bound = 0.0
    for i in range(n_t):
        bound += cur[i]
    return bound


def _kernel_py(
    q_ptr: np.ndarray,
    q_idx: np.ndarray,
    q_val: np.ndarray,
    p_ptr: np.ndarray,
    p_idx: np.ndarray,
    p_val: np.ndarray,
    i_idx: np.ndarray,
    i_val: np.ndarray,
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
    task; ``p_ptr``/``p_idx``/``p_val`` are the postings of each term by page row rising,
    ``i_idx``/``i_val`` the same by weight falling (:func:`impact_order`); ``dense[dense_slot[t]]``
    is term t's weights as a dense row when ``dense_slot[t] >= 0``. ``stats[c]`` gets (postings
    read, pages looked up, queries that stopped bringing in new pages, pages summed again,
    postings read after the stop, pages looked up by binary search) of chunk c.
    """
    n_q = q_ptr.size - 1
    n_chunks = (n_q + chunk - 1) // chunk
    for ci in prange(n_chunks):
        c = chunk_order[ci]
        acc = np.zeros(n_docs, np.float64)  # acc > 0 marks a touched page (weights > 0)
        touched = np.empty(n_docs + 1, np.int32)
        # Pages that reached theta, some more than once: after each block at most n_docs
        # distinct ones (or under k), and a block adds at most n_docs.
        hot = np.empty(2 * n_docs + k + 1, np.int32)
        mark = np.zeros(n_docs, np.bool_)
        top_d = np.empty(k, np.int64)
        top_v = np.empty(k, np.float64)
        pos = np.empty(max_terms, np.int64)  # each term's next unread posting by weight
        cur = np.empty(max_terms, np.float64)  # q(t) times that posting's weight (0: read or given)
        no_row = np.empty(0, np.float64)
        scanned = 0
        looked_up = 0
        stopped = 0
        summed = 0
        read_rest = 0
        searched = 0
        stop = min(n_q, (c + 1) * chunk)
        for qq in range(c * chunk, stop):
            q = order[qq]
            a = q_ptr[q]
            n_t = q_ptr[q + 1] - a
            bound = 0.0  # the most a page not touched yet can score
            for j in range(n_t):
                t = q_idx[a + j]
                pos[j] = p_ptr[t]
                cur[j] = 0.0 if p_ptr[t + 1] == p_ptr[t] else q_val[a + j] * i_val[p_ptr[t]]
                bound += cur[j]
            if bound * SAFETY < floor:  # no page can reach the floor
                continue
            # 1. Read the terms' postings by weight falling, always from the term that can add
            # the most, in blocks that double, until no page not touched yet can reach theta.
            n_touched = 0
            n_hot = 0
            theta = floor
            while bound * SAFETY >= theta:
                best = _most_left(cur, n_t)
                if best < 0:
                    break
                t = q_idx[a + best]
                wq = q_val[a + best]
                lo = p_ptr[t]
                hi = p_ptr[t + 1]
                p0 = pos[best]
                end = min(hi, p0 + max(k, p0 - lo))
                bar = theta / SAFETY
                for p in range(p0, end):
                    d = i_idx[p]
                    v = acc[d]
                    touched[n_touched] = d  # branch-free appends: kept only when new / hot
                    n_touched += v == 0.0
                    v += wq * i_val[p]
                    acc[d] = v
                    hot[n_hot] = d
                    n_hot += v >= bar
                scanned += end - p0
                bound = _read_to(pos, cur, n_t, best, end, hi, wq, i_val)
                if n_hot >= k:
                    theta, n_hot = _theta_of_hot(acc, hot, n_hot, k, top_v, mark, theta)
            if bound > 0.0:
                # 2. Some postings are unread: keep the touched pages that can still reach
                # theta and give them their weights of the unread terms, the term that can add
                # the most first, dropping those that fall out of reach as theta rises.
                stopped += 1
                n_touched, theta = _prune(acc, touched, n_touched, bound, theta, k, top_v)
                is_sorted = False
                since = 0  # postings read and pages looked up since the last prune
                while bound > 0.0:
                    best = _most_left(cur, n_t)
                    t = q_idx[a + best]
                    wq = q_val[a + best]
                    lo = p_ptr[t]
                    hi = p_ptr[t + 1]
                    p0 = pos[best]
                    slot = dense_slot[t]
                    per_page = 1 if slot >= 0 else LOOK_UP_COST * _steps(hi - lo)
                    if per_page * n_touched < hi - p0 and since > 0:  # prune before looking up
                        n_touched, theta = _prune(acc, touched, n_touched, bound, theta, k, top_v)
                        since = 0
                    cost = per_page * n_touched
                    if cost < hi - p0:  # look the kept pages up in the term
                        is_sorted = _look_up_unread(
                            acc, touched, n_touched, is_sorted, wq, lo, hi, p0, p_idx, p_val,
                            i_idx, i_val, dense[slot] if slot >= 0 else no_row,
                        )  # fmt: skip
                        looked_up += n_touched
                        searched += n_touched if slot < 0 else 0
                        since += n_touched
                        end = hi  # every kept page has its weight of the term now
                    else:  # read on by weight, for the kept pages only (acc > 0 marks them)
                        end = min(hi, p0 + max(k, p0 - lo))
                        for p in range(p0, end):
                            d = i_idx[p]
                            v = acc[d]
                            if v > 0.0:
                                acc[d] = v + wq * i_val[p]
                        scanned += end - p0
                        read_rest += end - p0
                        since += end - p0
                    bound = _read_to(pos, cur, n_t, best, end, hi, wq, i_val)
                    if bound == 0.0 or 2 * since >= n_touched:  # a pass costs n_touched
                        n_touched, theta = _prune(acc, touched, n_touched, bound, theta, k, top_v)
                        since = 0
                n_hot = n_touched  # every page left has its whole score
                hot[:n_hot] = touched[:n_hot]
                n_touched = 0
            else:
                theta, n_hot = _theta_of_hot(acc, hot, n_hot, k, top_v, mark, theta)
            # 3. The pages within the slack of theta are summed again, over the query's terms
            # in order (the order of the numpy path), and the k best kept; all else is reset.
            n_keep = 0
            for i in range(n_hot):
                d = hot[i]
                if acc[d] * SAFETY >= theta:
                    hot[n_keep] = d
                    n_keep += 1
                acc[d] = 0.0
            for i in range(n_touched):
                acc[touched[i]] = 0.0
            summed += n_keep
            n_top = 0
            for i in range(n_keep):
                d = hot[i]
                v = 0.0
                for j in range(n_t):
                    t = q_idx[a + j]
                    slot = dense_slot[t]
                    if slot >= 0:
                        w = dense[slot, d]
                    else:
                        at = _first_at_least(p_idx, p_ptr[t], p_ptr[t + 1], d)
                        w = p_val[at] if at < p_ptr[t + 1] and p_idx[at] == d else 0.0
                    if w > 0.0:
                        v += q_val[a + j] * w
                if v <= 0.0 or v < floor:
                    continue
                if n_top == k and (v < top_v[k - 1] or (v == top_v[k - 1] and d > top_d[k - 1])):
                    continue
                at = n_top if n_top < k else k - 1
                while at > 0 and (top_v[at - 1] < v or (top_v[at - 1] == v and top_d[at - 1] > d)):
                    if at < k:
                        top_v[at] = top_v[at - 1]
                        top_d[at] = top_d[at - 1]
                    at -= 1
                top_v[at] = v
                top_d[at] = d
                if n_top < k:
                    n_top += 1
            for i in range(n_top):
                out_doc[q, i] = top_d[i]
                out_val[q, i] = top_v[i]
        stats[c, 0] = scanned
        stats[c, 1] = looked_up
        stats[c, 2] = stopped
        stats[c, 3] = summed
        stats[c, 4] = read_rest
        stats[c, 5] = searched


if HAVE_NUMBA:
    _first_at_least = numba.njit(cache=True, nogil=True, inline="always")(_first_at_least)
    _steps = numba.njit(cache=True, nogil=True, inline="always")(_steps)
    _insert = numba.njit(cache=True, nogil=True)(_insert)
    _most_left = numba.njit(cache=True, nogil=True, inline="always")(_most_left)
    _read_to = numba.njit(cache=True, nogil=True, inline="always")(_read_to)
    _theta_of_hot = numba.njit(cache=True, nogil=True)(_theta_of_hot)
    _prune = numba.njit(cache=True, nogil=True)(_prune)
    _look_up_unread = numba.njit(cache=True, nogil=True)(_look_up_unread)
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
    """The compiled path; same arguments and result as :func:`top_k_numpy`.

    ``counts``, when given, receives ``scanned`` (postings read), ``looked_up`` (pages given a
    term's weight by dense row or binary search; ``searched`` of them by binary search),
    ``stopped`` (queries that stopped bringing in new pages before the end of their postings),
    ``read_rest`` (postings read after that stop, for the kept pages only) and ``summed_again``
    (pages summed again in term order, the candidates within the slack of the k-th best).
    """
    if _kernel is None:
        raise RuntimeError("numba is not installed; use top_k_numpy")
    n = weights.shape[0]
    out_doc = np.full((n, k), -1, np.int64)
    out_val = np.zeros((n, k), np.float64)
    n_chunks = max(1, (n + chunk - 1) // chunk)
    stats = np.zeros((n_chunks, 6), np.int64)
    if isinstance(postings, Postings):
        ready = postings
    else:
        matrix = sp.csr_matrix(postings)
        if not matrix.has_sorted_indices:
            matrix = matrix.sorted_indices()
        ready = _made_ready(matrix)
    postings = ready.matrix
    _kernel(
        # No copies where the dtype is right already (the postings: 174 MB at size M, and the
        # propose stage calls this some 30 times).
        weights.indptr.astype(np.int64, copy=False),
        weights.indices.astype(np.int32, copy=False),
        weights.data.astype(np.float64, copy=False),
        postings.indptr.astype(np.int64, copy=False),
        postings.indices.astype(np.int32, copy=False),
        postings.data.astype(np.float64, copy=False),
        ready.impact_rows,
        ready.impact_weights,
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
        names = ("scanned", "looked_up", "stopped", "summed_again", "read_rest", "searched")
        counts.update(zip(names, (int(x) for x in stats.sum(axis=0)), strict=True))
    keep = out_doc >= 0
    rows_out = np.broadcast_to(np.arange(n, dtype=np.int64)[:, None], (n, k))[keep]
    return rows_out, out_doc[keep], out_val[keep]


def term_order(postings: sp.csr_matrix) -> np.ndarray:
    """Terms renumbered rarest first (fewest pages), ties by term id: a permutation."""
    return np.argsort(np.diff(postings.indptr), kind="stable")


def _products_stay_normal(weights: sp.csr_matrix, least: float) -> bool:
    """True when every product q(t) w(t, d) > 0 is a normal float, so a sum never stays 0
    (``least``: the least page weight, 0.0 for no postings)."""
    if not weights.nnz or least == 0.0:
        return True
    return bool(weights.data.min() * least >= np.finfo(np.float64).tiny)


def renumbered(weights: sp.csr_matrix, number: np.ndarray) -> sp.csr_matrix:
    """``weights`` with column t moved to ``number[t]`` (a permutation), zeros dropped,
    duplicates summed and each row's columns sorted: what ``weights[:, order]`` gives, by a
    lookup per stored entry (O(nnz)) where scipy's column indexing builds a selector matrix
    as wide as the vocabulary at every call."""
    out = sp.csr_matrix(
        (weights.data.copy(), number[weights.indices], weights.indptr.copy()), shape=weights.shape
    )
    out.eliminate_zeros()
    out.sum_duplicates()
    return out


@dataclass(frozen=True)
class Postings:
    """Page postings made ready for scoring once, then reused by every call on the same index.

    ``matrix`` holds one row per term renumbered by ``order`` (:func:`term_order`), rows sorted;
    ``dense_slot`` and ``dense`` are its dense rows (:func:`dense_rows`);
    ``impact_rows``/``impact_weights`` the same postings by weight falling within each term
    (:func:`impact_order`); ``number[t]`` is term t's new number (``order`` inverted) and
    ``least`` the least weight (0.0 when there is none), both kept for the calls that follow.
    """

    order: np.ndarray
    matrix: sp.csr_matrix
    dense_slot: np.ndarray
    dense: np.ndarray
    impact_rows: np.ndarray
    impact_weights: np.ndarray
    number: np.ndarray
    least: float


def _by_weight_py(
    ptr: np.ndarray,
    idx: np.ndarray,
    val: np.ndarray,
    out_idx: np.ndarray,
    out_val: np.ndarray,
    turns: np.ndarray,
) -> None:
    """Each row's entries by value falling; a stable sort, so ties keep the rising ``idx``.

    Rows are taken in the order ``turns`` (a permutation): the threads share the range in equal
    blocks, so ``turns`` deals the rows out in turn and no thread gets all the long ones.
    """
    for i in prange(turns.size):
        t = turns[i]
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
    # Rarest first means the long lists sit at the end: dealt out, each thread gets its share.
    n_rows = matrix.shape[0]
    turns = np.argsort(np.arange(n_rows) % numba.get_num_threads(), kind="stable")
    _by_weight(matrix.indptr.astype(np.int64), idx, val, out_idx, out_val, turns)
    return out_idx, out_val


def _made_ready(matrix: sp.csr_matrix, order: np.ndarray | None = None) -> Postings:
    """The :class:`Postings` of a rows-sorted ``matrix`` (its terms renumbered by ``order``)."""
    slot, rows = dense_rows(matrix)
    by_rows, by_weights = impact_order(matrix)
    if order is None:
        order = np.arange(matrix.shape[0])
    number = np.empty(order.size, np.int64)
    number[order] = np.arange(order.size)
    least = float(matrix.data.min()) if matrix.nnz else 0.0
    return Postings(order, matrix, slot, rows, by_rows, by_weights, number, least)


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

    Only pages scoring ``floor`` or more are kept (a query may keep none). A floor is theta's
    least value: a query stops reading new pages as soon as the most a page not touched yet can
    score is under it, so asking only for pages that can pass a threshold is much cheaper than
    the whole top k.

    Both paths first renumber the terms by :func:`term_order`, so each score is summed over the
    query's terms rarest first and the two paths agree bit for bit. ``use_compiled=None`` takes
    the compiled kernel when numba is installed; ``chunk`` is the number of queries per chunk
    (default: each path's own); ``counts`` as in :func:`top_k_compiled`. ``postings`` may be
    a :class:`Postings` made once by :func:`prepare_postings`, so repeated calls on one index
    (the propose stage re-scores in rounds) do not renumber it each time.
    """
    ready = postings if isinstance(postings, Postings) else prepare_postings(postings)
    weights = renumbered(sp.csr_matrix(weights), ready.number)
    compiled = HAVE_NUMBA if use_compiled is None else use_compiled
    if compiled and _products_stay_normal(weights, ready.least):
        return top_k_compiled(weights, ready, k, chunk or QUERY_CHUNK, counts, floor)
    return top_k_numpy(weights, ready.matrix, k, chunk or 20_000, floor)
