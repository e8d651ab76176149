"""Every sign, frame and normalisation convention fringe uses, defined once.

The IDs C1-C14 are explained in ``docs/conventions.md``; their sources are in
``docs/references.md`` ([R-C1] ... [R-C14]).

* C2 coefficient frame: the Sun-centred celestial equatorial frame (SCCEF), X to the vernal
  equinox, Z along the Earth's rotation axis, Y = Z x X (ICRS axes in practice).
* C4 lab frame: x = local south, y = local east, z = local up; colatitude chi = 90 deg - geodetic
  latitude.
* C5 sidereal angle: phi = ERA(UT1) + east longitude (mod 2 pi); phi = 0 when the SCCEF X axis lies
  on the local meridian.
* C6 turntable angle: theta = azimuth of path 1 counted from south toward east (counter-clockwise
  seen from above); path 1 direction (cos theta, sin theta, 0) in lab components.
* C7 file azimuth: A counted from north toward east (compass sense); theta = pi - A.
* C8 beat sign: S = (nu_1 - nu_2)/nu, path 1 minus path 2; path 2 at azimuth A_1 + 90 deg.
  Michelson fringe count: Delta N = c (t_1 - t_2) / lambda.
* C9 normalisation: the reference for harmonic amplitudes is the two-path signal S; each
  apparatus's harmonics are those of its own observable, h = f h_S for each pair h = C - i B
  (``Apparatus.two_path_factor``).
* C10 Fourier model: S = B sin 2 theta + C cos 2 theta, C = C0 + Cs1 sin phi + Cc1 cos phi +
  Cs2 sin 2 phi + Cc2 cos 2 phi, and B likewise.
* C11 kappa_o+ as a vector: w = (ko_YZ, -ko_XZ, ko_XY).
* C13 RMS: rms_mm = delta - beta + 1/2, rms_kt = beta - alpha - 1 (Mansouri-Sexl alpha, beta,
  delta).
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike, NDArray

#: Names of the C10 harmonic coefficients, in table order.
HARMONIC_NAMES = ("C0", "Cs1", "Cc1", "Cs2", "Cc2", "B0", "Bs1", "Bc1", "Bs2", "Bc2")

#: Default path separation, degrees: azimuth of path 2 = azimuth of path 1 + this (C8).
DEFAULT_PATH_SEPARATION_DEG = 90.0


def theta_from_azimuth(azimuth_rad: ArrayLike) -> NDArray[np.float64]:
    """Turntable angle theta (C6) from a file azimuth A (C7): theta = pi - A, radians."""
    return np.pi - np.asarray(azimuth_rad, dtype=float)


def azimuth_from_theta(theta_rad: ArrayLike) -> NDArray[np.float64]:
    """File azimuth A (C7, north toward east) from the turntable angle theta (C6), radians."""
    return np.pi - np.asarray(theta_rad, dtype=float)


def colatitude_rad(latitude_deg: float) -> float:
    """Colatitude chi = 90 deg - geodetic latitude (C4), radians; > pi/2 in the south."""
    return np.radians(90.0 - float(latitude_deg))


def horizontal_direction_lab(azimuth_rad: ArrayLike) -> NDArray[np.float64]:
    """Lab unit vector (south, east, up) of a horizontal path at file azimuth A.

    With theta = pi - A (C7) the direction is (cos theta, sin theta, 0) = (-cos A, sin A, 0).

    Parameters
    ----------
    azimuth_rad : array_like, shape (n,)
        Azimuth from north toward east, radians.

    Returns
    -------
    ndarray, shape (n, 3)
    """
    a = np.asarray(azimuth_rad, dtype=float)
    return np.stack([-np.cos(a), np.sin(a), np.zeros_like(a)], axis=-1)


def kappa_o_vector(ko_xy: float, ko_xz: float, ko_yz: float) -> NDArray[np.float64]:
    """The vector w of C11: w = (ko_YZ, -ko_XZ, ko_XY)."""
    return np.array([ko_yz, -ko_xz, ko_xy], dtype=float)


def traceless_from_components(xy, xz, yz, xx_minus_yy, zz) -> NDArray[np.float64]:
    """Symmetric traceless 3x3 tensor from the five named components used in coefficient names.

    XX = (XXmYY - ZZ)/2 and YY = -(XXmYY + ZZ)/2, so that XX + YY + ZZ = 0 and XX - YY = XXmYY.
    Works element-wise on arrays (trailing axes (3, 3) are appended).
    """
    xy, xz, yz, d, zz = np.broadcast_arrays(*(np.asarray(v, dtype=float)
                                              for v in (xy, xz, yz, xx_minus_yy, zz)))
    xx = 0.5 * (d - zz)
    yy = -0.5 * (d + zz)
    return np.stack([np.stack([xx, xy, xz], -1),
                     np.stack([xy, yy, yz], -1),
                     np.stack([xz, yz, zz], -1)], -2)


def components_from_traceless(tensor: ArrayLike) -> dict[str, NDArray[np.float64]]:
    """Inverse of :func:`traceless_from_components`: the five named components of a tensor."""
    t = np.asarray(tensor, dtype=float)
    return {"XY": t[..., 0, 1], "XZ": t[..., 0, 2], "YZ": t[..., 1, 2],
            "XXmYY": t[..., 0, 0] - t[..., 1, 1], "ZZ": t[..., 2, 2]}
