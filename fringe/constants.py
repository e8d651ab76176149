"""Physical and astronomical constants, each with its source.

Values are SI unless the name says otherwise. Angles in radians unless the name ends in ``_deg``.
The status labels are those of docs/references.md [R-labels]: "source" (a document or reference
library), "derived" (arithmetic on other entries) or "from memory" (standard, not checked
against the document; verify before citing).
"""

from __future__ import annotations

import math

import numpy as np

#: Speed of light in vacuum, m/s. Exact (SI definition).
C_M_S = 299_792_458.0

#: Astronomical unit, m. Exact (IAU 2012 Resolution B2).
AU_M = 149_597_870_700.0

#: Seconds per day (of 86 400 SI seconds), s.
DAY_S = 86_400.0

#: ERA rate, cycles per UT1 day. Source: IERS Conventions 2003 ch. 5 eq. 14; SOFA/ERFA era00.
ERA_RATE_CYCLES_PER_DAY = 1.00273781191135448

#: Earth's inertial rotation rate (the ERA rate), rad/s. Derived from ERA_RATE_CYCLES_PER_DAY.
OMEGA_EARTH_RAD_S = 2.0 * math.pi * ERA_RATE_CYCLES_PER_DAY / DAY_S

#: Stellar day (period of ERA), s. Derived: 86 400 / ERA_RATE_CYCLES_PER_DAY.
STELLAR_DAY_S = DAY_S / ERA_RATE_CYCLES_PER_DAY

#: Sidereal year, days. From memory (verify before citing); used only for the orbital phase.
SIDEREAL_YEAR_DAYS = 365.25636

#: Orbital angular rate Omega_earth = 2 pi / sidereal year, rad/s. Derived.
OMEGA_ORBIT_RAD_S = 2.0 * math.pi / (SIDEREAL_YEAR_DAYS * DAY_S)

#: Origin of the orbital phase (convention C3): 2000-03-20 07:35 UT as a Julian date (UT).
#: The instant is from memory (07:26 UT also circulates); it only sets the phase of the
#: analytic tables, never the fit, which uses the ephemeris velocity.
ORBIT_ORIGIN_JD = 2451623.5 + (7 * 3600 + 35 * 60) / DAY_S

#: Mean obliquity of the ecliptic at J2000 (IAU 2006), rad. Source: Hilton et al. 2006; ERFA obl06.
OBLIQUITY_J2000_RAD = math.radians(84381.406 / 3600.0)

#: Mean orbital speed of the Earth, m/s. Source: pyerfa epv00 (2026 mean 29.782 km/s).
EARTH_ORBITAL_SPEED_M_S = 29_782.0

#: WGS-84 equatorial radius, m. From memory (verify before citing); the site geometry itself
#: comes from erfa.gd2gc with the WGS-84 ellipsoid.
EARTH_EQUATORIAL_RADIUS_M = 6_378_137.0

#: Planck 2018 CMB dipole direction, Galactic longitude and latitude, degrees.
#: Source: Planck Collaboration I (2020), A&A 641, A1, arXiv:1807.06205.
CMB_DIPOLE_GALACTIC_L_DEG = 264.021
CMB_DIPOLE_GALACTIC_B_DEG = 48.253

#: Speed of the Sun relative to the CMB rest frame, m/s. From memory (verify before citing);
#: consistent with c * 3.3621 mK / 2.7255 K = 369.81 km/s (PDG CMB review; Fixsen 2009).
SUN_CMB_SPEED_M_S = 369_820.0


def cmb_dipole_unit_vector() -> np.ndarray:
    """Unit vector of the Sun's motion relative to the CMB, SCCEF (ICRS) axes.

    Converted from the Planck 2018 Galactic direction with ERFA's ``g2icrs``.

    Returns
    -------
    ndarray, shape (3,)
        Unit vector; approximately (-0.970762, 0.207371, -0.120904).
    """
    import erfa

    ra, dec = erfa.g2icrs(math.radians(CMB_DIPOLE_GALACTIC_L_DEG),
                          math.radians(CMB_DIPOLE_GALACTIC_B_DEG))
    return np.array([math.cos(dec) * math.cos(ra), math.cos(dec) * math.sin(ra), math.sin(dec)])


def sun_cmb_beta() -> np.ndarray:
    """Velocity of the Sun relative to the CMB rest frame over c, SCCEF axes (shape (3,))."""
    return (SUN_CMB_SPEED_M_S / C_M_S) * cmb_dipole_unit_vector()
