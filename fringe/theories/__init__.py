"""Anisotropy theories, one module each, behind one registry.

======== ===================================== =========================================
name     class                                 coefficients
======== ===================================== =========================================
sme      :class:`~.sme.SmePhoton`              ke_XY ke_XZ ke_YZ ke_XXmYY ke_ZZ ko_XY ko_XZ
                                               ko_YZ ktr
rms      :class:`~.rms.RobertsonMansouriSexl`  rms_mm rms_kt
medium   :class:`~.medium.ClassicalMedium`     sun_vX_kms sun_vY_kms sun_vZ_kms (km/s)
clock    :class:`~.clock.DirectionalClock`     cq_XY cq_XZ cq_YZ cq_XXmYY cq_ZZ
======== ===================================== =========================================
"""

from __future__ import annotations

from fringe.errors import ConfigError, unknown_name
from fringe.theories.base import Theory
from fringe.theories.clock import CLOCK_NAMES, DirectionalClock
from fringe.theories.medium import MEDIUM_NAMES, ClassicalMedium, cmb_rest_medium
from fringe.theories.rms import RMS_NAMES, RobertsonMansouriSexl
from fringe.theories.sme import KE_NAMES, KO_NAMES, SME_NAMES, SmePhoton

THEORIES: dict[str, type[Theory]] = {
    cls.name: cls for cls in (SmePhoton, RobertsonMansouriSexl, ClassicalMedium, DirectionalClock)
}

#: Every coefficient name fringe knows, with its theory.
ALL_COEFFICIENTS: dict[str, str] = {n: cls.name for cls in THEORIES.values()
                                    for n in cls.parameter_names}


def make_theory(name: str, **options) -> Theory:
    """Build a registered theory by name, with its configuration options."""
    try:
        cls = THEORIES[name]
    except KeyError:
        raise ConfigError("name: " + unknown_name(str(name), THEORIES, "theory",
                                                  ordered=True)) from None
    try:
        return cls(**options)
    except TypeError as exc:
        raise ConfigError(f"theory.{name}: invalid options {sorted(options)} ({exc})") from None


__all__ = ["THEORIES", "ALL_COEFFICIENTS", "make_theory", "Theory", "SmePhoton",
           "RobertsonMansouriSexl", "ClassicalMedium", "DirectionalClock", "cmb_rest_medium",
           "KE_NAMES", "KO_NAMES", "SME_NAMES", "RMS_NAMES", "MEDIUM_NAMES", "CLOCK_NAMES"]
