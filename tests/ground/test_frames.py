"""Time scales, sidereal angle, Earth velocity and the SCCEF -> lab rotation.

Reference values cite their entries of docs/references.md by anchor ([R-time-T1] ... [R-time-T13],
[R-astro-A1] ... [R-astro-A12]). astropy is a test-only reference here; it runs with offline IERS
data ([R-lib-astropy-iers]: auto_download off and auto_max_age None) and only at dates inside the
bundled table.
"""

import math

import erfa
import numpy as np
import pytest

from fringe.constants import (
    C_M_S,
    OMEGA_EARTH_RAD_S,
    ORBIT_ORIGIN_JD,
    SIDEREAL_YEAR_DAYS,
    STELLAR_DAY_S,
    cmb_dipole_unit_vector,
)
from fringe.errors import ConfigError
from fringe.frames import (
    Epoch,
    FrameState,
    celestial_to_intermediate,
    circular_orbit_beta,
    earth_velocity_beta,
    era_rad,
    frame_state,
    orbital_phase_rad,
    rotation_sccef_to_lab,
    sidereal_angle_rad,
)
from fringe.site import Site
from tests.helpers import oracle

SECONDS_OF_TIME_PER_RAD = 86_400.0 / (2.0 * math.pi)   # 24 h of angle = 2 pi (definition)


def hms_s(h, m, s):
    return 3600.0 * h + 60.0 * m + s


def wrap_pi(x):
    return (np.asarray(x) + np.pi) % (2.0 * np.pi) - np.pi


@pytest.fixture
def offline_iers():
    """astropy with the bundled IERS tables only ([R-lib-astropy-iers])."""
    iers = pytest.importorskip("astropy.utils.iers")
    with iers.conf.set_temp("auto_download", False), iers.conf.set_temp("auto_max_age", None):
        yield


# ---- sidereal time: Meeus examples, ERA -------------------------------------------------------

MEEUS = [
    # (UTC, Meeus GMST in seconds of time, ERA - Meeus GMST in seconds of time)
    # Meeus, Astronomical Algorithms 2nd ed. (1998), Example 12.a: 13h10m46.3668s;
    # [R-time-T5] (source: pyerfa 2.0.1.5): ERA - GMST = +39.14 s
    ("1987-04-10T00:00:00Z", hms_s(13, 10, 46.3668), 39.14),
    # Meeus, Astronomical Algorithms 2nd ed. (1998), Example 12.b: 8h34m57.0896s;
    # [R-time-T5] (source: pyerfa 2.0.1.5): +39.13 s
    ("1987-04-10T19:21:00Z", hms_s(8, 34, 57.0896), 39.13),
]


@pytest.mark.parametrize("utc, gmst_s, era_minus_gmst_s", MEEUS)
def test_gmst82_on_fringe_ut1_matches_meeus(utc, gmst_s, era_minus_gmst_s):
    epoch = Epoch(utc, dut1_s=0.0)                 # Meeus: UT1 := UTC for these examples
    a, b = epoch.ut1_jd([0.0])
    got_s = erfa.gmst82(a[0], b[0]) * SECONDS_OF_TIME_PER_RAD
    # [R-time-T3] (source: pyerfa 2.0.1.5): |gmst82 - Meeus| <= 1e-4 s (Meeus uses IAU 1982)
    assert abs(got_s - gmst_s) <= 1e-4


@pytest.mark.parametrize("utc, gmst_s, era_minus_gmst_s", MEEUS)
def test_era_is_not_gmst(utc, gmst_s, era_minus_gmst_s):
    epoch = Epoch(utc, dut1_s=0.0)
    era_s = era_rad(epoch, [0.0])[0] * SECONDS_OF_TIME_PER_RAD
    diff = (era_s - gmst_s + 43_200.0) % 86_400.0 - 43_200.0
    # [R-time-T5] tolerance 0.01 s (values given to 0.01 s)
    assert diff == pytest.approx(era_minus_gmst_s, abs=0.01)


