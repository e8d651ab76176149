"""Time scales, sidereal angle, orbital phase, lab velocity and the SCCEF -> lab rotation.

Which function for which job:

* :class:`Epoch` parses the UTC epoch of a record; sample times are elapsed SI seconds ``t_s``
  since that epoch (so a leap second inside a run is simply one more elapsed second).
* :func:`sidereal_angle_rad` gives phi = ERA(UT1) + east longitude (convention C5).
* :func:`orbital_phase_rad` gives Omega_earth T from the 2000 March equinox (C3).
* :func:`earth_velocity_beta` gives the Earth's heliocentric velocity / c in SCCEF axes, from
  ERFA ``epv00`` on a coarse grid, interpolated with a cubic spline.
* :func:`celestial_to_intermediate` gives the IAU 2006/2000A celestial-to-intermediate matrix
  Q(t) (precession-nutation and frame bias, GCRS -> CIRS), from ERFA ``c2i06a`` on a coarse grid,
  interpolated with a cubic spline.
* :func:`rotation_velocity_beta` gives the site's Earth-rotation velocity / c (C12).
* :func:`rotation_sccef_to_lab` gives R such that v_lab = R v_SCCEF: R = R_z(chi, phi) Q(t), the
  lab axes about the celestial intermediate pole (docs/references.md [R-lab-R],
  [R-time-earth-orientation]).
* :func:`frame_state` bundles phi, chi, Q and beta for a set of samples; it is what theories use
  (with its rotation R and lab transform diag(1, R) Lambda(beta), :func:`boost_matrix`, kept
  once computed).

Time model: TAI(sample) = TAI(epoch) + t_s. UT1 is TAI + (UT1 - TAI), with UT1 - TAI held at
its epoch value dUT1 - (TAI - UTC)(epoch); so phi stays continuous across a leap second. The
neglected drift of UT1 - TAI (a few ms per day) moves phi by ~1e-5 rad per month; give the
epoch's dUT1 (default 0, an error of at most 0.9 s = 6.6e-5 rad) for better phase.

Earth orientation: SCCEF (GCRS/ICRS axes) -> lab is R_z(chi, phi) Q(t), with Q the IAU 2006/2000A
celestial-to-intermediate matrix at TT and phi = ERA + east longitude the angle about the
celestial intermediate pole (CIP). This is ERFA's celestial-to-terrestrial matrix ``c2t06a``
followed by the geodetic (south, east, up) axes, except that polar motion (the CIP against the
terrestrial frame, |x_p, y_p| <= 0.6 arcsec = 2.9e-6 rad since 1990) and the TIO locator s'
(< 1e-10 rad) are neglected (docs/references.md [R-time-earth-orientation]).
"""

from __future__ import annotations

import math
import re
import threading
import warnings
from contextlib import contextmanager
from dataclasses import dataclass, field
from functools import cached_property, lru_cache
from typing import NamedTuple

import erfa
import numpy as np
from numpy.typing import ArrayLike, NDArray

from fringe.constants import (
    AU_M,
    C_M_S,
    DAY_S,
    OMEGA_EARTH_RAD_S,
    OMEGA_ORBIT_RAD_S,
    ORBIT_ORIGIN_JD,
)
from fringe.errors import ConfigError, TimeScaleWarning
from fringe.site import Site

#: Seconds TT - TAI, exact by definition (IAU 1991).
TT_MINUS_TAI_S = 32.184

#: Grid step for the ephemeris velocity, s. The cubic spline on a 1 h grid agrees with direct
#: epv00 to <= 3e-9 m/s (project measurement with pyerfa 2.0.1.5, docs/references.md
#: [R-astro-A10]).
EPHEMERIS_GRID_S = 3600.0

#: Grid step for the celestial-to-intermediate matrix, s. The cubic spline on a 12 h grid agrees
#: with direct c2i06a to <= 1.2e-11 per matrix element, for whole years and for 9 h chunks,
#: 1990-2040 (project measurement with pyerfa 2.0.1.5, docs/references.md [R-time-T15]).
C2I_GRID_S = 43_200.0

