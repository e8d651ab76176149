"""Robertson-Mansouri-Sexl test theory: rms_mm = delta - beta + 1/2, rms_kt = beta - alpha - 1.

Two-way speed of light along a direction at angle psi to the lab's velocity v relative to the
preferred frame, to O(v^2/c^2) (docs/references.md [R-RMS-two-way]):

    c_2(psi)/c = 1 + rms_kt v^2/c^2 + rms_mm (v^2/c^2) sin^2 psi.

In the response form (T, s) of :mod:`fringe.theories.base`: for rms_mm, T = -(v v - v^2/3) and
s = (2/3) v^2; for rms_kt, T = 0 and s = v^2 (v in units of c, lab axes). The lab velocity is
v = v_pf (the Sun's velocity relative to the preferred frame; default the CMB dipole, Planck
2018) + beta (orbit + rotation), added as 3-vectors (Galilean; exact boosts differ at ~v^2
relative, docs/references.md [R-RMS-SME]).

References
----------
Robertson, Rev. Mod. Phys. 21, 378 (1949); Mansouri & Sexl, Gen. Rel. Grav. 8 (1977) (both from
memory); Mattingly 2005, section "Robertson-Mansouri-Sexl framework".
"""

from __future__ import annotations

from typing import ClassVar

import numpy as np

from fringe.constants import C_M_S, sun_cmb_beta
from fringe.errors import ConfigError, check_finite_number
from fringe.theories.base import Theory

RMS_NAMES = ("rms_mm", "rms_kt")


class RobertsonMansouriSexl(Theory):
    """RMS test theory with a configurable preferred frame.

    Parameters
    ----------
    sun_velocity_beta : array_like, shape (3,), optional
        The Sun's velocity relative to the preferred frame over c, SCCEF axes. Default: the CMB
        dipole velocity (369.82 km/s toward RA 167.94 deg, Dec -6.94 deg).
    """

    name: ClassVar[str] = "rms"
    parameter_names: ClassVar[tuple[str, ...]] = RMS_NAMES
    parameter_units: ClassVar[dict[str, str]] = {n: "1" for n in RMS_NAMES}
    description: ClassVar[str] = "Robertson-Mansouri-Sexl test theory, preferred frame CMB"
    primary_names: ClassVar[tuple[str, ...]] = ("rms_mm",)

    def __init__(self, sun_velocity_beta=None):
        v = sun_cmb_beta() if sun_velocity_beta is None else np.asarray(sun_velocity_beta, float)
        if v.shape != (3,) or not np.all(np.isfinite(v)) or np.linalg.norm(v) >= 1.0:
            raise ConfigError("theory.rms: preferred-frame velocity: expected three finite "
                              f"components with |v| < c, got {sun_velocity_beta!r}")
        self.sun_velocity_beta = v

    SCENARIO_OPTIONS = ("preferred_frame",)

    @classmethod
    def scenario_options(cls, spec, source):
        """Constructor options from the ``[theory]`` table: ``preferred_frame``.

        ``preferred_frame`` is ``"cmb"`` (default) or the Sun's velocity relative to the
        preferred frame ``[vX, vY, vZ]`` in km/s (SCCEF axes).
        """
        options = {}
        frame = spec.pop("preferred_frame", "cmb")
        if frame == "cmb":
            pass
        elif isinstance(frame, list) and len(frame) == 3:
            options["sun_velocity_beta"] = np.array(
                [check_finite_number(v, source, "[theory] preferred_frame") for v in frame]
            ) * 1e3 / C_M_S
        else:
            raise ConfigError(f"{source}: [theory] preferred_frame: expected \"cmb\" or the "
                              f"Sun's velocity relative to it [vX, vY, vZ] in km/s, got {frame!r}")
        return options

    def default_free(self, span_days, apparatus):
        """Coefficients freed by default: rms_mm, plus rms_kt for an isotropic reference.

        rms_kt is added where the apparatus compares against an isotropic (atomic) reference,
        which keeps the isotropic shift it scales visible.
        """
        if getattr(apparatus, "isotropic_reference", False):
            return self.primary_names + ("rms_kt",)
        return self.primary_names

    def lab_velocity(self, state):
        """Lab velocity relative to the preferred frame over c, lab axes, (n, 3)."""
        v_sccef = self.sun_velocity_beta[None, :] + state.beta
        return np.einsum("nij,nj->ni", state.rotation, v_sccef)

    def response(self, state, names=None):
        """Per-coefficient lab response tensors T (n, k, 3, 3) and isotropic shifts s (n, k).

        With v the lab velocity relative to the preferred frame over c (:meth:`lab_velocity`):
        rms_mm gives T = -(v vᵀ - v^2 I / 3) and s = (2/3) v^2; rms_kt gives T = 0 and s = v^2.

        Parameters
        ----------
        state : FrameState
            Frame quantities at the n samples (:class:`fringe.frames.FrameState`).
        names : sequence of str, optional
            Coefficients to include, in this order (default: all ``parameter_names``).

        Returns
        -------
        t : (n, k, 3, 3) ndarray
            Lab response tensor of each coefficient (dimensionless).
        s : (n, k) ndarray
            Isotropic shift of each coefficient (dimensionless).
        """
        names = tuple(names) if names is not None else self.parameter_names
        self.check_params({n: 0.0 for n in names})
        v = self.lab_velocity(state)
        v2 = np.einsum("ni,ni->n", v, v)
        n = len(state)
        t = np.zeros((n, len(names), 3, 3))
        s = np.zeros((n, len(names)))
        for i, name in enumerate(names):
            if name == "rms_mm":
                t[:, i] = -(v[:, :, None] * v[:, None, :] - v2[:, None, None] * np.eye(3) / 3.0)
                s[:, i] = (2.0 / 3.0) * v2
            else:
                s[:, i] = v2
        return t, s

    def to_dict(self):
        """Configuration as plain JSON types: the name and ``sun_velocity_beta``.

        ``sun_velocity_beta`` is the Sun's velocity relative to the preferred frame over c
        (dimensionless), SCCEF axes, as a list of three floats.
        """
        return {"name": self.name, "sun_velocity_beta": self.sun_velocity_beta.tolist()}
