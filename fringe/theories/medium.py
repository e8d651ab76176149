"""Classical medium: waves of speed w in a medium through which the lab moves (nonlinear).

For a round trip of length L at angle psi to the lab's velocity u through the medium
(b = |u|/w), the exact Galilean travel time is (docs/references.md [R-medium-vacuum];
Michelson & Morley 1887)

    t(psi) = (2L/w) sqrt(1 - b^2 sin^2 psi) / (1 - b^2),

so the two-way fractional speed change is delta = (1 - b^2)/sqrt(1 - b^2 + (n.u/w)^2) - 1,
evaluated with log1p/expm1 so that delta ~ 1e-8 keeps full precision. To O(b^2) this is RMS with
rms_mm = 1/2, rms_kt = -1.

Coefficients: ``sun_vX_kms``, ``sun_vY_kms``, ``sun_vZ_kms``: the Sun's velocity through the
medium, SCCEF axes, km/s. The lab velocity through the medium is that plus the Earth's orbital and
rotation velocity. A medium at rest in the CMB frame has sun_v = 369.82 km/s toward the CMB
dipole (:func:`cmb_rest_medium`).
"""

from __future__ import annotations

from typing import ClassVar

import numpy as np

from fringe.constants import C_M_S, sun_cmb_beta
from fringe.errors import ConfigError, check_finite_number
from fringe.theories.base import Theory

MEDIUM_NAMES = ("sun_vX_kms", "sun_vY_kms", "sun_vZ_kms")


def cmb_rest_medium() -> dict[str, float]:
    """Coefficient values of a medium at rest in the CMB frame, km/s."""
    v = sun_cmb_beta() * C_M_S / 1e3
    return dict(zip(MEDIUM_NAMES, (float(x) for x in v)))


class ClassicalMedium(Theory):
    """Stationary medium (ether) with waves of speed ``wave_speed_m_s`` (default c)."""

    name: ClassVar[str] = "medium"
    linear: ClassVar[bool] = False
    parameter_names: ClassVar[tuple[str, ...]] = MEDIUM_NAMES
    parameter_units: ClassVar[dict[str, str]] = {n: "km/s" for n in MEDIUM_NAMES}
    description: ClassVar[str] = "classical stationary medium, exact round-trip formula"
    rest_frames: ClassVar[dict] = {"cmb": cmb_rest_medium}

    SCENARIO_OPTIONS = ("wave_speed_m_s",)

    @classmethod
    def scenario_options(cls, spec, source):
        """``wave_speed_m_s``: the wave speed, m/s (default c)."""
        return {"wave_speed_m_s": spec.pop("wave_speed_m_s")} if "wave_speed_m_s" in spec else {}

    def __init__(self, wave_speed_m_s: float = C_M_S):
        self.wave_speed_m_s = check_finite_number(wave_speed_m_s, "theory.medium",
                                                  "wave_speed_m_s", positive=True)

    @property
    def phase_index(self) -> float:
        """Refractive index n = c / ``wave_speed_m_s`` (waves of speed c/n)."""
        return C_M_S / self.wave_speed_m_s

    def lab_velocity(self, params, state):
        """Lab velocity through the medium over the wave speed, lab axes, (n, 3)."""
        p = self.check_params(params)
        sun = np.array([p.get(n, 0.0) for n in MEDIUM_NAMES]) * 1e3 / self.wave_speed_m_s
        u = sun[None, :] + state.beta * (C_M_S / self.wave_speed_m_s)
        return np.einsum("nij,nj->ni", state.rotation, u)

    def path_shift(self, params, directions_lab, state):
        """Two-way fractional speed change along unit lab directions (n, p, 3) -> (n, p).

        Exact round trip through the medium: (1 - u^2) / sqrt(1 - u^2 + (u . d)^2) - 1, with u
        the lab velocity through the medium over the wave speed (:meth:`lab_velocity`) and d the
        direction (evaluated with expm1/log1p, accurate at small u).

        Parameters
        ----------
        params : mapping
            Coefficient values (``MEDIUM_NAMES``), km/s.
        directions_lab : (n, p, 3) ndarray
            Unit light-path directions, lab axes.
        state : FrameState
            Frame quantities at the n samples (:class:`fringe.frames.FrameState`).

        Returns
        -------
        (n, p) ndarray
            Fractional change of the two-way speed (dimensionless).

        Raises
        ------
        ConfigError
            If the lab speed through the medium reaches the wave speed (no round trip exists).
        """
        u = self.lab_velocity(params, state)
        b2 = np.einsum("ni,ni->n", u, u)
        if np.any(b2 >= 1.0):
            raise ConfigError("theory.medium: lab speed through the medium reaches the wave "
                              "speed (no round trip exists)")
        p = np.einsum("npi,ni->np", directions_lab, u)
        return np.expm1(np.log1p(-b2)[:, None] - 0.5 * np.log1p(p * p - b2[:, None]))

    def response(self, state, names=None):
        """Not available: the medium theory is nonlinear, so this raises :class:`ConfigError`.

        Use :meth:`path_shift` (straight light paths: cavity or Michelson) instead.
        """
        raise ConfigError("theory 'medium' is nonlinear: it has no linear response basis; "
                          "use straight light paths (cavity or Michelson)")

    def to_dict(self):
        """Configuration as plain JSON types: the name and ``wave_speed_m_s`` (m/s)."""
        return {"name": self.name, "wave_speed_m_s": self.wave_speed_m_s}
