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
import os
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass
from functools import lru_cache

import numpy as np
from numpy.typing import NDArray

from fringe.demodulate.turns import TurnTable
from fringe.experiment.basis import Setup, signal
from fringe.experiment.memo import SetupMemo, Unkeyable, fingerprint, quiet_call, read_only

#: Table angles per instant at which the model is evaluated and projected on 2 theta.
N_ANGLES = 8

#: Instants per batch in :func:`_frozen_model` (bounds memory on year-long records).
MODEL_BATCH = 4096


def _frozen_model(setup: Setup, t: NDArray, names, params) -> tuple[NDArray, NDArray, NDArray]:
    """A, C, B of the model with frames frozen at each instant (each (n, k)), in batches."""
    state = setup.frames(t)            # once: the ephemeris spline is built once per call
    if t.size > MODEL_BATCH:
        parts = [_frozen_model_batch(setup, t[i:i + MODEL_BATCH], names, params,
                                     state.take(slice(i, i + MODEL_BATCH)))
                 for i in range(0, t.size, MODEL_BATCH)]
        return tuple(np.concatenate([p[j] for p in parts]) for j in range(3))
    return _frozen_model_batch(setup, t, names, params, state)


def _frozen_model_batch(setup, t, names, params, state):
    theta = 2.0 * np.pi * np.arange(N_ANGLES) / N_ANGLES
    if params is None:
        return _projected_basis(setup, state, theta, names)
    rep = np.repeat(np.arange(t.size), N_ANGLES)
    st = state.take(rep)
    az = np.tile(np.pi - theta, t.size)
    g = signal(setup, params, t[rep], az, state=st).reshape(t.size, N_ANGLES, 1)
    c = (2.0 / N_ANGLES) * np.einsum("nak,a->nk", g, np.cos(2 * theta))
    b = (2.0 / N_ANGLES) * np.einsum("nak,a->nk", g, np.sin(2 * theta))
    return g.mean(axis=1), c, b


def _projected_basis(setup, state, theta, names):
    """A, C, B per unit coefficient by projecting the apparatus tensor, not the signals.

    The basis is linear in the apparatus's combined lab tensor W(theta)
    (:mod:`fringe.experiment.basis`), so the cos 2 theta / sin 2 theta projections of the basis
    are the basis of the projected tensors W_C = (2/N) sum_a cos 2 theta_a W(theta_a), W_B
    likewise, and A of the mean tensor: three contractions per instant instead of N_ANGLES, with
    the frames evaluated once per instant.
    """
    from fringe.experiment.basis import _combined_tensor

    n = len(state)
    az = np.pi - theta
    # the table-angle tensors do not depend on time: evaluate once, broadcast to the instants
    w, w_iso = _combined_tensor(setup.apparatus, setup.units, az, setup.tilt)   # (N, 3, 3)
    cos2, sin2 = np.cos(2 * theta), np.sin(2 * theta)
    w_a = w.mean(axis=0)
    w_c = (2.0 / theta.size) * np.einsum("akl,a->kl", w, cos2)
    w_b = (2.0 / theta.size) * np.einsum("akl,a->kl", w, sin2)
    project = setup.theory.project
    return tuple(project(state, np.broadcast_to(x, (n, 3, 3)), iso, names)
                 for x, iso in ((w_a, w_iso), (w_c, 0.0), (w_b, 0.0)))


#: Step of the time grid on which turn_model interpolates the model within a turn, s.
WITHIN_TURN_GRID_S = 300.0

#: Grid offsets (in steps) of the interpolation stencil around a turn's grid interval.
STENCIL = np.arange(-2, 4)

#: Turns per batch when evaluating the per-turn model (bounds the transient memory).
TURN_BATCH = 16384

#: Turns per call of :func:`_measured_model` within a batch (its transient arrays, the turns'
#: leak responses copied and A when asked, about 0.2 kB per turn, stay under 1 MB per thread).
MEASURE_BATCH = 4096

#: Threads evaluating batches of turns (each writes its own rows of the result).
MODEL_THREADS = min(2, os.cpu_count() or 1)


#: Grid instants the turn model's grid is rounded to at each end (its nodes are multiples of
#: the step counted from the epoch, its ends multiples of this many steps): campaigns of one
#: schedule whose first or last accepted turns differ share one grid, so :data:`GRID_MEMO` hits.
GRID_ROUNDING_STEPS = 8

#: The frozen model on its grid per setup (:mod:`fringe.experiment.memo`): a 2-day grid of
#: five coefficients is 72 kB; a grid above 1 MiB (about 16 days of nine coefficients) is not
#: kept, so a year's fit (many 34-day segments) holds nothing more.
GRID_MEMO = SetupMemo("turn-model grid", max_entries=8, max_bytes=4 << 20,
                      max_entry_bytes=1 << 20)


@dataclass(frozen=True)
class _ModelGrid:
    """The frozen model's A, C, B (each (m, k)) on a regular time grid start + step x i."""

    start_s: float
    step_s: float
    values: tuple               # views of the rows of ``stacked``
    stacked: NDArray            # the three stacked, (3 m, k), read-only


