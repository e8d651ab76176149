"""Basis signals g_k(t) and the observable: the one object every job uses.

For a linear theory the observable is ``signal(t) = sum_k p_k g_k(t)``, where g_k is the
observable a unit value of coefficient k produces for this apparatus, site, orientation history
and calendar (:func:`basis`). :func:`signal` evaluates the observable for given coefficient values
(exactly, also for the nonlinear classical medium). Both take a :class:`Setup` (what is fixed
about the experiment) plus sample times and path-1 azimuths, and work on any number of samples;
callers stream long records through them in chunks (:data:`CHUNK_SAMPLES`).

Computation: the table-mounted modes are combined into one table-frame tensor W' = sum_i w_i M_i,
turned into the lab by Q(t) (turntable angle and tilt); lab-fixed modes are added as they are.
Then g_k = W_lab : T_k + w_iso s_k with the theory's per-coefficient lab response (T_k, s_k).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from numpy.typing import ArrayLike, NDArray

from fringe.errors import ConfigError
from fringe.experiment.apparatus import Apparatus
from fringe.experiment.turntable import AxisTilt, table_to_lab
from fringe.frames import Epoch, FrameState, frame_state
from fringe.site import Site
from fringe.theories.base import Theory

#: Samples per chunk in streamed passes (memory ~ CHUNK_SAMPLES x coefficients x 20 doubles).
CHUNK_SAMPLES = 1 << 15


@dataclass(frozen=True)
class Setup:
    """Everything fixed about an experiment: where, when, what apparatus, which theory.

    Parameters
    ----------
    site : Site
    epoch : Epoch
        UTC instant that sample times are counted from.
    apparatus : Apparatus
    theory : Theory
    units : str
        Observable units ("1", "Hz" or "fringe"); default the apparatus's default.
    tilt : AxisTilt or None
        Constant tilt of the table axis.
    include_rotation_velocity : bool
        Include the Earth-rotation velocity of the site in the lab velocity (C12).
    """

    site: Site
    epoch: Epoch
    apparatus: Apparatus
    theory: Theory
    units: str = ""
    tilt: AxisTilt | None = None
    include_rotation_velocity: bool = True
    _checked: bool = field(default=False, repr=False)

    def __post_init__(self):
        if not self.units:
            object.__setattr__(self, "units", self.apparatus.default_units)
        self.apparatus.check_units(self.units)
        if self.theory.sector != self.apparatus.sector:
            raise ConfigError(f"theory '{self.theory.name}' ({self.theory.sector} sector) does "
                              f"not act on apparatus '{self.apparatus.kind}' "
                              f"({self.apparatus.sector} sector)")

    def frames(self, t_s: ArrayLike) -> FrameState:
        """Frame quantities at samples ``t_s``."""
        return frame_state(self.epoch, t_s, self.site,
                           include_rotation_velocity=self.include_rotation_velocity)


def _combined_tensor(apparatus: Apparatus, units: str, azimuth_rad: NDArray,
                     tilt: AxisTilt | None) -> tuple[NDArray, float]:
    """W_lab (n, 3, 3) and w_iso of the linearised observable."""
    w = apparatus.linear_weights(units)
    q = table_to_lab(azimuth_rad, tilt)
    on = np.zeros((3, 3))
    fixed = np.zeros((3, 3))
    for wi, mode in zip(w, apparatus.modes):
        if mode.on_table:
            on += wi * mode.tensor
        else:
            fixed += wi * mode.tensor
    w_lab = np.einsum("nij,jk,nlk->nil", q, on, q, optimize=True) + fixed
    w_iso = float(sum(wi * np.trace(m.tensor) for wi, m in zip(w, apparatus.modes)))
    return w_lab, w_iso


def mode_directions_lab(apparatus: Apparatus, azimuth_rad: NDArray,
                        tilt: AxisTilt | None) -> NDArray:
    """Lab directions of the straight modes, (n, p, 3); raises for non-straight modes."""
    q = table_to_lab(azimuth_rad, tilt)
    out = []
    for mode in apparatus.modes:
        if mode.direction is None:
            raise ConfigError("theory 'medium' needs straight light paths; this apparatus "
                              "uses general mode tensors")
        if mode.on_table:
            out.append(np.einsum("nij,j->ni", q, mode.direction))
        else:
            out.append(np.broadcast_to(mode.direction, (q.shape[0], 3)))
    return np.stack(out, axis=1)


def basis(setup: Setup, t_s: ArrayLike, azimuth_rad: ArrayLike,
          names: tuple[str, ...] | None = None, state: FrameState | None = None) -> NDArray:
    """Basis signals g_k at the samples, shape (n, k), in ``setup.units`` per unit coefficient.

    Parameters
    ----------
    setup : Setup
    t_s : array_like, shape (n,)
        Seconds since ``setup.epoch``.
    azimuth_rad : array_like, shape (n,)
        Azimuth of path 1 (C7), radians.
    names : tuple of str, optional
        Coefficients (default: all of the theory's).
    state : FrameState, optional
        Precomputed frames for these samples (else computed).
    """
    names = tuple(names) if names is not None else setup.theory.parameter_names
    state = setup.frames(t_s) if state is None else state
    w_lab, w_iso = _combined_tensor(setup.apparatus, setup.units,
                                    np.asarray(azimuth_rad, float), setup.tilt)
    return setup.theory.project(state, w_lab, w_iso, names)


def signal(setup: Setup, params: dict[str, float], t_s: ArrayLike, azimuth_rad: ArrayLike,
           state: FrameState | None = None) -> NDArray:
    """The observable for coefficient values ``params``, shape (n,), in ``setup.units``.

    Exact for the nonlinear classical medium; for linear theories equal to basis @ p.
    """
    state = setup.frames(t_s) if state is None else state
    theory = setup.theory
    az = np.asarray(azimuth_rad, float)
    if theory.linear:
        t, s = theory.combined_response(params, state)
        w_lab, w_iso = _combined_tensor(setup.apparatus, setup.units, az, setup.tilt)
        return np.einsum("nij,nij->n", w_lab, t) + w_iso * s
    directions = mode_directions_lab(setup.apparatus, az, setup.tilt)
    shifts = theory.path_shift(params, directions, state)
    return setup.apparatus.combine(shifts, setup.units, index=theory.phase_index)


def two_theta_amplitudes(setup: Setup, t_s: ArrayLike, names: tuple[str, ...] | None = None,
                         n_angles: int = 8) -> tuple[NDArray, NDArray]:
    """The 2 theta content of each basis signal at instants ``t_s``, frozen in time.

    At each instant the basis is evaluated at ``n_angles`` equally spaced turntable angles and
    projected on cos 2 theta and sin 2 theta (exact for signals band-limited below
    ``n_angles``/2 harmonics of theta). Returns (C, B), each (n, k): the model for per-turn
    demodulated amplitudes (convention C10).
    """
    t = np.atleast_1d(np.asarray(t_s, float))
    names = tuple(names) if names is not None else setup.theory.parameter_names
    theta = 2.0 * np.pi * np.arange(n_angles) / n_angles
    state = setup.frames(t)
    rep = np.repeat(np.arange(t.size), n_angles)
    st = state.take(rep)
    g = basis(setup, t[rep], np.tile(np.pi - theta, t.size), names, state=st)
    g = g.reshape(t.size, n_angles, len(names))
    c = (2.0 / n_angles) * np.einsum("nak,a->nk", g, np.cos(2 * theta))
    b = (2.0 / n_angles) * np.einsum("nak,a->nk", g, np.sin(2 * theta))
    return c, b
