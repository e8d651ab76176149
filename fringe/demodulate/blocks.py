"""Stage 1: per-turn demodulation of a rotating-apparatus record.

The record is cut into turns (blocks) at the instants the turntable angle theta = pi - A (C7)
passes its starting value, and at every time gap longer than ``max_gap_s`` (a table turning one
way; a table that reverses is cut into legs, and a stepped table's samples while moving are left
out, :mod:`fringe.demodulate.motion`). Each block is fitted by linear least squares with

    y(t) = a0 + a1 tau [+ a2 tau^2] + c1 cos theta + s1 sin theta + C cos 2 theta + B sin 2 theta
           [+ 3 theta, 4 theta terms],      tau = (t - t_mid)/(half span of the block),

using the recorded azimuth (not an assumed rate). NaN samples are left out. The blocks of a
range are fitted by the compiled kernel :func:`fringe.demodulate.kernel.block_fits` (one block at
a time, three passes over its samples while they are in cache; no Python loop over blocks).
Auxiliary channels are demodulated with the same design.

Each block also records the (C, B) response of the fit to the slowly varying unit columns
tau^j cos 2 theta, tau^j sin 2 theta (j = 1 ... LEAK_ORDER) and tau^j (drift order < j <=
LEAK_ORDER) (``TurnTable.leak``, :func:`leak_terms`). Stage 3 uses them to model the per-turn
amplitudes of a signal that changes during the turn (sidereal and orbital motion) exactly,
instead of freezing it at the turn's mean time (which errs by about P_turn / P_sidereal of the
signal, see :func:`fringe.fit.turn_model`).

Rejection rules, counted in :class:`TurnTable`:

* **partial**: fewer than ``min_samples`` valid samples, an angular gap (largest gap in
  theta mod 2 pi among the valid samples) above ``max_angle_gap_deg`` (for swinging and
  stepped motions: the largest gap in 2 theta mod 2 pi above ``max_2theta_gap_deg``, see
  :mod:`fringe.demodulate.motion`), or a singular
  block (the rank guard of :mod:`fringe.demodulate.kernel`);
* **glitch**: residual RMS above median + ``glitch_threshold`` x 1.4826 x MAD of the residual
  RMS over all otherwise-good blocks (applied once the whole record is demodulated).

A block belongs to the range in which it *starts*; ranges read ahead until their last block is
complete, so any split of the record into ranges (local chunks or dask tasks) gives the same
blocks and the same numbers.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import NDArray

from fringe.demodulate.gate import block_rates, correct_blocks
from fringe.demodulate.kernel import LEAK_KIND_CODES, block_fits
from fringe.demodulate.kernel import block_starts as kernel_block_starts
from fringe.demodulate.settings import DRIFT_TERMS, DemodSettings, leak_terms
from fringe.demodulate.turns import TurnTable


def turn_boundaries(theta_rad: NDArray, theta0_rad: float, t_s: NDArray, max_gap_s: float,
                    theta_prev: float | None = None, t_prev: float | None = None) -> NDArray:
    """Boolean array: True where a new block starts at sample i (before sample i).

    A block starts where theta - theta0 crosses a multiple of 2 pi (either sense: where
    psi = (theta - theta0) mod 2 pi jumps by more than pi between neighbouring samples), or after
    a time gap longer than ``max_gap_s``. ``theta_prev``/``t_prev`` give the sample before the
    first one. Angles may be wrapped or unwrapped; steps between samples must stay below pi.
    """
    has_prev = theta_prev is not None
    return kernel_block_starts(np.ascontiguousarray(theta_rad, float),
                               np.ascontiguousarray(t_s, float), float(theta0_rad),
                               float(max_gap_s), float(theta_prev) if has_prev else 0.0,
                               float(t_prev) if has_prev else 0.0, has_prev)


def azimuth_boundaries(azimuth_rad: NDArray, theta0_rad: float, t_s: NDArray,
                       max_gap_s: float, azimuth_prev: float | None = None,
                       t_prev: float | None = None) -> NDArray:
    """:func:`turn_boundaries` of the table angles theta = pi - A (C7) of azimuths A (rad).

    The same result as ``turn_boundaries(numpy.pi - azimuth_rad, ...)`` with ``theta_prev =
    numpy.pi - azimuth_prev``, without building the theta array (the kernel subtracts per
    sample).
    """
    has_prev = azimuth_prev is not None
    return kernel_block_starts(np.ascontiguousarray(azimuth_rad, float),
                               np.ascontiguousarray(t_s, float), float(theta0_rad),
                               float(max_gap_s),
                               np.pi - float(azimuth_prev) if has_prev else 0.0,
                               float(t_prev) if has_prev else 0.0, has_prev, True)


def demodulate_blocks(t_s: NDArray, azimuth_rad: NDArray, y: NDArray, block_starts: NDArray,
                      settings: DemodSettings, aux: dict[str, NDArray] | None = None, *,
                      weight: NDArray | None = None, gate: tuple[float, str] | None = None,
                      gap_harmonic: int = 1) -> TurnTable:
    """Fit every block of a contiguous sample range (compiled kernel, module docstring).

    Parameters
    ----------
    t_s, azimuth_rad, y : ndarray, shape (n,)
        Times (s), azimuths of path 1 (rad, C7) and signal; y may hold NaN.
    block_starts : ndarray of int
        Index of the first sample of each block (increasing, first = 0); the last block ends at n.
    settings : DemodSettings
    aux : dict, optional
        Auxiliary channels (name -> (n,) array) demodulated with the same design.
    weight : ndarray, shape (n,), optional
        Sample weights (> 0, NaN = missing; the ``samples/weight`` channel): weighted least
        squares, residual RMS of unit weight.
    gate : (gate_s, kind), optional
        The counter's gate (``samples/signal.gate_s`` and ``gate_kind``): the signal's m theta
        amplitudes are divided by the gate factor (:mod:`fringe.demodulate.gate`); auxiliary
        channels are not.
    gap_harmonic : {1, 2}
        The coverage check: 1, the largest gap in theta must not exceed
        ``settings.max_angle_gap_deg`` (whole-turn motions); 2, the largest gap in 2 theta must
        not exceed ``settings.max_2theta_gap_deg`` (swinging and stepped motions,
        :mod:`fringe.demodulate.motion`).
    """
    aux = aux or {}
    names = list(aux)
    n = t_s.size
    aux_2d = (np.stack([np.asarray(aux[k], float) for k in names], axis=1) if names
              else np.zeros((n, 0)))
    kinds = leak_terms(settings)
    (vcount, t_mid, t_lo, t_hi, coef, aux_coef, leak, ninv_2, rms, gap_rad, ok) = block_fits(
        np.ascontiguousarray(t_s, float), np.ascontiguousarray(azimuth_rad, float),
        np.ascontiguousarray(y, float), aux_2d, np.asarray(block_starts, np.int64),
        DRIFT_TERMS[settings.drift], settings.max_harmonic,
        np.array([LEAK_KIND_CODES[k] for k, _ in kinds], np.int64),
        np.array([j for _, j in kinds], np.int64), settings.min_samples,
        np.radians(settings.max_angle_gap_deg if gap_harmonic == 1
                   else settings.max_2theta_gap_deg),
        np.ones(n) if weight is None else np.ascontiguousarray(weight, float),
        int(gap_harmonic))
    if gate is not None:
        starts = np.asarray(block_starts, np.int64)
        theta = np.pi - np.asarray(azimuth_rad, float)          # C7
        correct_blocks(coef, ninv_2, leak, block_rates(np.asarray(t_s, float), theta, starts),
                       settings.term_names, gate, ok)
    status = np.where(ok, TurnTable.ACCEPTED, TurnTable.PARTIAL).astype(np.int8)
    return TurnTable(t_mid_s=t_mid, t_start_s=t_lo, t_stop_s=t_hi, n_valid=vcount, coef=coef,
                     ninv_2=ninv_2, residual_rms=rms, angle_gap_deg=np.degrees(gap_rad),
                     status=status, settings=settings,
                     aux={name: aux_coef[j] for j, name in enumerate(names)}, leak=leak)