def _grid_key(setup: Setup, names, params, start_s: float, step_s: float, m: int) -> tuple:
    """Everything the frozen model on the grid depends on (raises Unkeyable if not keyable)."""
    import fringe.frames as frames

    functions = (frames.frame_state, frames.sidereal_angle_rad, frames.earth_velocity_beta,
                 frames.celestial_to_intermediate, frames.rotation_velocity_beta,
                 frames.orbital_phase_rad, _frozen_model)
    constants = (N_ANGLES, MODEL_BATCH, frames.EPHEMERIS_GRID_S, frames.C2I_GRID_S)
    return ("turn-model-grid", fingerprint(setup),
            None if names is None else tuple(names), fingerprint(params),
            float(start_s).hex(), float(step_s).hex(), int(m), functions, constants)


def grid_nodes(t: NDArray, half: NDArray, step_s: float) -> tuple[float, int]:
    """Start (s) and number of instants of the model grid for turns at t, half spans half.

    The grid covers the turns with a margin of at least four steps; its nodes are multiples of
    ``step_s`` from the epoch (t = 0) and its ends multiples of GRID_ROUNDING_STEPS steps, so
    they do not depend on which turns near the ends were accepted.
    """
    block = GRID_ROUNDING_STEPS * step_s
    lo = math.floor((float(np.min(t) - np.max(half)) - 4 * step_s) / block) * block
    hi = math.ceil((float(np.max(t) + np.max(half)) + 4 * step_s) / block) * block
    return lo, max(int(round((hi - lo) / step_s)) + 1, STENCIL.size + 2)


def _model_grid(setup: Setup, t: NDArray, half: NDArray, names, params) -> _ModelGrid:
    """The frozen model on a regular grid covering the turns with a margin of four steps.

    The model changes on sidereal time scales (its fastest common term has a 12 h period), and
    the quintic through six grid values errs by at most (omega h)^6 x 3.52 / 6! = 3.5e-11
    relative for h = WITHIN_TURN_GRID_S = 300 s and omega = 2 pi / 12 h (interpolation error
    bound of the Lagrange polynomial at the middle interval); the within-turn terms (~1e-3 of
    the signal) come from its derivatives, whose errors are of the same order relative to them.
    A year costs 1.05e5 grid instants for any turn period. The grid's nodes are
    :func:`grid_nodes`; its values are kept in :data:`GRID_MEMO` for the next fit of the same
    setup on the same grid.
    """
    step = WITHIN_TURN_GRID_S
    lo, m = grid_nodes(t, half, step)
    try:
        key = _grid_key(setup, names, params, lo, step, m)
    except Unkeyable:
        key = None
    stacked = None if key is None else GRID_MEMO.get(key)
    if stacked is None:
        grid = lo + step * np.arange(m)
        values, warned = quiet_call(_frozen_model, setup, grid, names, params)
        stacked = np.concatenate(values, axis=0)
        read_only(stacked)
        if key is not None and not warned:
            GRID_MEMO.put(key, stacked)
    values = (stacked[:m], stacked[m:2 * m], stacked[2 * m:])
    return _ModelGrid(lo, step, values, stacked)


@lru_cache(maxsize=4)
def _derivative_matrices(max_order: int) -> tuple[NDArray, ...]:
    """Per derivative order j, the (6 - j, 6) map from s^(e - j) to the stencil weights.

    Row e - j of matrix j is e! / (e - j)! times the s^e coefficients of the Lagrange basis of
    the stencil nodes; constant, so formed once (read-only).
    """
    nodes = STENCIL.astype(float)
    mono = np.linalg.inv(np.vander(nodes, increasing=True))   # row e: s^e coefficients
    out = []
    for j in range(max_order + 1):
        e = np.arange(j, nodes.size)
        factor = np.array([math.factorial(x) / math.factorial(x - j) for x in e])
        m = factor[:, None] * mono[e]
        m.flags.writeable = False
        out.append(m)
    return tuple(out)


@lru_cache(maxsize=4)
def _derivative_stack(max_order: int) -> NDArray:
    """:func:`_derivative_matrices` in one (max_order + 1, 6, 6) array, rows e >= 6 - j zero."""
    size = STENCIL.size
    out = np.zeros((max_order + 1, size, size))
    for j, m in enumerate(_derivative_matrices(max_order)):
        out[j, :size - j] = m
    out.flags.writeable = False
    return out


@lru_cache(maxsize=8)
def _leak_sources(terms: tuple) -> tuple[NDArray, NDArray]:
    """Each leak term's source (0 A, 1 C, 2 B) and power of tau, as int arrays (read-only)."""
    src = np.array([{"A": 0, "C": 1, "B": 2}[kind] for kind, _ in terms], dtype=np.int64)
    power = np.array([j for _, j in terms], dtype=np.int64)
    src.flags.writeable = power.flags.writeable = False
    return src, power