_ISO_RE = re.compile(
    r"^(\d{4})-(\d{2})-(\d{2})[T ](\d{2}):(\d{2}):(\d{2}(?:\.\d+)?)(Z|\+00:00|UTC)?$")


#: How many warnings the frame functions have issued in this process (one counter, never reset;
#: a status counts whether or not this thread shows it, :func:`time_cautions_recorded`): a cache
#: of frame-derived values (:mod:`fringe.experiment.memo`) keeps only results whose computation
#: issued none, so that every later call warns again. Read by :func:`warnings_issued`.
_WARNINGS_ISSUED = [0]


def warnings_issued() -> int:
    """Number of warnings the frame functions (ERFA's time scales, ephemeris) have issued."""
    return _WARNINGS_ISSUED[0]


_RECORDING = threading.local()


@contextmanager
def time_cautions_recorded():
    """Within: this thread's frames do not warn of the time scales' reliability.

    For a caller that records those cautions itself (:func:`time_span_cautions`, as the fit
    does): the flag is per thread, so a fit in one thread neither silences nor sees the
    warnings of another (Python's ``warnings.catch_warnings`` is one state per process).
    """
    before = getattr(_RECORDING, "on", False)
    _RECORDING.on = True
    try:
        yield
    finally:
        _RECORDING.on = before


def _warn_time_scale(message: str, stacklevel: int) -> None:
    """A TimeScaleWarning, unless this thread records the cautions itself."""
    if not getattr(_RECORDING, "on", False):
        warnings.warn(message, TimeScaleWarning, stacklevel=stacklevel + 1)


def _erfa_status(func, *args):
    """``func``'s outputs through pyerfa's ufunc, and its status codes.

    pyerfa's wrapper ``erfa.X`` turns a warning status into a Python warning (one warnings
    state per process, shared by threads); its ufunc ``erfa.ufunc.X`` returns the status
    itself. An error status (negative) raises pyerfa's ErfaError, as the wrapper would.
    """
    name = func.__name__
    *out, status = getattr(erfa.ufunc, name)(*args)
    status = np.asarray(status)
    if np.any(status < 0):
        erfa.core.check_errwarn(status, name)        # raises ErfaError, pyerfa's message
    return (out[0] if len(out) == 1 else tuple(out)), status


def _status_text(name: str, status: NDArray) -> str:
    """The wording of pyerfa's ErfaWarning for the warning statuses of ``name``."""
    codes, counts = np.unique(status[status > 0], return_counts=True)
    texts = erfa.core.STATUS_CODES[name]
    return f'ERFA function "{name}" yielded ' + ", ".join(
        f'{c} of "{texts.get(int(k), f"Return code {int(k)}")}"' for k, c in zip(codes, counts))


def _erfa_call(func, *args):
    """Call an ERFA time function, turning ERFA's 'dubious year' status into our warning."""
    out, status = _erfa_status(func, *args)
    if np.any(status > 0):
        _WARNINGS_ISSUED[0] += 1
        text = _status_text(func.__name__, np.atleast_1d(status))
        if "dubious" in text.lower():
            _warn_time_scale("leap-second table is not authoritative for these dates (ERFA: "
                             f"{text}); UTC conversion may be off by whole seconds (before "
                             "1960 UTC is taken as UT: TAI - UTC = 0, no leap seconds)", 3)
        else:
            warnings.warn(text, erfa.ErfaWarning, stacklevel=3)
    return out


#: First year of UTC (and of ERFA's leap-second table); earlier times are taken as UT.
UTC_FIRST_YEAR = 1960


class TimeCaution(NamedTuple):
    """A reason the record's times are less reliable than usual (:func:`time_span_cautions`).

    ``code`` is stable (``utc-before-1960``, ``leap-table-range``, ``ephemeris-range``),
    ``sentence`` is for a person, ``values`` holds its numbers (years, seconds).
    """

    code: str
    sentence: str
    values: dict


