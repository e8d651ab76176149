"""The per-turn model of stage 3, compiled (numba): stencil weights and sums in one pass.

What stage 1 measures for a turn (:func:`fringe.fit.turn_model._measured_model`) is a weighted
sum of the frozen model's values at the six grid instants around it. For turn t (mean time
t_t, half span h_t) and output column c:

    out[t, c] = sum over sources q, stencil points s of  w[t, q, s] x[q m + first[t] + s, c],

with x the stacked grid values of the sources (A, C, B; each m rows, grid start t0 and step
dt, s), ``first[t]`` the grid index of the turn's first stencil point and the weights

    w_C[t, q, s] = [q = C] L_0[t, s] + sum over leak terms l of source q of
                   leak[t, 0, l] (h_t^j_l / j_l!) L_j_l[t, s]

(w_B alike with leak[t, 1, l] and [q = B]; A is L_0 on the A source), where L_j[t, s] is the
weight of stencil value s in the j-th time derivative (per second^j) of the quintic through the
six values, at the turn's fractional position in its grid interval.

:func:`measured_turns` does all of it per turn, in one compiled loop, with no per-turn arrays
(the numpy form it replaces built (n, 2, 3, 4) and (n, 6, 6) temporaries). It is one function
body: with a helper function per step called per turn (not inlined) it took 1.7x as long. In
each sum the terms are added in a fixed order, one product and one sum at a time (no fused
multiply-add, no reassociation): the Lagrange weights over the powers of s ascending, the
weights over the derivative orders ascending, the stencil sums over q then s, so every turn's
row is the same whatever the other turns. h^j is formed as repeated products (the numpy form
used ``pow`` for j = 3, within an ulp of it; ``pow`` per term cost a third of the loop's
time). The compiled code is cached as the stage-1 kernels' is
(:mod:`fringe.demodulate.kernel_cache`).
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit
from numpy.typing import NDArray

from fringe.demodulate.kernel_cache import CACHE

__all__ = ["measured_turns"]

#: Points of the interpolation stencil (grid offsets -2 ... 3 around a turn's grid interval).
N_STENCIL = 6


@njit(cache=CACHE, nogil=True)
def _measured_turns(t, half, leak, start, step, m, deriv, src, power, fact, x,  # noqa: C901
                    with_a, c, b, a):
    n_order = deriv.shape[0]
    k = x.shape[1]
    lo = 2                                  # -STENCIL[0]: the stencil starts two steps before
    hi = m - 4                              # m - 1 - STENCIL[-1]
    p = np.empty(N_STENCIL)                 # powers of the fractional position s
    lw = np.empty((n_order, N_STENCIL))     # derivative weights per order
    w = np.empty((2, 3, N_STENCIL))         # per output (C, B), source (A, C, B), point
    hp = np.empty(n_order)                  # h^j / j! of the turn
    step_j = np.empty(n_order)
    for j in range(n_order):
        step_j[j] = step ** j
    for t_i in range(t.shape[0]):
        # the turn's grid interval, clipped so that the stencil stays on the grid
        pos = (t[t_i] - start) / step
        fl = math.floor(pos)
        if not fl >= lo:                    # also a NaN time: its row is NaN, as in numpy
            i = lo
        elif fl > hi:
            i = hi
        else:
            i = int(fl)
        # lw[j]: the weights of the j-th derivative (per second^j), the powers of s ascending
        s = pos - i
        p[0] = 1.0
        for e in range(1, N_STENCIL):
            p[e] = p[e - 1] * s
        for j in range(n_order):
            for st in range(N_STENCIL):
                lw[j, st] = 0.0
            for e in range(N_STENCIL - j):
                pe = p[e]
                for st in range(N_STENCIL):
                    lw[j, st] += pe * deriv[j, e, st]
            for st in range(N_STENCIL):
                lw[j, st] /= step_j[j]
        # w[r, q]: weights of source q's stencil values in output r (C, B): the value itself
        # (order 0) of C in C and of B in B, then the leak terms in their order (per source,
        # powers ascending; each term's (source, power) is its own) times h^j / j!
        h = half[t_i]
        hj = 1.0
        for j in range(n_order):
            hp[j] = hj / fact[j]
            hj *= h
        w[:] = 0.0
        for st in range(N_STENCIL):
            w[0, 1, st] = lw[0, st]
            w[1, 2, st] = lw[0, st]
        for l_i in range(src.shape[0]):
            j = power[l_i]
            q = src[l_i]
            for r in range(2):
                coef = leak[t_i, r, l_i] * hp[j] + 0.0
                for st in range(N_STENCIL):
                    w[r, q, st] += coef * lw[j, st]
        # the sums: C and B over sources q, then points s; A from the A source alone
        first = i - lo
        for col in range(k):
            acc_c = 0.0
            acc_b = 0.0
            for q in range(3):
                row0 = q * m + first
                for st in range(N_STENCIL):
                    v = x[row0 + st, col]
                    acc_c += w[0, q, st] * v
                    acc_b += w[1, q, st] * v
            c[t_i, col] = acc_c
            b[t_i, col] = acc_b
            if with_a:
                acc_a = 0.0
                for st in range(N_STENCIL):
                    acc_a += lw[0, st] * x[first + st, col]
                a[t_i, col] = acc_a


def measured_turns(t_s: NDArray, half_s: NDArray, leak: NDArray, start_s: float,
                   step_s: float, m: int, deriv: NDArray, src: NDArray, power: NDArray,
                   x: NDArray, c: NDArray, b: NDArray, a: NDArray | None = None) -> None:
    """Fill c, b (and a) (n, k) with what stage 1 measures for turns (module docstring).

    Parameters
    ----------
    t_s : ndarray, shape (n,)
        Mean times of the turns, s (the grid's time scale).
    half_s : ndarray, shape (n,)
        Half spans of the turns, s (> 0).
    leak : ndarray, shape (n, 2, l)
        The block fit's (C, B) response to each leak term (``TurnTable.leak``; dimensionless).
    start_s, step_s : float
        The grid's first instant and step, s.
    m : int
        Grid instants per source (at least 6).
    deriv : ndarray, shape (J + 1, 6, 6)
        Per derivative order j, the map from s^e (rows e < 6 - j; the others unused) to the
        stencil weights of the j-th derivative in grid steps
        (:func:`fringe.fit.turn_model._derivative_matrices`).
    src, power : ndarray of int, shape (l,)
        Each leak term's source (0 A, 1 C, 2 B) and power of tau (1 ... J).
    x : ndarray, shape (3 m, k)
        The sources' grid values, stacked (model units per unit coefficient).
    c, b : ndarray, shape (n, k)
        Receive C and B (may be column slices of wider arrays).
    a : ndarray, shape (n, k), optional
        Receives A (not computed when None).
    """
    n, k = c.shape
    n_order = deriv.shape[0]
    src = np.ascontiguousarray(src, dtype=np.int64)
    power = np.ascontiguousarray(power, dtype=np.int64)
    if (t_s.shape != (n,) or half_s.shape != (n,) or leak.shape != (n, 2, src.size)
            or b.shape != (n, k) or (a is not None and a.shape != (n, k))
            or x.shape != (3 * m, k) or deriv.shape != (n_order, N_STENCIL, N_STENCIL)
            or power.shape != src.shape):
        raise ValueError("measured_turns: shapes of the turns, leak, grid and outputs disagree")
    if m < N_STENCIL:
        raise ValueError("measured_turns: the grid is shorter than the stencil")
    if src.size and (src.min() < 0 or src.max() > 2 or power.min() < 0
                     or power.max() >= n_order):
        raise ValueError("measured_turns: a leak term's source or power is out of range")
    fact = np.array([float(math.factorial(j)) for j in range(n_order)])
    _measured_turns(np.asarray(t_s, dtype=np.float64), np.asarray(half_s, dtype=np.float64),
                    np.asarray(leak, dtype=np.float64), float(start_s), float(step_s), int(m),
                    np.asarray(deriv, dtype=np.float64), src, power, fact,
                    np.asarray(x, dtype=np.float64), a is not None, c, b,
                    c if a is None else a)
