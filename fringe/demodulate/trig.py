"""Cosine and sine of many angles in one compiled loop that the compiler vectorises (numba).

Stage 1 needs cos theta and sin theta of every valid sample (:mod:`fringe.demodulate.kernel`).
The C library's ``cos`` and ``sin`` are called one angle at a time and took half of the block
fits' time (3.2 of 6.8 ms for a 2-day 1 Hz record, docs/performance.md, "Fifth round").
:func:`cos_sin_into` computes both with the same published method as the C library does, written
as a loop without branches, so that it runs on the CPU's vector units:

* **Reduction** (Cody and Waite): n = nearest integer of x 2/pi, r = x - n pi/2 with pi/2 split
  into a 33-bit leading part and a 53-bit tail (``PIO2_1``, ``PIO2_1T``), so that n PIO2_1 is
  exact for |n| < 2^20 (fdlibm ``e_rem_pio2.c``, medium range). The reduced angle's absolute
  error is below 1e-20 rad for |x| <= REDUCTION_LIMIT_RAD.
* **Kernels** on |r| <= pi/4: the minimax polynomials of fdlibm's ``k_sin.c`` and ``k_cos.c``
  (Sun Microsystems 1993; coefficients ``S1``-``S6``, ``C1``-``C6``), whose own errors are below
  2^-58 (docs/references.md [R-num-fdlibm]).
* **Quadrant** n mod 4 picks sin or cos of r and the signs, by selection (no branches).

Angles beyond REDUCTION_LIMIT_RAD (an unwrapped azimuth of more than about 130 000 turns) and
non-finite ones are recomputed afterwards with the C library's functions, one at a time. The
results agree with the C library's to within 2.3e-16 absolute (one unit in the last place at
1; ``tests/demodulate/test_trig.py`` compares over 2 million angles, and against mpmath), not
bit for bit.

numba caches :func:`fringe.demodulate.kernel.block_fits` with this code compiled into it, and
its cache does not notice an edit of this file alone: after changing it, change (or touch)
``kernel.py`` too.
"""

from __future__ import annotations

import numpy as np
from numba import njit

from fringe.demodulate.kernel_cache import CACHE

__all__ = ["REDUCTION_LIMIT_RAD", "cos_sin_into"]

#: 2 / pi, rounded (fdlibm ``invpio2``).
INV_PIO2 = 6.36619772367581382433e-01
#: pi/2: its first 33 bits, and the next 53 (fdlibm ``pio2_1``, ``pio2_1t``).
PIO2_1 = 1.57079632673412561417e+00
PIO2_1T = 6.07710050650619224932e-11

#: |x| up to which the vectorised reduction is used, rad (n < 2^19, half fdlibm's medium
#: range); larger angles go to the C library.
REDUCTION_LIMIT_RAD = 2.0 ** 19 * (np.pi / 2)

# fdlibm k_sin.c: sin r = r + r^3 (S1 + z (S2 + ... + z^4 S6)), z = r^2, |r| <= pi/4
S1 = -1.66666666666666324348e-01
S2 = 8.33333333332248946124e-03
S3 = -1.98412698298579493134e-04
S4 = 2.75573137070700676789e-06
S5 = -2.50507602534068634195e-08
S6 = 1.58969099521155010221e-10
# fdlibm k_cos.c: cos r = 1 - z/2 + z^2 (C1 + z (C2 + ... + z^5 C6)), |r| <= pi/4
C1 = 4.16666666666666019037e-02
C2 = -1.38888888888741095749e-03
C3 = 2.48015872894767294178e-05
C4 = -2.75573143513906633035e-07
C5 = 2.08757232129817482790e-09
C6 = -1.13596475577881948265e-11


@njit(cache=CACHE, nogil=True, inline="always")
def _cos_sin(x):
    """(cos x, sin x) for |x| <= REDUCTION_LIMIT_RAD, without branches (module docstring)."""
    n = np.floor(x * INV_PIO2 + 0.5)
    r = (x - n * PIO2_1) - n * PIO2_1T
    z = r * r
    v = z * r
    s = r + v * (S1 + z * (S2 + z * (S3 + z * (S4 + z * (S5 + z * S6)))))
    hz = 0.5 * z
    w = 1.0 - hz
    p = z * (C1 + z * (C2 + z * (C3 + z * (C4 + z * (C5 + z * C6)))))
    c = w + (((1.0 - w) - hz) + z * p)
    q = n - 4.0 * np.floor(0.25 * n)            # n mod 4, exactly (n is an integer)
    odd = (q == 1.0) | (q == 3.0)
    sin_x = c if odd else s
    cos_x = s if odd else c
    sin_x = -sin_x if q >= 2.0 else sin_x
    cos_x = -cos_x if (q == 1.0) | (q == 2.0) else cos_x
    return cos_x, sin_x


@njit(cache=CACHE, nogil=True)
def cos_sin_into(x, m, cos_out, sin_out):
    """Set cos_out[:m], sin_out[:m] to the cosine and sine of x[:m] (radians).

    One vectorised pass (module docstring), then the C library's functions for the angles
    beyond REDUCTION_LIMIT_RAD and the non-finite ones.
    """
    for k in range(m):
        cos_out[k], sin_out[k] = _cos_sin(x[k])
    for k in range(m):
        if not abs(x[k]) <= REDUCTION_LIMIT_RAD:
            cos_out[k] = np.cos(x[k])
            sin_out[k] = np.sin(x[k])