def _flagged(func, *args) -> bool:
    """True when ERFA returns a warning status (pyerfa's ErfaWarning) for these arguments."""
    return bool(np.any(_erfa_status(func, *args)[1] > 0))


@lru_cache(maxsize=1)
def leap_table_last_year() -> int:
    """Last year ERFA's ``dat`` converts without its 'dubious year' status.

    The table's release year + 5 by ERFA's rule: 2028 with pyerfa 2.0.1.5 (docs/references.md
    [R-lib-erfa-leap]).
    """
    year = 2000
    while year < 2500 and not _flagged(erfa.dat, year + 1, 1, 1, 0.0):
        year += 1
    return year


def _calendar(epoch: Epoch, t_s: float) -> tuple[int, int, int]:
    """UTC calendar date of ``t_s`` after the epoch (leap seconds ignored: whole days only)."""
    u1, u2 = epoch.utc_jd
    try:
        y, mo, d, _ = erfa.jd2cal(u1, u2 + float(t_s) / DAY_S)
    except erfa.ErfaError:
        # beyond ERFA's calendar (JD below -68569.5 or above 1e9): only the year matters to
        # the cautions, from 365.25-day years counted from J2000 (JD 2451545.0)
        jd = u1 + u2 + float(t_s) / DAY_S
        return int(math.floor(2000.0 + (jd - 2451545.0) / 365.25)), 1, 1
    return int(y), int(mo), int(d)


def time_span_cautions(epoch: Epoch, first_s: float, last_s: float) -> list[TimeCaution]:
    """The cautions for a record from ``first_s`` to ``last_s`` seconds after ``epoch``.

    * ``utc-before-1960``: the record starts before 1960, where UTC did not exist: its times
      are taken as UT (TAI - UTC = 0, no leap seconds; what ERFA's ``dat`` returns there), so
      phi = ERA(UT + dUT1) is right for UT-stamped data and the ephemeris uses TT = UT +
      32.184 s (off by 32.184 s - Delta T, a velocity error below 1e-5 of the orbit's);
    * ``leap-table-range``: the record reaches past :func:`leap_table_last_year`: TAI - UTC is
      held at the table's last value, so a later leap second is missing;
    * ``ephemeris-range``: an end of the record is outside 1900-2100, where ERFA's ``epv00``
      ephemeris is valid (its warning status).

    The checks use the two ends of the record (each range is one-sided).
    """
    out = []
    first, last = _calendar(epoch, first_s), _calendar(epoch, last_s)
    if first[0] < UTC_FIRST_YEAR:
        jump = float(_erfa_quiet(erfa.dat, UTC_FIRST_YEAR, 1, 1, 0.0))
        out.append(TimeCaution(
            "utc-before-1960",
            f"the record starts on {first[0]:04d}-{first[1]:02d}-{first[2]:02d}, before 1960 "
            "when UTC began: its times are taken as UT (TAI - UTC = 0, no leap seconds); the "
            "sidereal angle is right for UT-stamped data, elapsed seconds are UT seconds"
            + (f", and at 1960-01-01 TAI - UTC steps to {jump:.3f} s" if last[0]
               >= UTC_FIRST_YEAR else ""),
            {"first_year": float(first[0]), "tai_minus_utc_s": 0.0}))
    limit = leap_table_last_year()
    if last[0] > limit:
        out.append(TimeCaution(
            "leap-table-range",
            f"the record reaches {last[0]:04d}-{last[1]:02d}-{last[2]:02d}, after {limit}, the "
            "last year the leap-second table is reliable for (ERFA's dubious-year rule): TAI - "
            "UTC is held at its last value, so a leap second announced later is missing from "
            "UTC-stamped times (the sidereal angle follows the given UT1 - UTC)",
            {"last_year": float(last[0]), "table_last_year": float(limit)}))
    ends = [(y, _tt_flagged(epoch, t)) for y, t in ((first[0], first_s), (last[0], last_s))]
    bad = [y for y, flagged in ends if flagged]
    if bad:
        out.append(TimeCaution(
            "ephemeris-range",
            f"the record reaches the year {bad[0]}, outside 1900-2100 where ERFA's epv00 "
            "ephemeris is valid: the Earth's orbital velocity is less accurate there",
            {"year": float(bad[0])}))
    return out


