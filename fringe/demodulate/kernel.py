"""Compiled stage-1 kernels (numba): the per-block least squares of :mod:`fringe.demodulate`.

One call handles every block of a contiguous sample range, one block at a time, in passes over
the block's samples while they sit in the CPU cache: (1) valid-sample count, mean time, time span
and the angles for the coverage check; (2) the design columns of the valid samples (built and
stored column by column) and the signal, auxiliary and unit leak columns, whose products give the
block's normal matrix and right-hand sides; (3) the residuals. Between (2) and (3) the normal
equations are solved by a Cholesky factorisation of the unit-diagonal (scaled) normal matrix.

Rank guard: a block is singular when the Cholesky factorisation fails or when the trace of the
inverse of the unit-diagonal normal matrix exceeds ``1 / MIN_EIGENVALUE``. The trace bounds the
largest eigenvalue of the inverse from above and from below within a factor p (the number of
block terms), so every block whose smallest eigenvalue is below MIN_EIGENVALUE is rejected, and
blocks within a factor p above it may be too.

Arithmetic: IEEE double precision; only the dot products of (2) may be reassociated and fused
(numba ``fastmath`` flags ``reassoc`` and ``contract``, for SIMD), never the NaN/inf handling.
A block's numbers depend only on its own samples and the fixed code, so they do not depend on
how the record is split into ranges or threads. The compiled code is cached beside
this module (or in numba's cache directory, or a temporary one: :mod:`fringe.demodulate.
kernel_cache`), so only the first run after an install compiles.
The kernels are tested against a plain per-block ``numpy.linalg.lstsq`` statement of the model
(``tests/demodulate/test_demodulate.py``).
"""

from __future__ import annotations

import numpy as np
from numba import njit

from fringe.demodulate.kernel_cache import CACHE  # a writable cache, or none (decorators)
from fringe.demodulate.trig import cos_sin_into

#: Smallest eigenvalue of the unit-diagonal block normal matrix below which a block is singular.
MIN_EIGENVALUE = 1e-8

#: Codes of the leak columns' unit factors (``fringe.demodulate.leak_terms``).
LEAK_KIND_CODES = {"C": 0, "B": 1, "A": 2}

TWO_PI = 2.0 * np.pi


@njit(cache=CACHE, nogil=True, inline="always")
def _mod_2pi(v):
    """Return v mod 2 pi as v - 2 pi floor(v / 2 pi), in [0, 2 pi] to rounding.

    A value within an ulp of a multiple of 2 pi may come out just below 0 or at 2 pi.
    Branch-free, so loops vectorise.
    """
    return v - TWO_PI * np.floor(v / TWO_PI)


@njit(cache=CACHE, nogil=True)
def _cholesky_inverse(a, p, low, li, inv):
    """Set inv to the inverse of the symmetric positive-definite p x p matrix a.

    ``low`` (the lower Cholesky factor) and ``li`` (its inverse) are work arrays. Returns True,
    or False if a is not positive definite.
    """
    low[:, :] = 0.0
    for j in range(p):
        d = a[j, j]
        for k in range(j):
            d -= low[j, k] * low[j, k]
        if not d > 0.0:
            return False
        low[j, j] = np.sqrt(d)
        for i in range(j + 1, p):
            e = a[i, j]
            for k in range(j):
                e -= low[i, k] * low[j, k]
            low[i, j] = e / low[j, j]
    # inverse of the lower factor, then inv(a) = inv(L)^T inv(L)
    li[:, :] = 0.0
    for j in range(p):
        li[j, j] = 1.0 / low[j, j]
        for i in range(j + 1, p):
            e = 0.0
            for k in range(j, i):
                e -= low[i, k] * li[k, j]
            li[i, j] = e / low[i, i]
    for i in range(p):
        for j in range(i + 1):
            e = 0.0
            for k in range(i, p):
                e += li[k, i] * li[k, j]
            inv[i, j] = e
            inv[j, i] = e
    return True


@njit(cache=CACHE, nogil=True, fastmath={"reassoc", "contract"})
def _dot(a, b, m):
    """Return the sum of a[:m] b[:m], reassociated (SIMD).

    The order is fixed by the code, so the result is the same on every run and for any split of
    the record.
    """
    acc = 0.0
    for i in range(m):
        acc += a[i] * b[i]
    return acc


