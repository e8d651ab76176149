"""The compiled stencil sum of the turn model against the sparse product it replaced."""

import numpy as np
import pytest
from scipy.sparse import csr_matrix

from fringe.fit.stencil import stencil_sum


def _sparse_reference(w, first, m, x):
    """The same sums as a CSR matrix (n x q m, q s entries a row) times x (SciPy)."""
    n, q, s = w.shape
    cols = (np.arange(q)[None, :, None] * m + first[:, None, None]
            + np.arange(s)[None, None, :]).ravel()
    matrix = csr_matrix((w.ravel(), cols, np.arange(0, n * q * s + 1, q * s)),
                        shape=(n, q * m))
    return matrix @ x


@pytest.mark.parametrize("q", [1, 3])
def test_stencil_sum_is_the_sparse_product_bit_for_bit(q):
    rng = np.random.default_rng(7)
    n, s, m, k = 500, 6, 60, 5
    # weights of mixed sizes and signs (the leak terms are ~1e-3 of the value weights)
    w = rng.normal(size=(n, q, s)) * 10.0 ** rng.integers(-6, 2, size=(n, q, s))
    first = rng.integers(0, m - s + 1, size=n)
    x = rng.normal(size=(q * m, k)) * 1e-17
    got = stencil_sum(w, first, m, x, np.empty((n, k)))
    assert np.array_equal(got, _sparse_reference(w, first, m, x))


def test_stencil_sum_writes_into_a_column_slice():
    rng = np.random.default_rng(8)
    n, q, s, m, k = 40, 3, 6, 20, 4
    w = rng.normal(size=(n, 2 * q, s))[:, q:]          # a non-contiguous view, as the model
    first = rng.integers(0, m - s + 1, size=n)
    x = rng.normal(size=(q * m, k))
    wide = np.full((n, k + 2), 7.0)
    stencil_sum(w, first, m, x, wide[:, :k])
    assert np.array_equal(wide[:, :k], _sparse_reference(np.ascontiguousarray(w), first, m, x))
    assert np.all(wide[:, k:] == 7.0)


def test_stencil_sum_refuses_a_stencil_beyond_the_grid():
    w = np.ones((2, 1, 6))
    with pytest.raises(ValueError, match="beyond the grid"):
        stencil_sum(w, np.array([0, 5]), 10, np.ones((10, 1)), np.empty((2, 1)))
    with pytest.raises(ValueError, match="shapes"):
        stencil_sum(w, np.array([0, 1]), 10, np.ones((20, 1)), np.empty((2, 1)))