def _erfa_quiet(func, *args):
    return _erfa_status(func, *args)[0]


def _tt_flagged(epoch: Epoch, t_s: float) -> bool:
    with time_cautions_recorded():
        a, b = epoch.tt_jd(np.array([float(t_s)]))
    return _flagged(erfa.epv00, a, b)


@dataclass(frozen=True)
class Epoch:
    """The UTC instant that sample times are counted from.

    Parameters
    ----------
    utc : str
        ISO 8601 UTC, e.g. ``"2027-02-03T00:00:00Z"`` (fractional seconds and a leap second
        ``23:59:60`` accepted).
    dut1_s : float
        UT1 - UTC at the epoch, s (from IERS Bulletin A); 0 if unknown.
    """

    utc: str
    dut1_s: float = 0.0

    def __post_init__(self):
        if not isinstance(self.utc, str) or not _ISO_RE.match(self.utc.strip()):
            raise ConfigError(f"epoch_utc: expected ISO 8601 UTC like '2027-02-03T00:00:00Z', "
                              f"got {self.utc!r}")
        if not (isinstance(self.dut1_s, (int, float)) and abs(self.dut1_s) < 1.0):
            raise ConfigError(f"dut1_s: expected |UT1 - UTC| < 1 s, got {self.dut1_s!r}")

    @cached_property
    def utc_jd(self) -> tuple[float, float]:
        """Two-part Julian date (UTC, ERFA quasi-JD convention) of the epoch."""
        y, mo, d, h, mi, s, _ = _ISO_RE.match(self.utc.strip()).groups()
        try:
            jd1, jd2 = _erfa_call(erfa.dtf2d, "UTC", int(y), int(mo), int(d), int(h),
                                  int(mi), float(s))
        except erfa.ErfaError as exc:
            # ERFA says e.g. 'function "dtf2d" yielded 1 of "bad month"': keep the reason only
            found = re.search(r'of "([^"]+)"', str(exc))
            reason = found.group(1) if found else "not a calendar date and time"
            raise ConfigError(f"epoch_utc: not a valid UTC instant: {self.utc!r} "
                              f"({reason})") from None
        return float(jd1), float(jd2)

    @cached_property
    def tai_jd(self) -> tuple[float, float]:
        """Two-part Julian date (TAI) of the epoch."""
        a, b = _erfa_call(erfa.utctai, *self.utc_jd)
        return float(a), float(b)

    @cached_property
    def tai_minus_utc_s(self) -> float:
        """TAI - UTC at the epoch, s (from ERFA's leap-second table, ``erfa.dat``)."""
        # Fix (found by tests/ground/test_frames.py): this was (TAI JD - UTC quasi-JD) x 86 400,
        # which is wrong on a day that ends with a leap second (ERFA's quasi-JD day then lasts
        # 86 401 s), by up to 1 s at the end of that day; UT1 and phi were off by up to 7.3e-5 rad.
        _ = self.utc_jd  # validates the instant
        y, mo, d, h, mi, s, _ = _ISO_RE.match(self.utc.strip()).groups()
        fd = min((int(h) * 3600 + int(mi) * 60 + float(s)) / DAY_S, 1.0 - 1e-12)  # 23:59:60.x
        return float(_erfa_call(erfa.dat, int(y), int(mo), int(d), fd))

    @property
    def ut1_minus_tai_s(self) -> float:
        """UT1 - TAI at the epoch, s; held constant over the record (module docstring)."""
        return self.dut1_s - self.tai_minus_utc_s

    def tt_jd(self, t_s: ArrayLike) -> tuple[NDArray, NDArray]:
        """Two-part TT Julian date of samples ``t_s`` (elapsed SI seconds since the epoch)."""
        t1, t2 = self.tai_jd
        return (np.full(np.shape(t_s), t1),
                t2 + (np.asarray(t_s, dtype=float) + TT_MINUS_TAI_S) / DAY_S)

    def ut1_jd(self, t_s: ArrayLike) -> tuple[NDArray, NDArray]:
        """Two-part UT1 Julian date of samples ``t_s``."""
        t1, t2 = self.tai_jd
        return (np.full(np.shape(t_s), t1),
                t2 + (np.asarray(t_s, dtype=float) + self.ut1_minus_tai_s) / DAY_S)

    def utc_iso(self, t_s: float) -> str:
        """ISO 8601 UTC label of the instant ``t_s`` seconds after the epoch (leap-second aware)."""
        t1, t2 = self.tai_jd
        u1, u2 = _erfa_call(erfa.taiutc, t1, t2 + float(t_s) / DAY_S)
        y, mo, d, hmsf = _erfa_call(erfa.d2dtf, "UTC", 3, u1, u2)
        return (f"{int(y):04d}-{int(mo):02d}-{int(d):02d}T{hmsf[0]:02d}:{hmsf[1]:02d}:"
                f"{hmsf[2]:02d}.{hmsf[3]:03d}Z")


