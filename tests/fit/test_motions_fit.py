"""Fits of stepped, reversing and swinging tables, and of short records.

Simulated records use the invented laboratory of tests/helpers/runs.py; hand-read records follow
the scheme of 16 azimuth marks per turn (docs/references.md [R-practice-signal], source:
Michelson & Morley 1887) with invented numbers.
"""

from __future__ import annotations

import json
import math
import warnings

import numpy as np
import pytest

from fringe.demodulate.engine import run_stage1
from fringe.demodulate.sessions import ONE_SIGMA, student_factor
from fringe.demodulate.settings import DemodSettings
from fringe.errors import DegeneracyWarning, SystematicsWarning
from fringe.fit.run import fit_run
from fringe.fit.settings import FitSettings
from fringe.io.fit_result import FitResult
from tests.demodulate.test_motions import hand_read, write_run
from tests.helpers.runs import KE_TRUTH, simulate_run

KE4 = ("ke_XY", "ke_XZ", "ke_YZ", "ke_XXmYY")

MOTIONS = {
    "stepped": {"motion": "stepped", "step_deg": 22.5, "dwell_s": 8.0, "move_s": 2.0},
    "reversing": {"motion": "reversing", "period_s": 60.0},
    "swinging": {"motion": "swinging", "arc_deg": 300.0, "sweep_s": 50.0},
}


def fit(path, settings, demod=None):
    res, cols = fit_run(str(path), settings, demod)
    cols.close()
    return res


@pytest.mark.parametrize("kind", list(MOTIONS))
def test_motion_fit_recovers_injected_coefficients(tmp_path, kind):
    path, _, _ = simulate_run(tmp_path / f"{kind}.h5", seed=29, days=0.5,
                              turntable=MOTIONS[kind], coefficients=KE_TRUTH)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", DegeneracyWarning)   # half a day: ke_* correlated
        res = fit(path, FitSettings(free=tuple(KE_TRUTH)))
    assert res.motion.kind == kind
    pulls = np.array([(e.value - KE_TRUTH[n]) / e.sigma for n, e in res.coefficients.items()])
    # five pulls of unit normal variance: each within 4 sigma (two-sided 6e-5), and their sum
    # of squares below the 99.9 % point of chi2 with 5 dof, 20.5 (scipy.stats.chi2.ppf)
    assert np.all(np.abs(pulls) < 4.0), pulls
    assert np.sum(pulls ** 2) < 20.5, pulls
    assert res.stage1.n_accepted > 200
    back = FitResult.from_dict(json.loads(json.dumps(res.to_dict())), "round trip")
    assert back.motion == res.motion


def test_student_factor_closed_forms():
    p = 0.5 + ONE_SIGMA / 2
    # t with 1 dof is the Cauchy distribution: quantile tan(pi (p - 1/2)) (derived,
    # docs/references.md [R-stat-student])
    assert student_factor(1) == pytest.approx(math.tan(math.pi * (p - 0.5)), rel=1e-10)
    # t with 2 dof: quantile (2p - 1) / sqrt(2 p (1 - p)) (derived, [R-stat-student])
    assert student_factor(2) == pytest.approx((2 * p - 1) / math.sqrt(2 * p * (1 - p)),
                                              rel=1e-10)
    assert student_factor(10 ** 6) == pytest.approx(1.0, abs=1e-5)    # normal limit
    assert math.isinf(student_factor(0))


@pytest.fixture(scope="module")
def short_run(tmp_path_factory):
    rng = np.random.default_rng(1887)
    t, az, y = hand_read(rng)
    return write_run(tmp_path_factory.mktemp("short") / "hand.h5", t, az, y,
                     epoch="2027-02-03T22:00:00Z")


def test_six_hand_read_turns_fit_with_the_sessions_as_result(short_run):
    with pytest.warns(DegeneracyWarning, match="sidereal phase"):
        res = fit(short_run, FitSettings(theory="medium"))
    codes = [w.code for w in res.warnings]
    assert "sidereal-phases-few" in codes and "small-sample" in codes
    assert res.harmonics is None
    assert res.stage1.n_accepted == 6
    (s,) = res.sessions.sessions
    assert s.n_turns == 6 and s.dof == 10                     # 2 (n - 1) for n = 6 turns
    # the session mean and its scatter-scaled, Student-t widened sigma, computed here
    table, _ = run_stage1(short_run, DemodSettings())
    cov = table.formal_cov()
    w = np.linalg.inv(cov)
    y = np.stack([table.C, table.B], axis=1)
    v = np.linalg.inv(w.sum(axis=0))
    mean = v @ np.einsum("nij,nj->i", w, y)
    r = y - mean
    chi2 = np.einsum("ni,nij,nj->", r, w, r)
    sig = np.sqrt(np.diag(v) * chi2 / 10) * student_factor(10)
    assert s.C.value == pytest.approx(mean[0], rel=1e-10)
    assert s.B.value == pytest.approx(mean[1], rel=1e-10)
    assert (s.C.sigma, s.B.sigma) == pytest.approx(tuple(sig), rel=1e-10)
    back = FitResult.from_dict(json.loads(json.dumps(res.to_dict())), "round trip")
    assert back.sessions == res.sessions and back.motion == res.motion
    assert "per-session 2 theta amplitudes" in res.summary()


