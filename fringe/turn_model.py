"""The per-turn model: what stage 1 measures for each turn, per unit coefficient.

:func:`turn_model` gives, for turns at given mean times, the non-rotating mean A and the 2 theta
amplitudes C, B of the model (per unit coefficient, or for given coefficient values). With the
stage-1 turn table it includes the model's change within each turn times the block fit's
response to it, so that it equals what :func:`fringe.demodulate.demodulate_blocks` measures from
a noise-free record (to ~1e-9 relative). Stage 3 (:mod:`fringe.fit`), the plan and the tests use
it.
"""

from __future__ import annotations

import math

import numpy as np
from numpy.typing import NDArray

from .demodulate import TurnTable
from .signal import Setup, signal

#: Table angles per instant at which the model is evaluated and projected on 2 theta.
N_ANGLES = 8

#: Instants per batch in :func:`_frozen_model` (bounds memory on year-long records).
MODEL_BATCH = 4096


def _frozen_model(setup: Setup, t: NDArray, names, params) -> tuple[NDArray, NDArray, NDArray]:
    """A, C, B of the model with frames frozen at each instant (each (n, k)), in batches."""
    state = setup.frames(t)            # once: the ephemeris spline is built once per call
    if t.size > MODEL_BATCH:
        parts = [_frozen_model_batch(setup, t[i:i + MODEL_BATCH], names, params,
                                     _slice_state(state, slice(i, i + MODEL_BATCH)))
                 for i in range(0, t.size, MODEL_BATCH)]
        return tuple(np.concatenate([p[j] for p in parts]) for j in range(3))
    return _frozen_model_batch(setup, t, names, params, state)


def _slice_state(state, sl):
    from .frames import FrameState

    return FrameState(state.phi_rad[sl], state.colatitude_rad, state.beta[sl],
                      None if state.orbital_phase_rad is None else state.orbital_phase_rad[sl])


def _frozen_model_batch(setup, t, names, params, state):
    from .frames import FrameState

    theta = 2.0 * np.pi * np.arange(N_ANGLES) / N_ANGLES
    if params is None:
        return _projected_basis(setup, state, theta, names)
    rep = np.repeat(np.arange(t.size), N_ANGLES)
    st = FrameState(state.phi_rad[rep], state.colatitude_rad, state.beta[rep])
    az = np.tile(np.pi - theta, t.size)
    g = signal(setup, params, t[rep], az, state=st).reshape(t.size, N_ANGLES, 1)
    c = (2.0 / N_ANGLES) * np.einsum("nak,a->nk", g, np.cos(2 * theta))
    b = (2.0 / N_ANGLES) * np.einsum("nak,a->nk", g, np.sin(2 * theta))
    return g.mean(axis=1), c, b


def _projected_basis(setup, state, theta, names):
    """A, C, B per unit coefficient by projecting the apparatus tensor, not the signals.

    The basis is linear in the apparatus's combined lab tensor W(theta) (fringe.signal), so the
    cos 2 theta / sin 2 theta projections of the basis are the basis of the projected tensors
    W_C = (2/N) sum_a cos 2 theta_a W(theta_a), W_B likewise, and A of the mean tensor: three
    contractions per instant instead of N_ANGLES, with the frames evaluated once per instant.
    """
    from .signal import _combined_tensor

    n = len(state)
    az = np.pi - theta
    w = np.stack([_combined_tensor(setup.apparatus, setup.units, np.full(n, a), setup.tilt)[0]
                  for a in az], axis=1)                                # (n, N, 3, 3)
    _, w_iso = _combined_tensor(setup.apparatus, setup.units, az[:1], setup.tilt)
    cos2, sin2 = np.cos(2 * theta), np.sin(2 * theta)
    w_a = w.mean(axis=1)
    w_c = (2.0 / theta.size) * np.einsum("nakl,a->nkl", w, cos2)
    w_b = (2.0 / theta.size) * np.einsum("nakl,a->nkl", w, sin2)
    project = setup.theory.project
    return (project(state, w_a, w_iso, names), project(state, w_c, 0.0, names),
            project(state, w_b, 0.0, names))