def era_rad(epoch: Epoch, t_s: ArrayLike) -> NDArray[np.float64]:
    """Earth Rotation Angle (IAU 2000, ERFA ``era00``) at samples ``t_s``, radians in [0, 2 pi).

    References
    ----------
    IERS Conventions 2003, ch. 5, eq. 14; Capitaine et al. 2000.
    """
    a, b = epoch.ut1_jd(t_s)
    return erfa.era00(a, b)


def sidereal_angle_rad(epoch: Epoch, t_s: ArrayLike, east_longitude_rad: float) -> NDArray:
    """Sidereal angle phi = ERA(UT1) + east longitude, mod 2 pi (convention C5), radians."""
    return np.mod(era_rad(epoch, t_s) + east_longitude_rad, 2.0 * np.pi)


def orbital_phase_rad(epoch: Epoch, t_s: ArrayLike) -> NDArray[np.float64]:
    """Orbital phase Omega_earth T, T counted from 2000-03-20 07:35 UT (C3), radians (unwrapped).

    Uses UT1 days; the difference from TT is ~1e-5 rad (docs/references.md
    [R-time-orbital-phase]).
    """
    a, b = epoch.ut1_jd(t_s)
    days = (a - ORBIT_ORIGIN_JD) + b
    return OMEGA_ORBIT_RAD_S * DAY_S * days


def earth_velocity_beta(epoch: Epoch, t_s: ArrayLike,
                        grid_s: float | None = EPHEMERIS_GRID_S) -> NDArray[np.float64]:
    """Earth's heliocentric velocity over c in SCCEF (BCRS ~ ICRS) axes, shape (n, 3).

    ERFA ``epv00`` (about 40 us a call) is evaluated on a grid of step ``grid_s`` spanning the
    samples and interpolated with a cubic spline; ``grid_s=None`` evaluates it at the samples
    themselves (for a few instants: what the spline gives at its grid nodes, without the seven
    extra nodes). TT is used for TDB (difference < 2 ms).
    """
    from scipy.interpolate import CubicSpline

    t = np.asarray(t_s, dtype=float)
    if t.size == 0:
        return np.zeros((0, 3))
    grid = t if grid_s is None else _spline_grid(t, grid_s)
    a, b = epoch.tt_jd(grid)
    (pvh, _), status = _erfa_status(erfa.epv00, a, b)
    if np.any(status > 0):          # outside 1900-2100 (time_span_cautions: ephemeris-range)
        _WARNINGS_ISSUED[0] += 1
        _warn_time_scale("ERFA epv00 is valid 1900-2100; the Earth's velocity outside that "
                         "span is less accurate", 2)
    v_grid = pvh["v"] * (AU_M / DAY_S / C_M_S)
    if grid_s is None:
        return v_grid
    return CubicSpline(grid, v_grid, axis=0)(t)