def test_sessions_agreement_chi2(tmp_path):
    # two sessions of 6 turns starting 4000 s apart (a pause of 31 min > 30 min): chi2 of
    # their means about the weighted mean
    rng = np.random.default_rng(7)
    t1, az1, y1 = hand_read(rng)
    t2, az2, y2 = hand_read(rng)
    path = write_run(tmp_path / "two.h5", np.concatenate([t1, t2 + 4000.0]),
                     np.concatenate([az1, az2]), np.concatenate([y1, y2]),
                     epoch="2027-02-03T22:00:00Z")
    with pytest.warns(DegeneracyWarning, match="sidereal phase"):
        res = fit(path, FitSettings(theory="medium", lab_b0=False))
    a, b = res.sessions.sessions
    assert res.sessions.dof == 2
    # recompute from the table values: means and scaled covariances (sigma / t-factor)
    def vec(x):
        return np.array([x.C.value, x.B.value])

    def cov(x):
        sc, sb = x.C.sigma / x.t_factor, x.B.sigma / x.t_factor
        return np.array([[sc * sc, x.correlation * sc * sb], [x.correlation * sc * sb, sb * sb]])

    wa, wb = np.linalg.inv(cov(a)), np.linalg.inv(cov(b))
    m = np.linalg.solve(wa + wb, wa @ vec(a) + wb @ vec(b))
    chi2 = (vec(a) - m) @ wa @ (vec(a) - m) + (vec(b) - m) @ wb @ (vec(b) - m)
    assert res.sessions.chi2 == pytest.approx(chi2, rel=1e-8)


def test_few_turns_at_many_sidereal_phases_run_the_sidereal_stage(tmp_path):
    # 12 sessions of 2 hand-read turns, 2 h apart: 12 sidereal phases, 24 turns
    rng = np.random.default_rng(11)
    parts = [hand_read(rng, n_turns=2) for _ in range(12)]
    t = np.concatenate([p[0] + 7200.0 * i for i, p in enumerate(parts)])
    az = np.concatenate([p[1] for p in parts])
    y = np.concatenate([p[2] for p in parts])
    path = write_run(tmp_path / "nights.h5", t, az, y, epoch="2027-02-03T22:00:00Z")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", DegeneracyWarning)
        warnings.simplefilter("ignore", SystematicsWarning)    # the injected 2 theta is lab-fixed
        res = fit(path, FitSettings(free=KE4))
    assert res.harmonics is not None and res.sessions is None
    small = [w for w in res.warnings if w.code == "small-sample"]
    assert small and small[0].values["dof"] == res.statistics.dof == 2 * 24 - 5
    assert small[0].values["t_factor"] == pytest.approx(student_factor(43), rel=1e-12)


def test_result_files_without_motion_or_sessions_still_read(data_dir):
    res = FitResult.read(data_dir / "fit_example.json")
    assert res.motion is None and res.sessions is None
    d = json.loads((data_dir / "fit_example.json").read_text())
    d["motion"] = {"kind": "spinning", "sense": "ccw", "turn_period_s": 45.0,
                   "block_rule": "one turn", "excluded_samples_rule": "", "dwell_fraction": 0.0}
    with pytest.raises(Exception, match=r"fit.json: motion.kind: expected one of continuous"):
        FitResult.from_dict(d, "fit.json")


def test_a_record_whose_every_block_is_rejected_names_the_coverage(tmp_path):
    # 8 hand-read marks per turn: fewer valid samples than min_samples (12) in every turn
    rng = np.random.default_rng(3)
    t, az, y = hand_read(rng, marks=8)
    path = write_run(tmp_path / "eight.h5", t, az, y, epoch="2027-02-03T22:00:00Z")
    from fringe.errors import FitError

    with pytest.raises(FitError, match=r"none of the 6 blocks defines a 2 theta pair.*at least "
                                       r"12 valid samples.*no block gives C and B"):
        fit(path, FitSettings(theory="medium"))
    # with min_samples lowered to the 8 readings the turns are fitted (2 dof each)
    with pytest.warns(DegeneracyWarning, match="sidereal phase"):
        res = fit(path, FitSettings(theory="medium", lab_b0=False), DemodSettings(min_samples=8))
    assert res.stage1.n_accepted == 6