def test_era_at_sccef_origin():
    epoch = Epoch("2000-03-20T07:35:00Z", dut1_s=0.0)       # C3 origin, UT1 := UTC
    # [R-time-T7], derived (era00): 291.8926 deg, tol 1e-4 deg
    assert math.degrees(era_rad(epoch, [0.0])[0]) == pytest.approx(291.8926, abs=1e-4)
    # the orbital phase starts there (C3); UTC vs TT/TAI offsets are < 1e-9 rad here
    assert orbital_phase_rad(epoch, [0.0])[0] == pytest.approx(0.0, abs=1e-9)


def numpy_era(ut1_a, ut1_b):
    """IERS Conventions 2003 ch. 5 eq. 14 on a two-part JD, in the order era00 uses."""
    big, small = np.maximum(ut1_a, ut1_b), np.minimum(ut1_a, ut1_b)
    t = small + (big - 2451545.0)
    f = np.mod(big, 1.0) + np.mod(small, 1.0)
    return np.mod(2 * np.pi * (f + 0.7790572732640 + 0.00273781191135448 * t), 2 * np.pi)


@pytest.mark.parametrize("utc, dut1_s", [("2026-02-03T04:05:06.25Z", -0.12),
                                         ("2019-08-01T23:00:00Z", 0.3)])
def test_numpy_era_matches_fringe(utc, dut1_s):
    epoch = Epoch(utc, dut1_s=dut1_s)
    t_s = np.array([0.0, 1.5, 3600.0, 40_000.25])
    y, mo, d = int(utc[:4]), int(utc[5:7]), int(utc[8:10])
    hh, mi, ss = int(utc[11:13]), int(utc[14:16]), float(utc[17:-1])
    u1, u2 = erfa.dtf2d("UTC", y, mo, d, hh, mi, ss)
    got = era_rad(epoch, t_s)
    for t, g in zip(t_s, got, strict=True):
        # an independent UT1 from ERFA (no leap second inside these spans)
        a, b = erfa.utcut1(u1, u2 + t / 86_400.0, dut1_s)
        # [R-time-T8] (source: pyerfa 2.0.1.5, measured <= 3e-14 rad): tol 1e-12 rad
        assert abs(wrap_pi(numpy_era(a, b) - g)) <= 1e-12


def test_earth_rotation_rate():
    # [R-time-T9], derived: omega = 7.2921151467e-5 rad/s, stellar day 86 164.09890 s
    assert OMEGA_EARTH_RAD_S == pytest.approx(7.2921151467e-5, rel=1e-10)
    assert STELLAR_DAY_S == pytest.approx(86_164.09890, rel=1e-10)
    epoch = Epoch("2026-05-01T00:00:00Z")
    era = era_rad(epoch, [0.0, 1000.0])
    # fringe's ERA advances at omega (arithmetic; rounding of the two-part JD ~1e-11 rad)
    assert wrap_pi(era[1] - era[0]) == pytest.approx(OMEGA_EARTH_RAD_S * 1000.0, abs=1e-10)


# ---- leap seconds, TAI - UTC -----------------------------------------------------------------

def test_leap_second_2016():
    epoch = Epoch("2016-12-31T23:59:59.5Z", dut1_s=-0.4)
    # [R-time-T10] (source: pyerfa 2.0.1.5): 23:59:60.5 exists and is 1.000 s later
    assert epoch.utc_iso(0.0) == "2016-12-31T23:59:59.500Z"
    assert epoch.utc_iso(1.0) == "2016-12-31T23:59:60.500Z"
    assert epoch.utc_iso(2.0) == "2017-01-01T00:00:00.500Z"
    leap = Epoch("2016-12-31T23:59:60.5Z")
    dt_s = ((leap.tai_jd[0] - epoch.tai_jd[0]) + (leap.tai_jd[1] - epoch.tai_jd[1])) * 86_400.0
    assert dt_s == pytest.approx(1.0, abs=1e-9)           # [R-time-T10] tol 1e-9 s
    # the sidereal angle runs on through the leap second at omega (no 1 s jump)
    t_s = np.array([0.0, 0.5, 1.0, 1.5, 2.0, 3.0])
    phi = np.unwrap(sidereal_angle_rad(epoch, t_s, 0.3))
    np.testing.assert_allclose(np.diff(phi), OMEGA_EARTH_RAD_S * np.diff(t_s), atol=1e-11)
    # after the leap second UT1 - UTC is larger by 1 s: the same instant gives the same angle
    after = Epoch("2017-01-01T00:00:00.5Z", dut1_s=0.6)
    assert wrap_pi(sidereal_angle_rad(after, [0.0], 0.3)[0] - phi[4] % (2 * np.pi)) \
        == pytest.approx(0.0, abs=1e-11)


