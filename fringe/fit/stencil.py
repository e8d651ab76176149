"""The per-turn stencil sum of the turn model, compiled (numba).

What stage 1 measures for a turn is a weighted sum of the frozen model's values at a few grid
instants around it (:func:`fringe.fit.turn_model._measured_model`): for turn t and output
column j,

    out[t, j] = sum over sources q, stencil points s of  w[t, q, s] x[q m + first[t] + s, j],

with x the stacked grid values of the sources (A, C, B; each m rows). :func:`stencil_sum`
forms it in one pass, adding the terms in the order q, s from zero, one product and one sum at
a time (no fused multiply-add, no reassociation): the same operations, in the same order, as
the sparse product it replaces (a CSR matrix of 18 entries per row times x, SciPy's
``csr_matvecs``), so the numbers are the same bit for bit. The compiled code is cached as the
stage-1 kernels' is (:mod:`fringe.demodulate.kernel_cache`).
"""

from __future__ import annotations

import numpy as np
from numba import njit
from numpy.typing import NDArray

from fringe.demodulate.kernel_cache import CACHE

__all__ = ["stencil_sum"]


@njit(cache=CACHE, nogil=True)
def _stencil_sum(w, first, m, x, out):
    n, n_src, n_st = w.shape
    k = x.shape[1]
    for t in range(n):
        for j in range(k):
            out[t, j] = 0.0
        for q in range(n_src):
            row0 = q * m + first[t]
            for s in range(n_st):
                a = w[t, q, s]
                row = row0 + s
                for j in range(k):
                    out[t, j] += a * x[row, j]


def stencil_sum(w: NDArray, first: NDArray, m: int, x: NDArray, out: NDArray) -> NDArray:
    """Fill ``out`` (n, k) with the stencil sums of the module docstring; return it.

    Parameters
    ----------
    w : ndarray, shape (n, q, s)
        Weights of each turn's stencil points per source (units of the output per unit of x).
    first : ndarray of int, shape (n,)
        Grid index of each turn's first stencil point (within each source's m rows).
    m : int
        Grid instants per source.
    x : ndarray, shape (q m, k)
        The sources' grid values, stacked (model units per unit coefficient).
    out : ndarray, shape (n, k)
        Receives the sums (may be a column slice of a wider array).
    """
    w = np.asarray(w, dtype=np.float64)
    first = np.asarray(first, dtype=np.int64)
    if (w.shape[0] != first.shape[0] or out.shape[0] != w.shape[0]
            or out.shape[1] != x.shape[1] or x.shape[0] != w.shape[1] * m):
        raise ValueError("stencil_sum: shapes of w, first, x and out disagree")
    if first.size and (first.min() < 0 or first.max() + w.shape[2] > m):
        raise ValueError("stencil_sum: a stencil reaches beyond the grid")
    _stencil_sum(w, first, int(m), x, out)
    return out
