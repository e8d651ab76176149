"""The numpy form of the per-turn model (before it was compiled), kept as the tests' reference.

:func:`measured_model` is what :func:`fringe.fit.turn_model._measured_model` computed with
numpy arrays per turn (the (n, 6) Lagrange derivative weights from the powers of s, the
(n, 2, 3, LEAK_ORDER + 1) leak coefficients, their batched product and the stencil sums); the
compiled kernel (:mod:`fringe.fit.stencil`) is checked against it. Only the tests use it.
"""

import math

import numpy as np

from fringe.demodulate.settings import leak_terms
from fringe.fit.turn_model import STENCIL, _derivative_matrices


def lagrange_derivative_weights(s, step_s, max_order):
    """Weights (n, 6) of the stencil values for the j-th time derivative (per s^j), j <= max."""
    size = STENCIL.size
    powers = np.empty((s.size, size))
    powers[:, 0] = 1.0
    for e in range(1, size):
        powers[:, e] = powers[:, e - 1] * s
    return [powers[:, :size - j] @ m / step_s ** j
            for j, m in enumerate(_derivative_matrices(max_order))]


def _stencil_sum(w, first, m, x):
    """sum over q, s of w[t, q, s] x[q m + first[t] + s] (numpy gather)."""
    n, q, s = w.shape
    rows = (np.arange(q)[None, :, None] * m + first[:, None, None]
            + np.arange(s)[None, None, :])                       # (n, q, s)
    return np.einsum("nqs,nqsk->nk", w, x[rows])


def measured_model(start_s, step_s, stacked, t, half, leak, settings, leak_order):
    """A, C, B (each (n, k)) of turns on the grid (start_s, step_s, stacked (3 m, k))."""
    m = stacked.shape[0] // 3
    pos = (t - start_s) / step_s
    i = np.clip(np.floor(pos).astype(np.intp), -STENCIL[0], m - 1 - STENCIL[-1])
    lw = np.stack(lagrange_derivative_weights(pos - i, step_s, leak_order), axis=1)
    n = t.size
    terms = leak_terms(settings)
    src = [{"A": 0, "C": 1, "B": 2}[kind] for kind, _ in terms]
    scale = {j: half ** j / math.factorial(j) for j in {j for _, j in terms}}
    k_rj = np.zeros((n, 2, 3, leak_order + 1))
    k_rj[:, 0, 1, 0] = 1.0
    k_rj[:, 1, 2, 0] = 1.0
    k_rj[:, :, src, [j for _, j in terms]] = (
        leak * np.stack([scale[j] for _, j in terms], axis=1)[:, None, :] + 0.0)
    w = np.matmul(k_rj.reshape(n, 6, leak_order + 1), lw)
    first = i + STENCIL[0]
    c = _stencil_sum(w[:, :3], first, m, stacked)
    b = _stencil_sum(w[:, 3:], first, m, stacked)
    a = _stencil_sum(lw[:, :1], first, m, stacked[:m])
    return a, c, b