@pytest.mark.parametrize("hms", ["00:00:00", "12:00:00", "23:59:59.5", "23:59:60.5"])
def test_tai_minus_utc_on_a_leap_second_day(hms):
    # source: pyerfa 2.0.1.5 leap-second table (erfa.dat): TAI - UTC = 36 s through
    # 2016-12-31, the leap second 23:59:60 included (37 s from 2017-01-01, T11)
    epoch = Epoch(f"2016-12-31T{hms}Z", dut1_s=-0.4)
    assert epoch.tai_minus_utc_s == 36.0
    # UT1 from ERFA directly (utcut1 handles the 86 401 s day): the same ERA
    y, mo, d = 2016, 12, 31
    hh, mi, ss = int(hms[:2]), int(hms[3:5]), float(hms[6:])
    a, b = erfa.utcut1(*erfa.dtf2d("UTC", y, mo, d, hh, mi, ss), -0.4)
    assert abs(wrap_pi(era_rad(epoch, [0.0])[0] - erfa.era00(a, b))) <= 1e-12


def test_tai_minus_utc_2026():
    # [R-time-T11] (source: pyerfa leap-second table): 37 s, exact
    assert Epoch("2026-06-01T00:00:00Z").tai_minus_utc_s == 37.0


@pytest.mark.parametrize("bad", ["2026-13-01T00:00:00Z", "yesterday", "2026-01-01"])
def test_epoch_rejects_bad_utc(bad):
    with pytest.raises(ConfigError, match="epoch_utc"):
        _ = Epoch(bad).utc_jd


def test_epoch_rejects_bad_dut1():
    with pytest.raises(ConfigError, match="dut1_s"):
        Epoch("2026-01-01T00:00:00Z", dut1_s=1.5)


# ---- against astropy (offline IERS) -----------------------------------------------------------

def test_ut1_minus_utc_bundled(offline_iers):
    from astropy.time import Time

    d = Time("2020-01-01T00:00:00", scale="utc").get_delta_ut1_utc().to_value("s")
    # [R-time-T13] (source: IERS data bundled with astropy 8.0.2): -0.17717 s, tol 1e-4 s
    assert d == pytest.approx(-0.17717, abs=1e-4)


@pytest.mark.parametrize("utc, east_longitude_deg", [("2020-01-01T00:00:00", 11.3),
                                                     ("2024-06-15T12:34:56", -71.9)])