#: Step of the time grid on which turn_model interpolates the model's change within a turn, s.
WITHIN_TURN_GRID_S = 120.0


#: Turns per batch when evaluating the per-turn model (bounds the transient memory).
TURN_BATCH = 65536


def _model_splines(setup: Setup, t: NDArray, half: NDArray, names, params) -> list:
    """Cubic splines of the frozen model's A, C, B on a regular grid around the turns.

    Grid step WITHIN_TURN_GRID_S with a margin of four steps: the model changes on sidereal
    time scales (>= 12 h), so the splines' derivatives err by ~(2 pi x 120 s / 12 h)^3 / 24 =
    2e-7 relative (the within-turn terms themselves are ~1e-3 of the signal) and their values by
    ~(2 pi x 120 s / 12 h)^4 / 384 = 2.4e-10 relative. The grid costs the same for any turn
    period (a year: 2.6e5 grid instants).
    """
    from scipy.interpolate import CubicSpline

    step = WITHIN_TURN_GRID_S
    lo, hi = float(np.min(t) - np.max(half)) - 4 * step, float(np.max(t) + np.max(half)) + 4 * step
    grid = np.linspace(lo, hi, max(int(np.ceil((hi - lo) / step)) + 1, 8))
    return [CubicSpline(grid, vals, axis=0) for vals in _frozen_model(setup, grid, names, params)]


def _measured_model(splines, t, half, leak, settings):
    """What stage 1 measures for turns (t, half span, leak responses): A, C, B (n, k)."""
    from .demodulate import LEAK_ORDER, leak_terms

    terms = [{j: sp(t, nu=j) * (half ** j / math.factorial(j))[:, None]
              for j in range(LEAK_ORDER + 1)} for sp in splines]
    a, c, b = terms[0][0], terms[1][0].copy(), terms[2][0].copy()
    src = {"A": 0, "C": 1, "B": 2}
    for q, (kind, j) in enumerate(leak_terms(settings)):
        term = terms[src[kind]][j]
        c += leak[:, 0, q, None] * term
        b += leak[:, 1, q, None] * term
    return a, c, b


def turn_model(setup: Setup, t_s: NDArray, names: tuple[str, ...] | None = None,
               params: dict | None = None, *, table: TurnTable | None = None,
               sel: NDArray | None = None) -> tuple[NDArray, NDArray, NDArray]:
    """Non-rotating mean A, and 2 theta amplitudes C, B of the model for turns at t_s.

    For linear theories (``params`` None) each is (n, k) per unit coefficient; with ``params``
    each is (n,) for the total signal (any theory). At an instant the model's 2 theta content
    comes from N_ANGLES table angles with the frames frozen at that instant.

    Without ``table`` this is that content at t_s itself. With the stage-1 ``table`` (and
    ``sel``, the boolean selection of its rows whose mean times t_s are), it is what stage 1
    measures for the turn: the change of A, C and B within the turn, expanded in the turn's
    normalised time tau to tau^LEAK_ORDER (t = t_mid + tau x half span; from splines of the
    model, :func:`_model_splines`), times the block fit's response to each tau^j term
    (``table.leak``), is added. Freezing the model at t_mid instead errs by about
    (P_turn / P_sidereal) x the signal (the within-turn change of C leaks into B and back).
    Turns are processed in batches of TURN_BATCH.
    """
    t = np.atleast_1d(np.asarray(t_s, float))
    if table is not None and table.leak is not None and t.size:
        rows = np.arange(table.n_blocks) if sel is None else np.flatnonzero(sel)
        half = np.maximum(0.5 * (table.t_stop_s[rows] - table.t_start_s[rows]), 1e-9)
        splines = _model_splines(setup, t, half, names, params)
        parts = [_measured_model(splines, t[i:i + TURN_BATCH], half[i:i + TURN_BATCH],
                                 table.leak[rows[i:i + TURN_BATCH]], table.settings)
                 for i in range(0, t.size, TURN_BATCH)]
        a, c, b = (np.concatenate([p[x] for p in parts]) for x in range(3))
    else:
        a, c, b = _frozen_model(setup, t, names, params)
    if params is not None:
        return a[:, 0], c[:, 0], b[:, 0]
    return a, c, b
