"""The medium fit's derived speeds (``derived`` of the fit result) on simulated runs.

The lab velocity through the medium at a turn's mean time t_i is u_i = v_sun + c beta(t_i)
(C12; docs/fit.md), its horizontal part the first two lab components R_i u_i (C4). The
reported values are the largest |u_i| and |(R_i u_i)_xy| over the accepted turns; the limits
are the largest values on the region Delta chi^2 <= 1.6449^2 x reduced chi^2
(scipy.stats.norm.ppf(0.95) = 1.6449). Runs as in tests/fit/test_fit.py (white FM 1e-9 at 1 s).
"""

from __future__ import annotations

import numpy as np
import pytest

from fringe.constants import C_M_S
from fringe.fit.run import fit_run, setup_from_run
from fringe.fit.settings import FitSettings
from fringe.io.fit_result import FitResult
from tests.helpers.runs import simulate_run


def fit_medium_run(tmp_path, truth, seed):
    path, sc, _ = simulate_run(tmp_path / "medium.h5", seed=seed, days=2.0,
                               theory={"name": "medium"}, noise={"white_fm_adev_1s": 1e-9},
                               coefficients=truth)
    res, cols = fit_run(path, FitSettings(theory="medium"))
    t = cols["t_mid_s"][cols["accepted"].astype(bool)]
    setup, _ = setup_from_run(path, "medium")
    state = setup.frames(t)
    return res, state.beta * C_M_S / 1e3, state.rotation[:, :2, :]


def speeds(v, a, rows):
    u = v[None, :] + a
    return np.linalg.norm(u, axis=1), np.linalg.norm(np.einsum("nij,nj->ni", rows, u), axis=1)


def test_lab_speed_in_the_gaussian_regime(tmp_path):
    truth = np.array([10.0, -20.0, 5.0])
    res, a, rows = fit_medium_run(tmp_path, dict(zip(("sun_vX_kms", "sun_vY_kms",
                                                       "sun_vZ_kms"), truth)), seed=31)
    names = res.covariance.names
    v = np.array([res.coefficients[n].value for n in names])
    cov = np.array(res.covariance.matrix)
    lab = res.derived.lab_speed_kms
    full, horiz = speeds(v, a, rows)
    assert lab["best"] == pytest.approx(full.max(), rel=1e-12)
    assert lab["horizontal_best"] == pytest.approx(horiz.max(), rel=1e-12)
    # sigma << |u|: the largest |u_i| on the region is max_i (|u_i| + 1.6449 sqrt(n_i C n_i)),
    # n_i = u_i/|u_i| (derived as for the Sun's speed in tests/fit/test_fit.py); for the
    # horizontal part n_i = R_i^T e_i with e_i the unit horizontal vector. Band 0.02 sigma.
    u = v[None, :] + a
    n = u / np.linalg.norm(u, axis=1, keepdims=True)
    sig = np.sqrt(np.einsum("ni,ij,nj->n", n, cov, n))
    assert lab["upper_95"] == pytest.approx((full + 1.6449 * sig).max(), abs=0.02 * sig.max())
    h = np.einsum("nij,nj->ni", rows, u)
    nh = np.einsum("nji,nj->ni", rows, h / np.linalg.norm(h, axis=1, keepdims=True))
    sh = np.sqrt(np.einsum("ni,ij,nj->n", nh, cov, nh))
    assert lab["horizontal_upper_95"] == pytest.approx((horiz + 1.6449 * sh).max(),
                                                       abs=0.02 * sh.max())
    # the truth lies below the limit (a fixed seed; the pull of the speed is ~N(0, 1))
    assert speeds(truth, a, rows)[0].max() < lab["upper_95"]
    # the record round-trips through the result file's JSON
    again = FitResult.from_dict(res.to_dict(), source="test")
    assert again.derived == res.derived