def _spline_grid(t: NDArray, grid_s: float) -> NDArray:
    """A regular grid of step ``grid_s`` covering ``t`` with three steps of margin each side."""
    lo, hi = float(np.min(t)), float(np.max(t))
    n_grid = max(int(math.ceil((hi - lo) / grid_s)) + 7, 8)
    return lo - 3 * grid_s + grid_s * np.arange(n_grid)


def celestial_to_intermediate(epoch: Epoch, t_s: ArrayLike,
                              grid_s: float | None = C2I_GRID_S) -> NDArray[np.float64]:
    """IAU 2006/2000A celestial-to-intermediate matrix Q(t) at samples ``t_s``, shape (n, 3, 3).

    Q takes GCRS (= SCCEF, ICRS axes) components to the celestial intermediate reference system
    (CIRS), whose Z axis is the celestial intermediate pole and whose X axis is the celestial
    intermediate origin, from which the Earth Rotation Angle is counted: it carries frame bias,
    precession and nutation. ERFA ``c2i06a`` (about 50 us a call) is evaluated at TT on a grid
    of step ``grid_s`` spanning the samples and its nine elements are interpolated with a cubic
    spline (error <= 1.2e-11 on the 12 h default grid, :data:`C2I_GRID_S`); ``grid_s=None``
    evaluates it at the samples themselves (for a few instants). Q - 1 is about
    9.7e-5 rad per year since J2000 (precession) plus up to 4.8e-5 rad of nutation (1990-2040).

    References
    ----------
    IERS Conventions (2010), IERS Technical Note 36, ch. 5 (the CIO-based transformation);
    SOFA/ERFA ``c2i06a`` (docs/references.md [R-time-earth-orientation]).
    """
    from scipy.interpolate import CubicSpline

    t = np.asarray(t_s, dtype=float)
    if t.size == 0:
        return np.zeros((0, 3, 3))
    if grid_s is None:
        return erfa.c2i06a(*epoch.tt_jd(t)).reshape(*t.shape, 3, 3)
    grid = _spline_grid(t, grid_s)
    q_grid = erfa.c2i06a(*epoch.tt_jd(grid)).reshape(-1, 9)
    return CubicSpline(grid, q_grid, axis=0)(t).reshape(*t.shape, 3, 3)


def rotation_velocity_beta(phi_rad: ArrayLike, axis_distance_m: float,
                           c2i: ArrayLike | None = None) -> NDArray[np.float64]:
    """Earth-rotation velocity of the site over c, SCCEF axes, shape (n, 3).

    beta_rot = beta_L Qᵀ (-sin phi, cos phi, 0), beta_L = omega_earth rho / c, i.e. along lab
    east. ``c2i`` is Q (:func:`celestial_to_intermediate`, (n, 3, 3) or (3, 3)); None means the
    identity (rotation about the SCCEF Z axis).
    """
    phi = np.asarray(phi_rad, dtype=float)
    beta_l = OMEGA_EARTH_RAD_S * axis_distance_m / C_M_S
    east = np.stack([-np.sin(phi), np.cos(phi), np.zeros_like(phi)], axis=-1)
    if c2i is not None:
        east = np.einsum("...ji,...j->...i", np.asarray(c2i, dtype=float), east)
    return beta_l * east


