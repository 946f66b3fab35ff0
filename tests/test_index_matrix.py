"""indexing.csr_of_sorted against scipy's own COO -> CSR conversion (the reference)."""

from __future__ import annotations

import numpy as np
import pytest
import scipy.sparse as sp

from querygap.indexing import csr_of_sorted


def _reference(rows: np.ndarray, cols: np.ndarray, vals: np.ndarray, shape: tuple[int, int]):
    # Reference: scipy.sparse.coo_matrix(...).tocsr(), which sorts and sums repeated entries.
    return sp.coo_matrix((vals, (rows, cols)), shape=shape).tocsr()


@pytest.mark.parametrize("order", ["csr", "shuffled", "repeats", "empty"])
def test_csr_of_triples_equals_scipy(order: str) -> None:
    rng = np.random.default_rng(11)
    dense = rng.random((40, 30)) * (rng.random((40, 30)) < 0.2)
    rows, cols = np.nonzero(dense)  # CSR order
    vals = dense[rows, cols]
    if order == "shuffled":
        p = rng.permutation(rows.size)
        rows, cols, vals = rows[p], cols[p], vals[p]
    elif order == "repeats":
        rows, cols, vals = np.r_[rows, rows[:5]], np.r_[cols, cols[:5]], np.r_[vals, vals[:5]]
        p = np.argsort(rows * 30 + cols, kind="stable")
        rows, cols, vals = rows[p], cols[p], vals[p]  # sorted, but with equal neighbours
    elif order == "empty":
        rows, cols, vals = rows[:0], cols[:0], vals[:0]
    got = csr_of_sorted(rows.astype(np.int64), cols.astype(np.int64), vals, (40, 30))
    want = _reference(rows, cols, vals, (40, 30))
    assert got.shape == want.shape and got.has_sorted_indices
    np.testing.assert_array_equal(got.indptr, want.indptr)
    np.testing.assert_array_equal(got.indices, want.indices)
    np.testing.assert_array_equal(got.data, want.data)


def test_a_row_outside_the_shape_is_refused_as_scipy_refuses_it() -> None:
    with pytest.raises(ValueError):
        csr_of_sorted(np.array([0, 5]), np.array([0, 1]), np.ones(2), (3, 3))
