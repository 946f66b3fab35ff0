"""The exact top-k kernel behind the score stage: every query against every page, best ``k`` kept.

For a query q (a sparse unit vector, CSR row) and the postings of each term t (the pages d with
weight ``w(t, d) > 0``, a CSR row of the transposed page matrix), the score of page d is

    score(q, d) = sum over terms t of q: q(t) * w(t, d)

computed term at a time into a dense accumulator of one float64 per page. Only the pages a query
touched are read back (and reset), so the cost per query is the number of postings of its terms,
not the number of pages. The ``k`` best pages are kept while reading back (a sorted array of
length ``k``), ordered by score falling, ties by the lower page row; pages scoring exactly 0 are
not kept. The sums run over the query's terms in ascending term order, the same order as scipy's
sparse product, so the scores equal those of ``weights @ pages.T`` bit for bit.

With numba installed the kernel is compiled (cached on disk after the first call) and runs its
chunks of queries in parallel threads (``numba.prange``; the thread count is numba's, by default
one per core). Without numba, :func:`top_k_numpy` computes the same result with chunked scipy
products and a vectorised sort.
"""

from __future__ import annotations

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
    weights: sp.csr_matrix, postings: sp.csr_matrix, k: int, chunk: int = 20_000
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
    """
    n = weights.shape[0]
    rows_out, cols_out, vals_out = [], [], []
    for start in range(0, n, chunk):
        r, c, v = top_k_rows(weights[start : start + chunk] @ postings, k)
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


def _kernel_py(
    q_ptr: np.ndarray,
    q_idx: np.ndarray,
    q_val: np.ndarray,
    p_ptr: np.ndarray,
    p_idx: np.ndarray,
    p_val: np.ndarray,
    n_docs: int,
    k: int,
    chunk: int,
    out_doc: np.ndarray,
    out_val: np.ndarray,
) -> None:
    """Fill ``out_doc``/``out_val`` (n_queries, k) with each query's top pages (-1/0 when fewer)."""
    n_q = q_ptr.size - 1
    n_chunks = (n_q + chunk - 1) // chunk
    for c in prange(n_chunks):
        acc = np.zeros(n_docs, np.float64)
        seen = np.zeros(n_docs, np.bool_)
        touched = np.empty(n_docs, np.int32)
        top_d = np.empty(k, np.int64)
        top_v = np.empty(k, np.float64)
        stop = min(n_q, (c + 1) * chunk)
        for q in range(c * chunk, stop):
            n_touched = 0
            for j in range(q_ptr[q], q_ptr[q + 1]):
                t = q_idx[j]
                wq = q_val[j]
                for p in range(p_ptr[t], p_ptr[t + 1]):
                    d = p_idx[p]
                    if not seen[d]:
                        seen[d] = True
                        touched[n_touched] = d
                        n_touched += 1
                    acc[d] += wq * p_val[p]
            n_top = 0
            for i in range(n_touched):
                d = touched[i]
                v = acc[d]
                acc[d] = 0.0
                seen[d] = False
                if v <= 0.0:
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


if HAVE_NUMBA:
    _kernel = numba.njit(parallel=True, cache=True, nogil=True)(_kernel_py)
else:  # pragma: no cover
    _kernel = None


def top_k_compiled(
    weights: sp.csr_matrix, postings: sp.csr_matrix, k: int, chunk: int = QUERY_CHUNK
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The compiled term-at-a-time path; same arguments and result as :func:`top_k_numpy`."""
    if _kernel is None:
        raise RuntimeError("numba is not installed; use top_k_numpy")
    n = weights.shape[0]
    out_doc = np.full((n, k), -1, np.int64)
    out_val = np.zeros((n, k), np.float64)
    _kernel(
        weights.indptr.astype(np.int64),
        weights.indices.astype(np.int32),
        weights.data.astype(np.float64),
        postings.indptr.astype(np.int64),
        postings.indices.astype(np.int32),
        postings.data.astype(np.float64),
        postings.shape[1],
        k,
        chunk,
        out_doc,
        out_val,
    )
    keep = out_doc >= 0
    rows = np.broadcast_to(np.arange(n, dtype=np.int64)[:, None], (n, k))[keep]
    return rows, out_doc[keep], out_val[keep]


def top_k_scores(
    weights: sp.csr_matrix,
    postings: sp.csr_matrix,
    k: int,
    use_compiled: bool | None = None,
    chunk: int | None = None,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Each query's ``k`` best pages: (row, page row, score), rows ascending, scores falling.

    ``use_compiled=None`` takes the compiled kernel when numba is installed; ``chunk`` is the
    number of queries per chunk (default: each path's own).
    """
    weights = sp.csr_matrix(weights)
    weights.sort_indices()
    postings = sp.csr_matrix(postings)
    postings.sort_indices()
    compiled = HAVE_NUMBA if use_compiled is None else use_compiled
    if compiled:
        return top_k_compiled(weights, postings, k, chunk or QUERY_CHUNK)
    return top_k_numpy(weights, postings, k, chunk or 20_000)