def rotation_sccef_to_lab(colatitude_rad: float, phi_rad: ArrayLike,
                          c2i: ArrayLike | None = None) -> NDArray[np.float64]:
    """Rotation matrix R (v_lab = R v_SCCEF), lab axes (south, east, up), shape (n, 3, 3).

    R = R_z Q. R_z has the rows local south, local east, zenith (Dec 90 deg - chi, RA phi) in the
    axes of Q's output (docs/references.md [R-lab-R]); Q = ``c2i`` is the celestial-to-
    intermediate matrix (:func:`celestial_to_intermediate`, (n, 3, 3) or (3, 3)). With
    ``c2i=None`` Q is the identity: the lab axes turn about the SCCEF Z axis (the closed forms'
    model, docs/references.md [R-time-earth-orientation]).
    """
    phi = np.asarray(phi_rad, dtype=float)
    c, s = np.cos(phi), np.sin(phi)
    cc, sc = math.cos(colatitude_rad), math.sin(colatitude_rad)
    if c2i is not None:
        # R_z Q row by row (the rows of Q combined; cheaper than a batched 3 x 3 product)
        q = np.asarray(c2i, dtype=float)
        c, s = c[..., None], s[..., None]
        toward = c * q[..., 0, :] + s * q[..., 1, :]          # meridian direction in the equator
        east = c * q[..., 1, :] - s * q[..., 0, :]
        pole = np.broadcast_to(q[..., 2, :], toward.shape)
        return np.stack([cc * toward - sc * pole, east, sc * toward + cc * pole], axis=-2)
    zero = np.zeros_like(phi)
    return np.stack([np.stack([cc * c, cc * s, np.full_like(phi, -sc)], -1),
                     np.stack([-s, c, zero], -1),
                     np.stack([sc * c, sc * s, np.full_like(phi, cc)], -1)], -2)


def boost_matrix(beta: NDArray) -> NDArray:
    """Observer Lorentz boost Lambda^mu_nu to a frame moving with velocity beta, (n, 4, 4).

    x'^0 = gamma (x^0 - beta . x),  x' = x + ((gamma - 1)/beta^2 (beta . x) - gamma x^0) beta.
    """
    beta = np.atleast_2d(beta)
    b2 = np.einsum("ni,ni->n", beta, beta)
    gamma = 1.0 / np.sqrt(1.0 - b2)
    # (gamma - 1)/b^2 = gamma^2/(gamma + 1), finite at b = 0
    f = gamma * gamma / (gamma + 1.0)
    lam = np.empty((beta.shape[0], 4, 4))
    lam[:, 0, 0] = gamma
    lam[:, 0, 1:] = -gamma[:, None] * beta
    lam[:, 1:, 0] = -gamma[:, None] * beta
    lam[:, 1:, 1:] = np.eye(3) + f[:, None, None] * beta[:, :, None] * beta[:, None, :]
    return lam


