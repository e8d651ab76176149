"""Stage-1 block sums: exact per-block products, independent of the other blocks."""

from __future__ import annotations

import numpy as np
import pytest

from fringe.demodulate import _block_sums


@pytest.mark.parametrize("counts", [[45, 44, 46, 45], [45, 44, 3000, 46, 45, 7, 45], [1, 2, 3]])
def test_block_sums_equal_direct_products(counts):
    rng = np.random.default_rng(1)
    counts = np.array(counts)
    starts = np.concatenate([[0], np.cumsum(counts)[:-1]])
    n = int(counts.sum())
    x, v = rng.normal(size=(n, 6)), rng.normal(size=(n, 9))
    normal, rhs = _block_sums(x, v, starts, counts)
    for i, (s0, c) in enumerate(zip(starts, counts)):
        xs = x[s0:s0 + c]
        np.testing.assert_allclose(normal[i], xs.T @ xs, rtol=1e-12, atol=1e-12)
        np.testing.assert_allclose(rhs[i], xs.T @ v[s0:s0 + c], rtol=1e-12, atol=1e-12)
    # a block's sums do not depend on which other blocks share its range
    for k in range(1, counts.size):
        a, b = _block_sums(x, v, starts[:k], counts[:k])
        assert np.array_equal(a, normal[:k]) and np.array_equal(b, rhs[:k])