def _measured_model(grid: _ModelGrid, t, half, leak, settings, with_a: bool = True,
                    out: tuple | None = None):
    """What stage 1 measures for turns (t, half span, leak responses): A (or None), C, B.

    Each is an array of shape (n, k): n turns, k coefficients; ``out`` = (C_out, B_out), arrays
    (n, k), receives C and B (they are returned). t and half are in s, ``leak`` is
    ``TurnTable.leak`` for the turns ((n, 2, l), dimensionless).

    The frozen model's value and derivatives at each turn come from the quintic through six grid
    values around it (:data:`STENCIL`). What stage 1 measures for C (and B alike) is
    C(t) + sum_q leak_q h^j / j! X_q^(j)(t) over the leak columns q (X_q the A, C or B model, j
    its power of tau, h the half span), so it is a weighted sum of the 3 x 6 stencil values;
    :func:`fringe.fit.stencil.measured_turns` (compiled) forms the weights and the sums turn by
    turn.
    """
    from fringe.demodulate.settings import LEAK_ORDER, leak_terms
    from fringe.fit.stencil import measured_turns

    m, k = grid.values[0].shape
    n = t.size
    src, power = _leak_sources(leak_terms(settings))
    c, b = (np.empty((n, k)), np.empty((n, k))) if out is None else out
    a = np.empty((n, k)) if with_a else None
    measured_turns(t, half, leak, grid.start_s, grid.step_s, m, _derivative_stack(LEAK_ORDER),
                   src, power, grid.stacked, c, b, a)
    return a, c, b


def turn_model(setup: Setup, t_s: NDArray, names: tuple[str, ...] | None = None,
               params: dict | None = None, *, table: TurnTable | None = None,
               sel: NDArray | None = None, mean: bool = True, out: tuple | None = None
               ) -> tuple[NDArray | None, NDArray, NDArray]:
    """Non-rotating mean A, and 2 theta amplitudes C, B of the model for turns at t_s.

    For linear theories (``params`` None) each is (n, k) per unit coefficient; with ``params``
    each is (n,) for the total signal (any theory). At an instant the model's 2 theta content
    comes from N_ANGLES table angles with the frames frozen at that instant.

    Without ``table`` this is that content at t_s itself. With the stage-1 ``table`` (and
    ``sel``, the boolean selection of its rows whose mean times t_s are), it is what stage 1
    measures for the turn: the change of A, C and B within the turn, expanded in the turn's
    normalised time tau to tau^LEAK_ORDER (t = t_mid + tau x half span; from the model on a
    regular grid, :func:`_model_grid`, :func:`_measured_model`), times the block fit's
    response to each tau^j term (``table.leak``), is added. Freezing the model at t_mid instead
    errs by about (P_turn / P_sidereal) x the signal (the within-turn change of C leaks into B
    and back). Turns are processed in batches of TURN_BATCH. With ``mean=False`` (and a
    table) A is not computed and None is returned in its place. ``out`` = (C_out, B_out),
    arrays (n, >= k), receives C and B in its first k columns (linear theories with a table;
    the returned C and B are views of it).
    """
    t = np.atleast_1d(np.asarray(t_s, float))
    if table is not None and table.leak is not None and t.size:
        rows = np.arange(table.n_blocks) if sel is None else np.flatnonzero(sel)
        half = np.maximum(0.5 * (table.t_stop_s[rows] - table.t_start_s[rows]), 1e-9)
        grid = _model_grid(setup, t, half, names, params)
        k = grid.values[0].shape[1]
        a = np.empty((t.size, k)) if mean else None
        if out is not None:
            c, b = out[0][:, :k], out[1][:, :k]
        else:
            c, b = np.empty((t.size, k)), np.empty((t.size, k))

        def batch(i):
            # in pieces of MEASURE_BATCH turns: each turn's row is computed alone (the same
            # numbers for any piece size), and the transient arrays stay small
            for j in range(i, min(i + TURN_BATCH, t.size), MEASURE_BATCH):
                sl = slice(j, min(j + MEASURE_BATCH, i + TURN_BATCH))
                pa, _, _ = _measured_model(grid, t[sl], half[sl], table.leak[rows[sl]],
                                           table.settings, with_a=mean, out=(c[sl], b[sl]))
                if mean:
                    a[sl] = pa

        starts = range(0, t.size, TURN_BATCH)
        if len(starts) > 1:        # the compiled per-turn model releases the GIL
            with ThreadPoolExecutor(max_workers=MODEL_THREADS) as pool:
                list(pool.map(batch, starts))
        else:
            batch(0)
    else:
        a, c, b = _frozen_model(setup, t, names, params)
        if out is not None:
            k = c.shape[1]
            out[0][:, :k], out[1][:, :k] = c, b
            c, b = out[0][:, :k], out[1][:, :k]
    if params is not None:
        return (None if a is None else a[:, 0]), c[:, 0], b[:, 0]
    return a, c, b