def test_sidereal_angle_against_astropy(offline_iers, utc, east_longitude_deg):
    import astropy.units as u
    from astropy.time import Time

    t = Time(utc, scale="utc")
    dut1 = float(t.get_delta_ut1_utc().to_value(u.s))
    epoch = Epoch(utc + "Z", dut1_s=dut1)
    lon = math.radians(east_longitude_deg)
    # reference: astropy 8.0.2, Time.earth_rotation_angle('tio') = era00(UT1): same function,
    # float64 rounding only (tol 1e-12 rad)
    assert abs(wrap_pi(era_rad(epoch, [0.0])[0]
                       - t.earth_rotation_angle("tio").to_value(u.rad))) <= 1e-12
    # reference: astropy 8.0.2 with a longitude; astropy adds the TIO locator s' and a polar-
    # motion correction that fringe neglects (together <= 1e-10 rad here, measured): 1e-9 rad
    ref = t.earth_rotation_angle(lon * u.rad).to_value(u.rad)
    assert abs(wrap_pi(sidereal_angle_rad(epoch, [0.0], lon)[0] - ref)) <= 1e-9
    # one day later: fringe holds UT1 - TAI at its epoch value; UT1 - TAI drifts by a few ms a
    # day (module docstring), i.e. <= 3 ms x omega = 2.2e-7 rad
    later = (t + 86_400.0 * u.s).earth_rotation_angle("tio").to_value(u.rad)
    assert abs(wrap_pi(era_rad(epoch, [86_400.0])[0] - later)) <= 2.2e-7


def test_cmb_direction_against_astropy():
    pytest.importorskip("astropy")
    import astropy.units as u
    from astropy.coordinates import SkyCoord

    n = cmb_dipole_unit_vector()
    ra, dec = math.degrees(math.atan2(n[1], n[0])) % 360.0, math.degrees(math.asin(n[2]))
    # [R-astro-A1] (source: astropy 8.0.2): RA 167.9419 deg, Dec -6.9443 deg, tol 1e-4 deg
    assert ra == pytest.approx(167.9419, abs=1e-4)
    assert dec == pytest.approx(-6.9443, abs=1e-4)
    # [R-astro-A3], derived: n = (-0.970762, 0.207371, -0.120904), tol 1e-6
    np.testing.assert_allclose(n, [-0.970762, 0.207371, -0.120904], atol=1e-6)
    # reference: astropy 8.0.2 Galactic -> ICRS of the Planck 2018 direction (l, b) =
    # (264.021, 48.253) deg; fringe uses erfa.g2icrs, the same rotation (tol 1e-4 deg = 1.7e-6)
    g = SkyCoord(l=264.021 * u.deg, b=48.253 * u.deg, frame="galactic").icrs
    np.testing.assert_allclose(n, g.cartesian.xyz.value, atol=1.7e-6)
    assert np.linalg.norm(n) == pytest.approx(1.0, abs=1e-15)


# ---- Earth velocity ----------------------------------------------------------------------------

YEAR_2026 = Epoch("2026-01-01T00:00:00Z")
HOURS_2026 = np.arange(365 * 24) * 3600.0            # 2026-01-01 00:00 ... 2026-12-31 23:00


def test_heliocentric_speed_2026():
    v = earth_velocity_beta(YEAR_2026, HOURS_2026)
    speed = np.linalg.norm(v, axis=1) * C_M_S / 1e3
    # [R-astro-A5] (source: pyerfa 2.0.1.5 epv00): min 29.2826, max 30.2877 km/s (tol 1e-4)
    assert speed.min() == pytest.approx(29.2826, abs=1e-4)
    assert speed.max() == pytest.approx(30.2877, abs=1e-4)
    # mean 29.782 km/s, given to 3 decimals: half a unit in the last digit
    assert speed.mean() == pytest.approx(29.782, abs=5e-4)
    # [R-astro-A5]: the minimum falls on 2026-07-01, near aphelion
    assert YEAR_2026.utc_iso(HOURS_2026[np.argmin(speed)]).startswith("2026-07-01")