def test_null_bounds_the_lab_speed_not_the_sun_speed(tmp_path):
    """A medium at rest with the Earth's mean motion: the lab speed is small, the Sun's is not.

    v_sun = -c beta_orbit(middle of the record) (computed with pyerfa epv00 through fringe.frames),
    so the lab moves through the medium only by the Earth's rotation velocity (0.31 km/s at
    47.6 deg latitude) and the change of the orbital velocity over the record (about
    2 pi x 30 km/s x 1 d / 365 d = 0.5 km/s either side; derived). The old statement, the
    Sun's speed, is ~30 km/s even for this null; the laboratory's speed limit is a few km/s.
    """
    from fringe.frames import Epoch, earth_velocity_beta

    v_orbit = earth_velocity_beta(Epoch("2027-02-03T00:00:00Z"), [86400.0])[0] * C_M_S / 1e3
    truth = -v_orbit
    res, a, rows = fit_medium_run(tmp_path, dict(zip(("sun_vX_kms", "sun_vY_kms",
                                                       "sun_vZ_kms"), truth)), seed=32)
    lab, sun = res.derived.lab_speed_kms, res.derived.sun_speed_kms
    true_full, true_h = speeds(truth, a, rows)
    assert true_full.max() < 1.0                          # the scenario is a near null
    assert true_full.max() <= lab["upper_95"] < 3.0
    assert true_h.max() <= lab["horizontal_upper_95"] <= lab["upper_95"]
    assert lab["best"] <= lab["upper_95"] and lab["horizontal_best"] <= lab["horizontal_upper_95"]
    assert sun["upper_95"] > 25.0                         # |v_sun| ~ 30 km/s is not the lab's
    # expected 2 theta amplitude of the orbital velocity alone: for the cavity pair
    # nu_1 - nu_2 = nu (d_1 - d_2) with d_1 - d_2 = 1/2 (h/c)^2 cos 2(theta - psi) to O(beta^2)
    # (docs/theory.md, medium), h the horizontal lab velocity: amplitude nu |h|^2 / (2 c^2).
    # The turn model adds within-turn terms ~1e-3 of the signal (fringe.fit.turn_model):
    # rtol 3e-3.
    amp = res.derived.two_theta_amplitude
    h_orbit = speeds(np.zeros(3), a, rows)[1] * 1e3
    expected = 2.82e14 * h_orbit ** 2 / (2 * C_M_S ** 2)     # carrier of tests/helpers/runs.py
    assert amp["units"] == "Hz"
    assert amp["orbital_rms"] == pytest.approx(np.sqrt(np.mean(expected ** 2)), rel=3e-3)
    assert amp["orbital_max"] == pytest.approx(expected.max(), rel=3e-3)
    assert amp["fitted_rms"] < 0.01 * amp["orbital_rms"]
    # the lab speed is below 1 km/s, so the signal is below (1/29)^2 = 1.2e-3 of the orbital
    # one (derived); the fraction of the orbital expectation in the data is correspondingly
    # small, and far from 1 in units of its sigma
    assert abs(amp["orbital_fraction"]) < 0.01
    assert (1 - amp["orbital_fraction"]) / amp["orbital_fraction_sigma"] > 100


def test_medium_at_rest_with_the_sun(tmp_path):
    """v_sun = 0: the lab moves through the medium with the orbital and rotation velocity.

    The data then contain the orbital expectation once: orbital_fraction = 1 within 4 sigma
    (two-sided pull band as in tests/fit/test_fit.py), and the lab speed is the largest
    |c beta(t_i)| (~30 km/s) within its limits.
    """
    res, a, rows = fit_medium_run(tmp_path, dict.fromkeys(("sun_vX_kms", "sun_vY_kms",
                                                           "sun_vZ_kms"), 0.0), seed=33)
    amp, lab = res.derived.two_theta_amplitude, res.derived.lab_speed_kms
    assert abs(amp["orbital_fraction"] - 1.0) < 4 * amp["orbital_fraction_sigma"]
    assert amp["fitted_rms"] == pytest.approx(amp["orbital_rms"], rel=1e-2)
    full, horiz = speeds(np.zeros(3), a, rows)
    assert lab["best"] - 4 * (lab["upper_95"] - lab["best"]) < full.max() < lab["upper_95"] \
        + 4 * (lab["upper_95"] - lab["best"])