@dataclass(frozen=True)
class FrameState:
    """Frame quantities at a set of samples: what every theory needs.

    Parameters
    ----------
    phi_rad : ndarray, shape (n,)
        Sidereal angle (C5), radians.
    colatitude_rad : float
        Site colatitude chi (C4), radians.
    beta : ndarray, shape (n, 3)
        Lab velocity relative to the Sun over c, SCCEF axes (orbit + Earth rotation, C12).
    orbital_phase_rad : ndarray, shape (n,) or None
        Omega_earth T (C3), for tables and labels only.
    c2i : ndarray, shape (n, 3, 3) or (3, 3), or None
        Celestial-to-intermediate matrix Q (:func:`celestial_to_intermediate`), per sample or one
        for all samples (frozen at an instant); None means the identity, i.e. the lab axes turn
        about the SCCEF Z axis (closed forms and tests).
    """

    phi_rad: NDArray
    colatitude_rad: float
    beta: NDArray
    orbital_phase_rad: NDArray | None = None
    c2i: NDArray | None = None
    #: (source state, repetitions) of a state made by :meth:`tile` (its rotation and lab
    #: transform are the source's, repeated); None otherwise.
    tiled_from: tuple | None = field(default=None, repr=False, compare=False)

    @cached_property
    def rotation(self) -> NDArray:
        """R(t) = R_z(chi, phi) Q(t), SCCEF -> lab, shape (n, 3, 3)."""
        if self.tiled_from is not None:
            src, reps = self.tiled_from
            return np.tile(src.rotation, (reps, 1, 1))
        return rotation_sccef_to_lab(self.colatitude_rad, self.phi_rad, self.c2i)

    @cached_property
    def lab_transform(self) -> NDArray:
        """L = diag(1, R) Lambda(beta), SCCEF -> (observer boost) -> lab axes, (n, 4, 4).

        Read-only; the SME's exact lab transform (:func:`fringe.theories.sme.lab_transform`).
        """
        if self.tiled_from is not None:
            src, reps = self.tiled_from
            out = np.tile(src.lab_transform, (reps, 1, 1))
            out.flags.writeable = False
            return out
        lam = boost_matrix(self.beta)
        out = lam.copy()
        out[:, 1:, :] = np.einsum("nij,njk->nik", self.rotation, lam[:, 1:, :])
        out.flags.writeable = False
        return out

    def take(self, index) -> FrameState:
        """The state at samples ``index`` (a slice or an integer array; repeats allowed)."""
        c2i = self.c2i
        if c2i is not None and c2i.ndim == 3:
            c2i = c2i[index]
        phase = None if self.orbital_phase_rad is None else self.orbital_phase_rad[index]
        return FrameState(self.phi_rad[index], self.colatitude_rad, self.beta[index], phase, c2i)

    def tile(self, reps: int) -> FrameState:
        """The state repeated ``reps`` times (row i + j n is row i), as ``numpy.tile``.

        Its rotation and lab transform are the source's repeated (formed once for the n
        distinct rows; the same numbers as forming them row by row).
        """
        c2i = self.c2i
        if c2i is not None and c2i.ndim == 3:
            c2i = np.tile(c2i, (reps, 1, 1))
        phase = None if self.orbital_phase_rad is None else np.tile(self.orbital_phase_rad, reps)
        return FrameState(np.tile(self.phi_rad, reps), self.colatitude_rad,
                          np.tile(self.beta, (reps, 1)), phase, c2i, tiled_from=(self, reps))

    def __len__(self) -> int:
        return int(np.shape(self.phi_rad)[0])


def frame_state(epoch: Epoch, t_s: ArrayLike, site: Site, *,
                include_rotation_velocity: bool = True) -> FrameState:
    """Frame quantities (phi, chi, Q, beta) at samples ``t_s`` seconds after ``epoch`` at ``site``.

    Q is the celestial-to-intermediate matrix per sample (:func:`celestial_to_intermediate`),
    so the state's rotation is the full Earth orientation except polar motion.
    """
    t = np.atleast_1d(np.asarray(t_s, dtype=float))
    phi = sidereal_angle_rad(epoch, t, site.east_longitude_rad)
    c2i = celestial_to_intermediate(epoch, t)
    beta = earth_velocity_beta(epoch, t)
    if include_rotation_velocity:
        beta = beta + rotation_velocity_beta(phi, site.axis_distance_m, c2i)
    return FrameState(phi_rad=phi, colatitude_rad=site.colatitude_rad, beta=beta,
                      orbital_phase_rad=orbital_phase_rad(epoch, t), c2i=c2i)


def circular_orbit_beta(orbital_phase: ArrayLike, beta_orbit: float,
                        obliquity_rad: float) -> NDArray[np.float64]:
    """Circular-orbit model of the Earth's velocity over c, SCCEF axes.

    docs/references.md [R-astro-circular-orbit].

    beta = beta_orbit (sin OT, -cos eta cos OT, -sin eta cos OT). For design and closed forms.
    """
    p = np.asarray(orbital_phase, dtype=float)
    return beta_orbit * np.stack([np.sin(p), -math.cos(obliquity_rad) * np.cos(p),
                                  -math.sin(obliquity_rad) * np.cos(p)], axis=-1)
