"""The protocol every anisotropy theory follows.

A theory turns coefficient values into the two-way fractional speed change along lab
directions. Linear theories (all but the classical medium) also expose, for each coefficient at
unit value, a lab-frame response tensor ``T`` and an isotropic shift ``s`` such that the two-way
fractional change of a mode with sensitivity tensor ``M`` (trace 1 for a Fabry-Perot mode, whose
M is the projector n n onto its axis) is ``M : T + tr(M) s``. The per-coefficient pair (T, s) is
the whole basis: every observable is linear in it.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping
from typing import ClassVar

import numpy as np
from numpy.typing import NDArray

from fringe.errors import ConfigError, unknown_name
from fringe.frames import FrameState


def traceless(t: NDArray) -> NDArray:
    """Traceless part of symmetric tensors on the last two axes (..., 3, 3)."""
    tr = np.trace(t, axis1=-2, axis2=-1)[..., None, None]
    return t - tr * np.eye(3) / 3.0


def rotate_to_lab(tensor_sccef: NDArray, state: FrameState) -> NDArray:
    """T_lab = R T Rᵀ for tensors (n, k, 3, 3) or (k, 3, 3) in SCCEF axes."""
    r = state.rotation
    if tensor_sccef.ndim == 3:
        return np.einsum("nij,kjl,nml->nkim", r, tensor_sccef, r, optimize=True)
    return np.einsum("nij,nkjl,nml->nkim", r, tensor_sccef, r, optimize=True)


class Theory:
    """Base class: subclasses set ``name``, ``sector``, ``parameter_names``, ``parameter_units``.

    What the rest of fringe asks of a theory is asked here, never by its name: the fit's
    default free set (:meth:`default_free`), the scenario options of the ``[theory]`` section
    (:meth:`scenario_options`), named rest frames of the coefficients (``rest_frames``), which
    coefficients a plan and a report lead with (``primary_names``) and which separate from them
    only over a long campaign (``annual_names``).

    Attributes
    ----------
    sector : {"photon", "matter"}
        Photon-sector theories act on light paths (cavities, interferometers); matter-sector
        theories act on a clock's quantization axis.
    linear : bool
        True when the observable is linear in the coefficients.
    primary_names : tuple of str
        The coefficients a campaign bounds first: the default free set of a short fit and of a
        plan, and the ones a report's headline states. Default: all ``parameter_names``.
    annual_names : tuple of str
        Coefficients that separate from the primary ones only through the annual modulation of
        the lab's velocity (SME: ko_*): freed by default in records of at least
        ``annual_span_days``, and the plan forecasts from which span they decouple.
    annual_span_days : float
        Record span from which ``annual_names`` join the default free set, days.
    rest_frames : mapping of str to callable
        Named frames a scenario's ``[coefficients] rest_frame`` may give; each returns the
        coefficient values of that frame (e.g. a medium at rest in the CMB frame).
    """

    name: ClassVar[str] = ""
    sector: ClassVar[str] = "photon"
    linear: ClassVar[bool] = True
    parameter_names: ClassVar[tuple[str, ...]] = ()
    parameter_units: ClassVar[dict[str, str]] = {}
    description: ClassVar[str] = ""
    primary_names: ClassVar[tuple[str, ...]] = ()
    annual_names: ClassVar[tuple[str, ...]] = ()
    annual_span_days: ClassVar[float] = math.inf
    rest_frames: ClassVar[Mapping[str, Callable[[], dict[str, float]]]] = {}

    def __init_subclass__(cls, **kwargs):
        super().__init_subclass__(**kwargs)
        if not cls.primary_names:
            cls.primary_names = cls.parameter_names

    # -- configuration ---------------------------------------------------------------------
    #: The names :meth:`scenario_options` reads from a ``[theory]`` table (for the messages).
    SCENARIO_OPTIONS: tuple[str, ...] = ()

    @classmethod
    def scenario_options(cls, spec: dict, source: str) -> dict:
        """Constructor options from a scenario's ``[theory]`` table.

        Removes the options this theory knows from ``spec`` (what is left is unknown to it) and
        returns them as keyword arguments of the constructor. ``source`` names the file in
        error messages. The base class knows none.
        """
        return {}

    def default_free(self, span_days: float, apparatus) -> tuple[str, ...]:
        """The coefficients a fit frees by default for a record of ``span_days`` (days).

        The record is taken with ``apparatus`` (a :class:`fringe.experiment.apparatus.Apparatus`).
        The default is the primary coefficients, and the annual ones from ``annual_span_days`` on.
        """
        names = self.primary_names
        if self.annual_names and span_days >= self.annual_span_days:
            names = names + self.annual_names
        return names

    def check_params(self, params: Mapping[str, float], source: str = "coefficients") -> dict:
        """Return ``params`` as floats after checking every name belongs to this theory."""
        out = {}
        for key, value in params.items():
            if key not in self.parameter_names:
                raise ConfigError(f"{source}: " + unknown_name(
                    key, self.parameter_names, f"coefficient of theory '{self.name}'",
                    ordered=True))
            if isinstance(value, bool) or not isinstance(value, (int, float)) \
                    or not np.isfinite(value):
                raise ConfigError(f"{source}: {key}: expected a finite number, got {value!r}")
            out[key] = float(value)
        return out

    # -- linear theories -------------------------------------------------------------------
    def response(self, state: FrameState, names: tuple[str, ...] | None = None
                 ) -> tuple[NDArray, NDArray]:
        """Per-coefficient lab response tensors T (n, k, 3, 3) and isotropic shifts s (n, k).

        ``names`` selects and orders the coefficients (default: all ``parameter_names``).
        """
        raise NotImplementedError(f"theory '{self.name}' is not linear")

    def project(self, state: FrameState, w_lab: NDArray, w_iso: float,
                names: tuple[str, ...] | None = None) -> NDArray:
        """Basis of an observable W_lab : T_k + w_iso s_k, shape (n, k).

        ``w_lab`` (n, 3, 3) is the apparatus's combined lab-frame sensitivity tensor. Theories
        may override this with a faster contraction that never forms T_k.
        """
        t, s = self.response(state, names)
        return np.einsum("nij,nkij->nk", w_lab, t, optimize=True) + w_iso * s

    def combined_response(self, params: Mapping[str, float], state: FrameState
                          ) -> tuple[NDArray, NDArray]:
        """T (n, 3, 3) and s (n,) for the given coefficient values (linear theories)."""
        params = self.check_params(params)
        names = tuple(k for k, v in params.items() if v != 0.0)
        n = len(state)
        if not names:
            return np.zeros((n, 3, 3)), np.zeros(n)
        t, s = self.response(state, names)
        p = np.array([params[k] for k in names])
        return np.einsum("nkij,k->nij", t, p), s @ p

    @property
    def phase_index(self) -> float:
        """Ratio of c to the speed :meth:`path_shift` refers its two-way changes to (1 here).

        The refractive index of the wave medium: a Michelson fringe count c (t_1 - t_2)/lambda
        (C8, lambda the vacuum wavelength) is this factor times the count computed with that
        speed (:meth:`fringe.experiment.apparatus.Michelson.combine`). Resonator frequencies do
        not depend on it.
        """
        return 1.0

    def path_shift(self, params: Mapping[str, float], directions_lab: NDArray,
                   state: FrameState) -> NDArray:
        """Two-way fractional speed change along unit lab directions (n, p, 3) -> (n, p)."""
        t, s = self.combined_response(params, state)
        return np.einsum("npi,nij,npj->np", directions_lab, t, directions_lab) + s[:, None]

    def to_dict(self) -> dict:
        """Configuration as plain JSON types (for provenance)."""
        return {"name": self.name}