def test_earth_velocity_against_astropy(offline_iers):
    import astropy.units as u
    from astropy.coordinates import get_body_barycentric_posvel
    from astropy.time import Time

    t = Time("2026-01-01T00:00:00", scale="utc") + HOURS_2026 * u.s
    _, v_earth = get_body_barycentric_posvel("earth", t)
    bary = v_earth.xyz.to_value(u.km / u.s).T
    speed = np.linalg.norm(bary, axis=1)
    # [R-astro-A6] (source: pyerfa 2.0.1.5 epv00; reference: astropy 8.0.2 builtin
    # ephemeris, which calls epv00): barycentric min 29.2942, max 30.2772 km/s (tol 1e-4),
    # mean 29.783 km/s (3 decimals: tol 5e-4)
    assert speed.min() == pytest.approx(29.2942, abs=1e-4)
    assert speed.max() == pytest.approx(30.2772, abs=1e-4)
    assert speed.mean() == pytest.approx(29.783, abs=5e-4)
    # heliocentric = Earth - Sun (barycentric): fringe's earth_velocity_beta. astropy evaluates
    # at TDB, fringe at TT (< 2 ms apart): |a| x 2 ms ~ 1e-5 m/s; tol 1e-4 m/s
    sub = slice(None, None, 97)
    _, v_sun = get_body_barycentric_posvel("sun", t[sub])
    helio_m_s = (v_earth[sub] - v_sun).xyz.to_value(u.m / u.s).T
    got = earth_velocity_beta(YEAR_2026, HOURS_2026[sub]) * C_M_S
    assert np.abs(got - helio_m_s).max() <= 1e-4


@pytest.mark.parametrize("grid_s, tol_m_s", [(3600.0, 3e-9), (600.0, 2e-9)])
def test_spline_against_direct_epv00(grid_s, tol_m_s):
    rng = np.random.default_rng(10)
    t_s = np.sort(rng.uniform(0.0, 3 * 86_400.0, 100))
    got = earth_velocity_beta(YEAR_2026, t_s, grid_s=grid_s) * C_M_S
    a, b = YEAR_2026.tt_jd(t_s)
    pvh, _ = erfa.epv00(a, b)
    direct = pvh["v"] * (149_597_870_700.0 / 86_400.0)   # au/day -> m/s (IAU 2012 au)
    # [R-astro-A10] (source: pyerfa 2.0.1.5, measured): <= 3e-9 m/s (1 h grid),
    # <= 2e-9 m/s (10 min grid)
    assert np.abs(got - direct).max() <= tol_m_s


def test_circular_orbit_geometry():
    eta = np.radians(23.4392794)                      # [R-vec-common]
    b = circular_orbit_beta([0.0, np.pi / 2], 1.0, eta)
    # [R-astro-circular-orbit] geometry: at the March equinox toward ecliptic longitude 270 deg,
    # (0, -cos eta, -sin eta); at the June solstice along +X (derived)
    np.testing.assert_allclose(b[0], [0.0, -np.cos(eta), -np.sin(eta)], atol=1e-15)
    np.testing.assert_allclose(b[1], [1.0, 0.0, 0.0], atol=1e-15)
    np.testing.assert_allclose(circular_orbit_beta([1.3], 9.93e-5, eta)[0],
                               oracle.beta_circular(1.3), rtol=1e-15)


def test_orbital_phase_rate():
    epoch = Epoch("2026-01-01T00:00:00Z")
    year_s = SIDEREAL_YEAR_DAYS * 86_400.0
    op = orbital_phase_rad(epoch, [0.0, year_s])
    assert op[1] - op[0] == pytest.approx(2 * np.pi, rel=1e-12)    # 2 pi per sidereal year
    days = (epoch.ut1_jd([0.0])[0][0] - ORBIT_ORIGIN_JD) + epoch.ut1_jd([0.0])[1][0]
    assert op[0] == pytest.approx(2 * np.pi * days / SIDEREAL_YEAR_DAYS, rel=1e-12)


# ---- rotation matrix R and rotation velocity ---------------------------------------------------