@njit(cache=CACHE, nogil=True)
def _largest_angle_gap(psi):
    """Largest gap (rad) between consecutive angles psi (in [0, 2 pi)) around the circle."""
    n = psi.size
    if n == 0:
        return TWO_PI
    # angles in circular order (one sense or the other, the common case): the gaps are the
    # steps between neighbours, which then add up to 2 pi (any other order adds up to a
    # multiple >= 4 pi, so 1e-6 rad of rounding separates the cases); otherwise sort
    for sense in (1.0, -1.0):
        total = _mod_2pi(sense * (psi[0] - psi[n - 1])) if n > 1 else TWO_PI
        gap = total
        for i in range(n - 1):
            d = _mod_2pi(sense * (psi[i + 1] - psi[i]))
            total += d
            gap = max(gap, d)
        if abs(total - TWO_PI) < 1e-6:
            return gap
    srt = np.sort(psi)
    gap = srt[0] + TWO_PI - srt[-1]
    for i in range(1, srt.size):
        d = srt[i] - srt[i - 1]
        if d > gap:
            gap = d
    return gap


# One compiled loop on purpose: it makes three passes over each block's samples while they
# are in cache; split into functions it would pay call overhead in the hot loop and risk the
# bit-identical numbers.
@njit(cache=CACHE, nogil=True)
def block_fits(t, azimuth, y, aux, starts, nd,  # noqa: C901
               max_harmonic, leak_kind, leak_power, min_samples, max_gap_rad, w,
               gap_harmonic=1):
    """Fit every block of a range (see the module docstring).

    Parameters
    ----------
    t, azimuth, y : (n,) float64
        Times (s), azimuths A of path 1 (rad, C7) and signal (NaN = missing). The table angle
        theta = pi - A and its cosine and sine are computed here, for every sample of the
        range in one vectorised pass (:mod:`fringe.demodulate.trig`: within
        1.2e-16 of the C library's values, 14x faster on this machine, docs/performance.md).
    aux : (n, n_aux) float64
        Auxiliary channels (NaN = missing; a sample is valid only if all are finite).
    starts : (nb,) int64
        First sample of each block (increasing, the first 0); the last block ends at n.
    nd : int
        Drift terms (1, 2 or 3: offset, linear, quadratic).
    max_harmonic : int
        Highest harmonic of theta (>= 2).
    leak_kind, leak_power : (q,) int64
        Leak columns: unit factor (0 cos 2 theta, 1 sin 2 theta, 2 one) and power of tau (<= 3).
    min_samples : int
        Least number of valid samples of an accepted block.
    max_gap_rad : float
        Largest allowed angular gap, rad.
    w : (n,) float64
        Sample weights (> 0; NaN = missing), 1 for an unweighted record: each sample's design
        row and values are multiplied by sqrt(w), so ``rms`` is the noise of unit weight.
    gap_harmonic : int
        The gap is taken in ``gap_harmonic`` x theta (mod 2 pi): 1 for the table angle, 2 for
        the coverage of 2 theta.

    Returns
    -------
    vcount (nb,) int64, t_mid, t_lo, t_hi (nb,) s, coef (nb, p), aux_coef (n_aux, nb, p),
    leak (nb, 2, q) (the (C, B) rows of the leak columns' solutions), ninv_2 (nb, 2, 2),
    rms (nb,), gap_rad (nb,), ok (nb,) bool; NaN for rejected blocks
    """
    n = t.size
    nb = starts.size
    p = nd + 2 * max_harmonic
    n_aux = aux.shape[1]
    q = leak_kind.size
    r = 1 + n_aux + q
    ic, isn = nd + 2, nd + 3
    vcount = np.zeros(nb, np.int64)
    t_mid = np.zeros(nb)
    t_lo = np.full(nb, np.nan)
    t_hi = np.full(nb, np.nan)
    coef = np.full((nb, p), np.nan)
    aux_coef = np.full((n_aux, nb, p), np.nan)
    leak = np.full((nb, 2, q), np.nan)
    ninv_2 = np.full((nb, 2, 2), np.nan)
    rms = np.full(nb, np.nan)
    gap_rad = np.full(nb, TWO_PI)
    ok = np.zeros(nb, np.bool_)
    longest = 0
    for b in range(nb):
        stop = starts[b + 1] if b + 1 < nb else n
        longest = max(longest, stop - starts[b])
    rows = np.empty((p, longest))           # design columns of the block's valid samples
    vals = np.empty((r, longest))           # signal, aux and leak columns
    psi = np.empty(longest)
    idx = np.empty(longest, np.int64)       # the block's valid samples
    swv = np.empty(longest)                 # their sqrt(weight), tau, cos and sin theta
    tauv = np.empty(longest)
    c1v = np.empty(longest)
    s1v = np.empty(longest)
    cv = np.empty(longest)                  # cos and sin of the current harmonic m theta
    sv = np.empty(longest)
    u2 = np.empty((2, longest))             # cos 2 theta, sin 2 theta (the leak units)
    normal = np.empty((p, p))
    nn = np.empty((p, p))
    rhs = np.empty((p, r))
    scale = np.empty(p)
    low = np.empty((p, p))
    li = np.empty((p, p))
    inv = np.empty((p, p))
    need = max(min_samples, p + 2)
    thv = np.empty(longest)                 # theta = pi - A of the block's valid samples
    for b in range(nb):
        a0 = starts[b]
        a1 = starts[b + 1] if b + 1 < nb else n
        # pass 1: valid samples, mean time, span
        cnt = 0
        tsum = 0.0
        lo = np.inf
        hi = -np.inf
        for i in range(a0, a1):
            good = np.isfinite(y[i]) and np.isfinite(w[i])
            for k in range(n_aux):
                good = good and np.isfinite(aux[i, k])
            if good:
                idx[cnt] = i
                psi[cnt] = _mod_2pi(gap_harmonic * (np.pi - azimuth[i]))
                cnt += 1
                tsum += t[i]
                lo = min(lo, t[i])
                hi = max(hi, t[i])
        vcount[b] = cnt
        if cnt == 0:
            continue
        tm = tsum / cnt
        t_mid[b] = tm
        t_lo[b] = lo
        t_hi[b] = hi
        gap_rad[b] = _largest_angle_gap(psi[:cnt])
        if cnt < need or gap_rad[b] > max_gap_rad:
            continue
        half = max(0.5 * (hi - lo), 1e-9)
        # pass 2: design columns (column by column, loops that vectorise; each value is the
        # same product as a row-by-row build), then their products
        m = cnt
        for k in range(m):
            i = idx[k]
            swv[k] = np.sqrt(w[i])
            tauv[k] = (t[i] - tm) / half
            thv[k] = np.pi - azimuth[i]
            vals[0, k] = y[i] * swv[k]
        cos_sin_into(thv, m, c1v, s1v)          # vectorised (fringe.demodulate.trig)
        for kk in range(n_aux):
            for k in range(m):
                vals[1 + kk, k] = aux[idx[k], kk] * swv[k]
        for k in range(m):
            rows[0, k] = swv[k]
        if nd > 1:
            for k in range(m):
                rows[1, k] = tauv[k] * swv[k]
        if nd > 2:
            for k in range(m):
                rows[2, k] = (tauv[k] * tauv[k]) * swv[k]
        for k in range(m):
            cv[k] = c1v[k]
            sv[k] = s1v[k]
        for h in range(max_harmonic):
            for k in range(m):
                rows[nd + 2 * h, k] = cv[k] * swv[k]
                rows[nd + 2 * h + 1, k] = sv[k] * swv[k]
            if h == 1:
                for k in range(m):
                    u2[0, k] = cv[k]
                    u2[1, k] = sv[k]
            for k in range(m):
                c = cv[k]
                s = sv[k]
                cv[k] = c * c1v[k] - s * s1v[k]
                sv[k] = c * s1v[k] + s * c1v[k]
        for kq in range(q):
            kind = leak_kind[kq]
            pw = leak_power[kq]
            row = 1 + n_aux + kq
            for k in range(m):
                ta = tauv[k]
                tp = 1.0 if pw == 0 else (ta if pw == 1 else (ta * ta if pw == 2
                                                               else ta * ta * ta))
                xu = u2[0, k] if kind == 0 else (u2[1, k] if kind == 1 else 1.0)
                vals[row, k] = xu * tp * swv[k]
        for j in range(p):
            for u in range(j + 1):
                normal[j, u] = _dot(rows[j], rows[u], m)
            for k in range(r):
                rhs[j, k] = _dot(rows[j], vals[k], m)
        for j in range(p):
            scale[j] = np.sqrt(max(normal[j, j], 1e-300))
        for j in range(p):
            for u in range(j + 1):
                nn[j, u] = normal[j, u] / scale[j] / scale[u]
                nn[u, j] = nn[j, u]
        if not _cholesky_inverse(nn, p, low, li, inv):
            continue
        trace = 0.0
        for j in range(p):
            trace += inv[j, j]
        if not trace < 1.0 / MIN_EIGENVALUE:
            continue
        for j in range(p):
            for u in range(p):
                inv[j, u] = inv[j, u] / scale[j] / scale[u]
        for j in range(p):
            for k in range(1 + n_aux):
                e = 0.0
                for u in range(p):
                    e += inv[j, u] * rhs[u, k]
                if k == 0:
                    coef[b, j] = e
                else:
                    aux_coef[k - 1, b, j] = e
        for row in range(2):
            j = ic if row == 0 else isn
            for k in range(q):
                e = 0.0
                for u in range(p):
                    e += inv[j, u] * rhs[u, 1 + n_aux + k]
                leak[b, row, k] = e
        ninv_2[b, 0, 0] = inv[ic, ic]
        ninv_2[b, 0, 1] = inv[ic, isn]
        ninv_2[b, 1, 0] = inv[isn, ic]
        ninv_2[b, 1, 1] = inv[isn, isn]
        # pass 3: residuals of the signal
        chi2 = 0.0
        for i in range(m):
            e = vals[0, i]
            for j in range(p):
                e -= rows[j, i] * coef[b, j]
            chi2 += e * e
        rms[b] = np.sqrt(chi2 / max(cnt - p, 1))
        ok[b] = True
    return vcount, t_mid, t_lo, t_hi, coef, aux_coef, leak, ninv_2, rms, gap_rad, ok


