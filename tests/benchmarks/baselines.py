"""The usual ways to get each query's best pages, for the benchmark to time ours against.

Every function takes query unit vectors ``weights`` (CSR, n_queries x n_terms) and the postings
``postings`` (CSR, n_terms x n_docs, the transposed page matrix) and returns (row, doc, score)
arrays like :func:`querygap.scoring_kernel.top_k_scores`, top-k or top-1 as named.
"""

from __future__ import annotations

import numpy as np
import scipy.sparse as sp
from sklearn.utils.extmath import safe_sparse_dot

Triple = tuple[np.ndarray, np.ndarray, np.ndarray]


def hand_written(weights: sp.csr_matrix, postings: sp.csr_matrix, k: int, chunk: int = 10_000):
    """scikit-learn + scipy as usually written: chunked product, then top-k row by row."""
    rows, docs, vals = [], [], []
    for start in range(0, weights.shape[0], chunk):
        block = safe_sparse_dot(
            weights[start : start + chunk], postings, dense_output=False
        ).tocsr()
        for i in range(block.shape[0]):  # the per-row loop is the point of this baseline
            lo, hi = block.indptr[i], block.indptr[i + 1]
            data, idx = block.data[lo:hi], block.indices[lo:hi]
            if data.size > k:
                part = np.argpartition(-data, k - 1)[:k]
                data, idx = data[part], idx[part]
            order = np.lexsort((idx, -data))
            rows.append(np.full(order.size, start + i))
            docs.append(idx[order])
            vals.append(data[order])
    return np.concatenate(rows), np.concatenate(docs), np.concatenate(vals)


def sparse_dot_topn(weights: sp.csr_matrix, postings: sp.csr_matrix, k: int, threads: int = 2):
    """The sparse-dot-topn package's ``sp_matmul_topn`` with ``threads`` threads, sorted rows."""
    from sparse_dot_topn import sp_matmul_topn

    out = sp_matmul_topn(weights, postings, top_n=k, sort=True, n_threads=threads)
    out = out.tocsr()
    counts = np.diff(out.indptr)
    return np.repeat(np.arange(out.shape[0]), counts), out.indices.astype(np.int64), out.data


def gather(weights: sp.csr_matrix, postings: sp.csr_matrix) -> tuple[np.ndarray, ...]:
    """The postings a block of queries touches: (query row, doc, q(t) * w(t, d)), vectorised."""
    qrow = np.repeat(np.arange(weights.shape[0]), np.diff(weights.indptr))
    t = weights.indices
    lens = postings.indptr[t + 1] - postings.indptr[t]
    total = int(lens.sum())
    starts = np.repeat(postings.indptr[t] - np.r_[0, np.cumsum(lens)[:-1]], lens)
    pos = starts + np.arange(total)
    return (
        np.repeat(qrow, lens),
        postings.indices[pos],
        np.repeat(weights.data, lens) * (postings.data[pos]),
    )


def scatter_add(weights: sp.csr_matrix, postings: sp.csr_matrix, chunk: int = 128) -> Triple:
    """numpy floor: gather the postings, ``np.bincount`` into a dense block, best page per row."""
    n_docs = postings.shape[1]
    rows, docs, vals = [], [], []
    for start in range(0, weights.shape[0], chunk):
        block = weights[start : start + chunk]
        q, d, w = gather(block, postings)
        dense = np.bincount(q * n_docs + d, weights=w, minlength=block.shape[0] * n_docs)
        dense = dense.reshape(block.shape[0], n_docs)
        best = dense.argmax(axis=1)  # the first (lowest) doc among equal maxima
        score = dense[np.arange(block.shape[0]), best]
        hit = score > 0
        rows.append(np.flatnonzero(hit) + start)
        docs.append(best[hit])
        vals.append(score[hit])
    return np.concatenate(rows), np.concatenate(docs), np.concatenate(vals)


def postings_pass(weights: sp.csr_matrix, postings: sp.csr_matrix, chunk: int = 1024) -> int:
    """The bare cost of reading every touched posting once in numpy (no per-query result).

    A lower bound for any numpy method, not a scorer: it returns only the number of postings.
    """
    n_docs = postings.shape[1]
    total = 0
    acc = np.zeros(n_docs)
    for start in range(0, weights.shape[0], chunk):
        _, d, w = gather(weights[start : start + chunk], postings)
        acc += np.bincount(d, weights=w, minlength=n_docs)
        total += d.size
    return total