@pytest.mark.parametrize("chi_deg", [0.0, 37.48, 90.0, 121.98, 180.0])
def test_rotation_matrix_properties(chi_deg):
    chi = math.radians(chi_deg)
    phi = np.linspace(0.0, 2 * np.pi, 7)
    r = rotation_sccef_to_lab(chi, phi)
    for ri, p in zip(r, phi, strict=True):
        np.testing.assert_allclose(ri @ ri.T, np.eye(3), atol=1e-15)
        assert np.linalg.det(ri) == pytest.approx(1.0, abs=1e-15)
        np.testing.assert_allclose(ri, oracle.rot_sccef_to_lab(chi, p), atol=1e-15)
        # [R-lab-R]: row 3 = zenith at RA phi, Dec 90 deg - chi
        dec = np.pi / 2 - chi
        np.testing.assert_allclose(ri[2], [np.cos(dec) * np.cos(p), np.cos(dec) * np.sin(p),
                                           np.sin(dec)], atol=1e-15)
        # row 2 = local east = direction of increasing RA, (-sin phi, cos phi, 0)
        np.testing.assert_allclose(ri[1], [-np.sin(p), np.cos(p), 0.0], atol=1e-15)
        # row 1 = local south = east x up (x = y x z, right-handed lab)
        np.testing.assert_allclose(ri[0], np.cross(ri[1], ri[2]), atol=1e-15)
        if 0.0 < chi < np.pi:   # south has a component toward -Z (away from the north pole)
            assert ri[0, 2] < 0.0
    # C5: at phi = 0 the lab y axis lies along SCCEF Y
    np.testing.assert_allclose(rotation_sccef_to_lab(chi, [0.0])[0, 1], [0, 1, 0], atol=1e-15)


# ---- full Earth orientation against ERFA's celestial-to-terrestrial matrix -------------------

def _lab_from_terrestrial(site):
    """Geodetic (south, east, up) axes in terrestrial components: R_z at phi = east longitude."""
    return rotation_sccef_to_lab(site.colatitude_rad, [site.east_longitude_rad])[0]


def _c2t(epoch, t_s, xp_rad=0.0, yp_rad=0.0):
    """reference: pyerfa 2.0.1.5 c2t06a(TT, UT1, xp, yp), IAU 2006/2000A, CIO based."""
    (tt1, tt2), (ut1, ut2) = epoch.tt_jd(t_s), epoch.ut1_jd(t_s)
    return erfa.c2t06a(tt1, tt2, ut1, ut2, xp_rad, yp_rad)


def _angle_rad(r):
    """Rotation angle of the matrices r (n, 3, 3)."""
    return np.arccos(np.clip((np.trace(r, axis1=1, axis2=2) - 1.0) / 2.0, -1.0, 1.0))


EARTH_ORIENTATION_EPOCHS = ["1990-03-01T00:00:00Z", "2000-01-01T12:00:00Z",
                            "2015-06-01T00:00:00Z", "2025-06-01T00:00:00Z",
                            "2030-06-01T00:00:00Z", "2040-11-15T06:00:00Z"]


@pytest.mark.filterwarnings("ignore::fringe.errors.TimeScaleWarning")   # 2030+: future UTC
@pytest.mark.parametrize("utc", EARTH_ORIENTATION_EPOCHS)
def test_rotation_is_the_full_earth_orientation(utc):
    """R(t) = geodetic axes x ERFA c2t06a with polar motion zero ([R-time-earth-orientation]).

    Before the precession-nutation matrix was included, R turned the lab about the SCCEF Z axis
    and was off by the pole's offset from it: 0.93 mrad in 1990, 1.50 mrad in 2015, 2.47 mrad in
    2025, 2.99 mrad in 2030, 3.94 mrad in 2040 (measured, [R-time-T14]).
    """
    site = Site(latitude_deg=47.62, longitude_deg=11.38, height_m=600.0)
    epoch = Epoch(utc)
    t_s = np.array([0.0, 3_000.0, 40_000.0, 5.3 * 86_400.0])
    state = frame_state(epoch, t_s, site)
    ref = _lab_from_terrestrial(site) @ _c2t(epoch, t_s)
    # [R-time-T15]: c2i spline <= 1.2e-11; c2t06a also applies the TIO locator s'
    # (-47 uas per century, < 1e-10 rad 1990-2040, IERS Conventions 2010 ch. 5, from memory):
    # tol 2e-10
    assert np.abs(state.rotation - ref).max() <= 2e-10
    # the pole-fixed rotation (Q = 1) misses by the pole's offset from SCCEF Z (> 2e-5 rad
    # at every epoch listed, [R-time-T14])
    pole_fixed = rotation_sccef_to_lab(site.colatitude_rad, state.phi_rad)
    assert _angle_rad(pole_fixed @ np.transpose(ref, (0, 2, 1))).min() > 2e-5