#: Angles this close below theta0 + 2 pi k count as on it (block boundaries), rad. Far above the
#: rounding of unwrapped angles (a year of 45 s turns reaches 4e6 rad, ulp 1e-9 rad).
ANGLE_TIE_RAD = 1e-7


@njit(cache=CACHE, nogil=True, inline="always")
def _psi(theta, theta0):
    """(theta - theta0) mod 2 pi, with values within ANGLE_TIE_RAD below 2 pi moved to ~0."""
    psi = _mod_2pi(theta - theta0)
    return psi - TWO_PI * (psi >= TWO_PI - ANGLE_TIE_RAD)


@njit(cache=CACHE, nogil=True)
def block_starts(theta, t, theta0, max_gap_s, theta_prev, t_prev, has_prev,
                 from_azimuth=False):
    """Boolean (n,): True where a new block starts before sample i.

    ``from_azimuth``: ``theta`` holds file azimuths A (rad) and each sample's table angle is
    taken as pi - A (C7) here, the same subtraction as ``numpy.pi - A`` without its array
    (``theta_prev`` is then already a table angle).

    See ``fringe.demodulate.turn_boundaries``. psi = (theta - theta0) mod 2 pi is computed once
    per sample, and a crossing of theta0 is a jump of psi by more than pi between neighbours
    (either sense; steps are below pi). Because both neighbours of a sample see the same psi,
    every crossing starts exactly one block. A sample within ANGLE_TIE_RAD below a multiple of
    2 pi counts as on it (psi near 0), so a sample lying on theta0 + 2 pi k (to rounding) is the
    first of a turn (psi in [0, 2 pi)): it starts its block when theta increases and ends it
    when theta decreases, whatever the rounding.
    """
    n = theta.size
    out = np.zeros(n, np.bool_)
    psi_prev = _psi(theta_prev, theta0)
    pt = t_prev
    for i in range(n):
        psi = _psi(np.pi - theta[i] if from_azimuth else theta[i], theta0)
        if i > 0 or has_prev:
            out[i] = (abs(psi - psi_prev) > np.pi) | ((t[i] - pt) > max_gap_s)
        psi_prev = psi
        pt = t[i]
    return out


