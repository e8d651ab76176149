"""Gate averaging of a frequency counter: the factor it puts on each harmonic of theta.

A counter reports the mean of the signal over its averaging window, so a harmonic of angular
frequency omega (rad/s) in the signal comes out multiplied by the window's transfer function:

* plain gate of length tau (uniform weight 1/tau over tau):
  H(omega) = sinc(omega tau / 2) = sin(omega tau / 2) / (omega tau / 2);
* overlapping gates (the average of gates of length tau started across tau: a triangular weight
  over 2 tau): H(omega) = sinc^2(omega tau / 2).

Both are real and even in omega once the timestamp is the window's centre (the CSV import moves
it there), so they scale the cos and sin amplitudes alike and rotate no phase. With the table
turning at Omega (rad/s), the m theta amplitudes are attenuated by H(m Omega);
:func:`correct_blocks` divides each block's fitted amplitudes by H at the block's own mean rate
(derivation in ``docs/fit.md``; references [R-gate-Pi] and [R-gate-Lambda] in
``docs/references.md``).
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike, NDArray

from fringe.errors import FitError

__all__ = ["MIN_GATE_FACTOR", "block_rates", "correct_blocks", "gate_factor"]

#: Smallest 2 theta gate factor corrected: below it the counter has averaged most of the
#: signal away and the correction would mostly amplify noise (common practice: keep the
#: gate well under a quarter of the 2 theta period).
MIN_GATE_FACTOR = 0.5


def gate_factor(omega_rad_s: ArrayLike, gate_s: float, kind: str) -> NDArray[np.float64]:
    """Transfer function of the counter's averaging window at angular frequency omega.

    Parameters
    ----------
    omega_rad_s : array_like
        Angular frequency, rad/s.
    gate_s : float
        Gate time tau, s.
    kind : {"plain", "overlapping"}
        Uniform weight over tau, or triangular weight over 2 tau.

    Returns
    -------
    ndarray
        sinc(omega tau / 2) (plain) or its square (overlapping); np.sinc(u) is
        sin(pi u) / (pi u), hence the argument omega tau / (2 pi).
    """
    h = np.sinc(np.asarray(omega_rad_s, float) * gate_s / (2.0 * np.pi))
    if kind == "plain":
        return h
    if kind == "overlapping":
        return h * h
    raise ValueError(f"gate kind: expected 'plain' or 'overlapping', got {kind!r}")


def block_rates(t_s: NDArray, theta_rad: NDArray, starts: NDArray) -> NDArray[np.float64]:
    """Mean angular rate of each block, rad/s (first to last sample; NaN for one sample)."""
    n = t_s.size
    th = np.unwrap(theta_rad)
    last = np.append(starts[1:], n) - 1
    dt = t_s[last] - t_s[starts]
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(dt > 0, np.abs(th[last] - th[starts]) / dt, np.nan)


def correct_blocks(coef: NDArray, ninv_2: NDArray, leak: NDArray, rates: NDArray,
                   term_names: tuple[str, ...], gate: tuple[float, str], ok: NDArray,
                   source: str = "samples/signal") -> None:
    """Divide each block's m theta amplitudes by the gate factor at m times its rate (in place).

    ``coef`` (nb, p) columns ``c1, s1, ...``; ``ninv_2`` (the (C, B) block of the inverse
    normal matrix) by the square of the 2 theta factor, ``leak`` by the factor. Raises
    :class:`~fringe.errors.FitError` when an accepted block's 2 theta factor is below
    :data:`MIN_GATE_FACTOR`.
    """
    gate_s, kind = gate
    h2 = gate_factor(2.0 * rates, gate_s, kind)
    bad = ok & ~(h2 >= MIN_GATE_FACTOR)
    if bad.any():
        i = int(np.argmax(bad))
        raise FitError(f"{source}.gate_s: expected a gate short enough to keep the 2 theta "
                       f"signal (factor >= {MIN_GATE_FACTOR}), got {gate_s:g} s, factor "
                       f"{h2[i]:.3g} at {rates[i] / (2 * np.pi):.4g} turns/s")
    for j, name in enumerate(term_names):
        if name[0] in "cs" and name[1:].isdigit():
            coef[:, j] /= gate_factor(int(name[1:]) * rates, gate_s, kind)
    ninv_2 /= (h2 * h2)[:, None, None]
    if leak is not None and leak.size:
        leak /= h2[:, None, None]
