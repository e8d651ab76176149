"""Numerical robustness: phase precision over multi-year spans and far epochs; leap seconds."""

from __future__ import annotations

import math
import warnings

import mpmath
import numpy as np
import pytest

from fringe.constants import DAY_S
from fringe.errors import TimeScaleWarning
from fringe.frames import Epoch, era_rad, orbital_phase_rad, sidereal_angle_rad

mpmath.mp.dps = 40


def _era_mp(epoch: Epoch, t_s: float) -> float:
    """ERA in 40-digit arithmetic from the epoch's exact TAI two-part JD and t_s.

    ERA = 2 pi (0.7790572732640 + 1.00273781191135448 (JD_UT1 - 2451545.0)) mod 2 pi
    (IERS Conventions 2003, ch. 5, eq. 14; the same formula as ERFA era00), with
    JD_UT1 = JD_TAI(epoch) + (t_s + (UT1 - TAI)) / 86400 (fringe's time model, frames.py).
    """
    a, b = epoch.tai_jd
    du = (mpmath.mpf(a) - 2451545) + mpmath.mpf(b) + (mpmath.mpf(t_s)
                                                     + mpmath.mpf(epoch.ut1_minus_tai_s)) / 86400
    turns = mpmath.mpf("0.7790572732640") + mpmath.mpf("1.00273781191135448") * du
    return float(2 * mpmath.pi * (turns - mpmath.floor(turns)))


@pytest.mark.parametrize("utc", ["1985-06-01T00:00:00Z", "2003-01-01T00:00:00Z",
                                 "2026-07-01T12:00:00Z"])
def test_era_phase_precision_over_five_years(utc):
    # fringe's per-sample ERA against a 40-digit recomputation of the same formula over a
    # five-year span; float64 two-part JDs keep ~1e-12 rad (eps x 1800 d x 2 pi x 1.0027).
    ep = Epoch(utc, dut1_s=0.3)
    t = np.array([0.0, 1.0, 12345.678, 86400.0 * 365.25 * 2.5, 86400.0 * 365.25 * 5])
    got = era_rad(ep, t)
    want = np.array([_era_mp(ep, float(x)) for x in t])
    d = np.angle(np.exp(1j * (got - want)))
    assert np.max(np.abs(d)) < 1e-10


def test_far_future_epoch_warns_and_keeps_precision():
    # pyerfa's leap-second table is not authoritative after 2028 (docs/references.md
    # [R-lib-erfa-leap]): fringe surfaces ERFA's 'dubious year' warning as a TimeScaleWarning
    # instead of hiding it.
    ep = Epoch("2041-03-01T00:00:00Z")
    with pytest.warns(TimeScaleWarning):
        got = era_rad(ep, np.array([0.0, 3.0e7]))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", TimeScaleWarning)
        want = np.array([_era_mp(ep, 0.0), _era_mp(ep, 3.0e7)])
    assert np.max(np.abs(np.angle(np.exp(1j * (got - want))))) < 1e-10


def test_orbital_phase_is_linear_and_continuous_over_years():
    # Omega T grows by 2 pi per sidereal year (constants.SIDEREAL_YEAR_DAYS; from memory).
    ep = Epoch("2027-01-01T00:00:00Z")
    year = 365.25636 * DAY_S
    p = orbital_phase_rad(ep, np.array([0.0, year, 3 * year]))
    assert p[1] - p[0] == pytest.approx(2 * math.pi, rel=1e-12, abs=0)
    assert p[2] - p[0] == pytest.approx(6 * math.pi, rel=1e-12, abs=0)


def test_sidereal_angle_continuous_across_leap_second():
    # 2016-12-31 ends with 23:59:60 (TAI - UTC 36 -> 37 s; docs/references.md [R-time-T10]).
    # Sample times are elapsed SI seconds, and UT1 is continuous, so phi advances by omega_earth
    # per second, with no 1 s (7.3e-5 rad) jump at the leap second.
    ep = Epoch("2016-12-31T23:59:00Z")
    t = np.arange(0.0, 180.0, 1.0)
    phi = np.unwrap(sidereal_angle_rad(ep, t, 0.3))
    step = np.diff(phi)
    omega = 2 * math.pi * 1.00273781191135448 / 86400.0        # ERA rate (IERS 2003 eq. 14)
    assert np.max(np.abs(step - omega)) < 1e-11
    assert ep.utc_iso(60.5) == "2016-12-31T23:59:60.500Z"          # the leap second itself
    assert ep.utc_iso(61.0) == "2017-01-01T00:00:00.000Z"
    assert Epoch("2017-01-01T00:00:10Z").tai_minus_utc_s == 37.0  # [R-time-T10]/[R-time-T11]


def test_fit_across_leap_second(tmp_path):
    # A short simulated run spanning the 2016-12-31 leap second fits like any other: every turn
    # is accepted (none is partial or glitched by the leap second) and ke_XY is recovered.
    from fringe.experiment.scenario import scenario_from_dict
    from fringe.fit.run import fit_run
    from fringe.fit.settings import FitSettings
    from fringe.simulation.campaign import simulate

    doc = {"site": {"latitude_deg": 40.0, "longitude_deg": -3.7},
           "campaign": {"start_utc": "2016-12-31T12:00:00Z", "duration_days": 1.0},
           "apparatus": {"kind": "cavity-pair", "carrier_hz": 2.8e14, "units": "1"},
           "turntable": {"motion": "continuous", "period_s": 60.0},
           "theory": {"name": "sme"}, "coefficients": {"ke_XY": 2e-16},
           "noise": {"white_fm_adev_1s": 1e-15}}
    sc = scenario_from_dict(doc, "leap")
    simulate(sc, tmp_path / "leap.h5", seed=3)
    res, cols = fit_run(str(tmp_path / "leap.h5"), FitSettings(free=("ke_XY", "ke_XXmYY")))
    assert res.stage1.n_rejected_partial <= 1 and res.stage1.n_rejected_glitch == 0
    v = res.coefficients["ke_XY"]
    assert abs(v.value - 2e-16) < 4 * v.sigma
