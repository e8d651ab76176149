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
weight of stencil value s in the j-th time derivative (per s^j) of the quintic through the six
values, at the turn's fractional position in its grid interval.

:func:`measured_turns` does all of it per turn, in one compiled loop, with no per-turn arrays
(the numpy form it replaces built (n, 2, 3, 4) and (n, 6, 6) temporaries). In each sum the
terms are added in a fixed order, one product and one sum at a time (no fused multiply-add, no
reassociation): the Lagrange weights over the powers of s ascending, the weights over the
derivative orders ascending, the stencil sums over q then s, so every turn's row is the same
whatever the other turns. The compiled code is cached as the stage-1 kernels' is
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
def _interval(pos, lo, hi):
    """The turn's grid interval, clipped so that the stencil stays on the grid."""
    fl = math.floor(pos)
    if not fl >= lo:                        # also a NaN time: its row is NaN, as in numpy
        return lo
    if fl > hi:
        return hi
    return int(fl)


@njit(cache=CACHE, nogil=True)
def _derivative_weights(s, deriv, step_j, p, lw):
    """lw[j] = the stencil weights of the j-th derivative (per s^j) at fractional position s."""
    p[0] = 1.0
    for e in range(1, N_STENCIL):
        p[e] = p[e - 1] * s
    for j in range(deriv.shape[0]):
        for st in range(N_STENCIL):
            acc = 0.0
            for e in range(N_STENCIL - j):
                acc += p[e] * deriv[j, e, st]
            lw[j, st] = acc / step_j[j]


@njit(cache=CACHE, nogil=True)
def _turn_weights(lw, leak_t, h, src, power, fact, w):
    """w[r, q] = weights of source q's stencil values in output r (C, B) of one turn.

    The value itself (order 0) of C in C and of B in B, then the leak terms in their order
    (per source, powers ascending; each term's (source, power) is its own).
    """
    for r in range(2):
        for q in range(3):
            for st in range(N_STENCIL):
                w[r, q, st] = 0.0
    for st in range(N_STENCIL):
        w[0, 1, st] = lw[0, st]
        w[1, 2, st] = lw[0, st]
    for l_i in range(src.shape[0]):
        j = power[l_i]
        q = src[l_i]
        scale = math.pow(h, float(j)) / fact[j]
        for r in range(2):
            coef = leak_t[r, l_i] * scale + 0.0
            for st in range(N_STENCIL):
                w[r, q, st] += coef * lw[j, st]


@njit(cache=CACHE, nogil=True)
def _turn_sums(w, lw0, first, m, x, with_a, c_t, b_t, a_t):
    """C and B of one turn over sources q, then points s; A from the A source alone."""
    k = x.shape[1]
    for col in range(k):
        c_t[col] = 0.0
        b_t[col] = 0.0
        if with_a:
            a_t[col] = 0.0
    for q in range(3):
        row0 = q * m + first
        for st in range(N_STENCIL):
            wc = w[0, q, st]
            wb = w[1, q, st]
            row = row0 + st
            for col in range(k):
                v = x[row, col]
                c_t[col] += wc * v
                b_t[col] += wb * v
            if with_a and q == 0:
                wa = lw0[st]
                for col in range(k):
                    a_t[col] += wa * x[row, col]


@njit(cache=CACHE, nogil=True)
def _measured_turns(t, half, leak, start, step, m, deriv, src, power, fact, x,
                    with_a, c, b, a):
    n_order = deriv.shape[0]
    lo = 2                                  # -STENCIL[0]: the stencil starts two steps before
    hi = m - 4                              # m - 1 - STENCIL[-1]
    p = np.empty(N_STENCIL)                 # powers of the fractional position s
    lw = np.empty((n_order, N_STENCIL))     # derivative weights per order
    w = np.empty((2, 3, N_STENCIL))         # per output (C, B), source (A, C, B), point
    step_j = np.empty(n_order)
    for j in range(n_order):
        step_j[j] = step ** j
    for t_i in range(t.shape[0]):
        pos = (t[t_i] - start) / step
        i = _interval(pos, lo, hi)
        _derivative_weights(pos - i, deriv, step_j, p, lw)
        _turn_weights(lw, leak[t_i], half[t_i], src, power, fact, w)
        _turn_sums(w, lw[0], i - lo, m, x, with_a, c[t_i], b[t_i], a[t_i] if with_a else a[0])


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