@pytest.mark.parametrize("utc, offset_rad", [
    # [R-time-T14] (source: pyerfa 2.0.1.5 c2t06a, measured): rotation angle between the
    # pole-fixed R and the full orientation at 00:00 UTC, 5 figures (tol half a unit, 5e-8 rad)
    ("1990-03-01T00:00:00Z", 0.9324e-3), ("2015-06-01T00:00:00Z", 1.5003e-3),
    ("2025-06-01T00:00:00Z", 2.4726e-3), ("2030-06-01T00:00:00Z", 2.9857e-3)])
@pytest.mark.filterwarnings("ignore::fringe.errors.TimeScaleWarning")   # 2030: future UTC
def test_size_of_the_precession_nutation(utc, offset_rad):
    site = Site(latitude_deg=47.62, longitude_deg=11.38, height_m=600.0)
    epoch = Epoch(utc)
    ref = _lab_from_terrestrial(site) @ _c2t(epoch, [0.0])
    phi = sidereal_angle_rad(epoch, [0.0], site.east_longitude_rad)
    pole_fixed = rotation_sccef_to_lab(site.colatitude_rad, phi)
    assert _angle_rad(pole_fixed @ np.transpose(ref, (0, 2, 1)))[0] == pytest.approx(
        offset_rad, abs=5e-8)


def test_polar_motion_is_the_neglected_part():
    """With a measured pole position the full orientation differs from R by |(x_p, y_p)|."""
    site = Site(latitude_deg=47.62, longitude_deg=11.38, height_m=600.0)
    epoch = Epoch("2015-06-01T00:00:00Z")
    t_s = np.array([0.0, 21_600.0, 43_200.0])
    # [R-time-T16] (source: IERS EOP C04 series as bundled with astropy-iers-data
    # 0.2026.11.2.0.34.55): x_p = 0.090998", y_p = 0.455999" on 2015-06-01
    xp, yp = (math.radians(v / 3600.0) for v in (0.090998, 0.455999))
    state = frame_state(epoch, t_s, site)
    ref = _lab_from_terrestrial(site) @ _c2t(epoch, t_s, xp, yp)
    angle = _angle_rad(state.rotation @ np.transpose(ref, (0, 2, 1)))
    # polar motion is a rotation by (x_p, y_p) about two equatorial axes of the terrestrial
    # frame (derived): its angle is hypot(x_p, y_p) = 2.27e-6 rad, to second order (tol 1e-3)
    np.testing.assert_allclose(angle, math.hypot(xp, yp), rtol=1e-3)


@pytest.mark.parametrize("start_s, span_s", [(0.0, 365.25 * 86_400.0), (1.7e7, 32_768.0)])
def test_c2i_spline_against_direct(start_s, span_s):
    rng = np.random.default_rng(15)
    t_s = np.sort(start_s + rng.uniform(0.0, span_s, 300))
    got = celestial_to_intermediate(YEAR_2026, t_s)
    direct = erfa.c2i06a(*YEAR_2026.tt_jd(t_s))
    # [R-time-T15] (source: pyerfa 2.0.1.5, measured): <= 1.2e-11 per element (12 h grid);
    # tol 2e-11
    assert np.abs(got - direct).max() <= 2e-11
    assert celestial_to_intermediate(YEAR_2026, []).shape == (0, 3, 3)