@njit(cache=CACHE, nogil=True)
def unwrap_angles(p):
    """``numpy.unwrap(p)`` of a 1-D float64 array of angles (rad), bit for bit, in one pass.

    The same arithmetic as numpy's (period 2 pi, discontinuity pi): each step dd is folded
    into [-pi, pi) by a floored remainder (fmod, then + 2 pi for a negative remainder), a
    fold of exactly -pi for a positive step becomes +pi, steps below pi in size are not
    corrected, and the corrections are summed in order (as ``cumsum``). numpy makes five
    temporary arrays; this makes none (``tests/demodulate/test_motion.py`` compares the two).
    """
    n = p.size
    up = np.empty(n)
    if n == 0:
        return up
    up[0] = p[0]
    high = TWO_PI / 2.0
    low = -high
    acc = 0.0
    for i in range(1, n):
        dd = p[i] - p[i - 1]
        if abs(dd) < high:                 # not corrected (numpy folds it, then drops it)
            corr = 0.0
        else:
            m = np.fmod(dd - low, TWO_PI)
            if m != 0.0:
                if m < 0.0:
                    m += TWO_PI
            else:
                m = 0.0
            m += low
            if m == low and dd > 0.0:
                m = high
            corr = m - dd
        acc = corr if i == 1 else acc + corr
        up[i] = p[i] + acc
    return up