def test_one_instant_without_the_spline_is_its_node_value():
    # grid_s=None evaluates ERFA at the instants themselves; a spline returns its node values
    # exactly, and an instant t is node 3 of its own grid (t - 3 g + 3 g == t for these t), so
    # the harmonic table's one-instant frames are those of the splines (derived)
    for t_ref in (0.0, 86_399.5, 1.7e7):
        beta = earth_velocity_beta(YEAR_2026, [t_ref])
        q = celestial_to_intermediate(YEAR_2026, [t_ref])
        assert earth_velocity_beta(YEAR_2026, [t_ref], grid_s=None).tobytes() == beta.tobytes()
        assert celestial_to_intermediate(YEAR_2026, [t_ref], grid_s=None).tobytes() == \
            q.tobytes()
    a, b = YEAR_2026.tt_jd(np.array([5.0, 7.0]))
    direct = erfa.epv00(a, b)[0]["v"] * (149_597_870_700.0 / 86_400.0 / C_M_S)  # au/day over c
    np.testing.assert_array_equal(earth_velocity_beta(YEAR_2026, [5.0, 7.0], grid_s=None),
                                  direct)


def test_frame_state_take_keeps_the_orientation():
    site = Site(latitude_deg=-37.5, longitude_deg=-70.0, height_m=0.0)
    state = frame_state(YEAR_2026, np.array([0.0, 1e5, 2e5]), site)
    idx = np.array([2, 0, 0])
    sub = state.take(idx)
    np.testing.assert_array_equal(sub.rotation, state.rotation[idx])
    np.testing.assert_array_equal(sub.orbital_phase_rad, state.orbital_phase_rad[idx])
    frozen = FrameState(state.phi_rad, state.colatitude_rad, state.beta, c2i=state.c2i[1])
    assert frozen.take(idx).c2i is frozen.c2i           # one Q for all samples stays shared
    # the identity Q gives the pole-fixed matrix of [R-lab-R]; any Q gives R_z Q (exact
    # algebra: rounding only), per sample or one Q for all
    pole_fixed = rotation_sccef_to_lab(site.colatitude_rad, state.phi_rad)
    np.testing.assert_allclose(
        rotation_sccef_to_lab(site.colatitude_rad, state.phi_rad, np.eye(3)), pole_fixed, atol=0)
    np.testing.assert_allclose(state.rotation, pole_fixed @ state.c2i, rtol=0, atol=1e-15)
    np.testing.assert_allclose(frozen.rotation, pole_fixed @ state.c2i[1], rtol=0, atol=1e-15)


@pytest.mark.parametrize("latitude_deg", [0.0, 52.5, -37.5, 80.0])
def test_rotation_velocity_along_east(latitude_deg):
    site = Site(latitude_deg=latitude_deg, longitude_deg=13.4, height_m=0.0)
    epoch = Epoch("2026-03-01T06:00:00Z")
    t_s = np.array([0.0, 5000.0, 30_000.0])
    state = frame_state(epoch, t_s, site)
    orbit_only = frame_state(epoch, t_s, site, include_rotation_velocity=False)
    rot_lab = np.einsum("nij,nj->ni", state.rotation, state.beta - orbit_only.beta)
    beta_l = OMEGA_EARTH_RAD_S * site.axis_distance_m / C_M_S
    # [R-astro-velocity]: beta_rot = +beta_L along lab east (lab south/up components vanish)
    np.testing.assert_allclose(rot_lab[:, 1], beta_l, rtol=1e-9)
    # (the difference of two ~1e-4 velocities carries ~1e-20 of float64 rounding)
    np.testing.assert_allclose(rot_lab[:, [0, 2]], 0.0, atol=1e-15 * np.abs(state.beta).max())
    # [R-astro-velocity]: beta_L = 1.5514e-6 sin(chi) with rho = r sin chi; the geodetic rho differs
    # by < 0.4 % (from memory radius; derived arithmetic): rtol 4e-3
    chi = site.colatitude_rad
    assert beta_l == pytest.approx(1.5514e-6 * math.sin(chi), rel=4e-3)
    if latitude_deg == 0.0:
        # at the equator rho = a exactly; 1.5514e-6 is rounded to 5 figures
        assert beta_l == pytest.approx(1.5514e-6, rel=5e-5)
