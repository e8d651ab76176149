"""The systematic budget of joint results (fringe/fit/joint_budget.py).

Two invented laboratories (tests/helpers/runs.py): a cavity pair at 47.6 deg N fitted with a
budget file (a term on ke_ZZ, a harmonic term, a calibration scale) and a Michelson at
31.5 deg S without one. The joint terms are checked against the runs' weight matrices
recomputed here from the runs' own stored covariances: W_r = (sum F)^-1 F_r, F_r the inverse of
run r's marginal covariance of the coefficients (the combination's route).
"""

from __future__ import annotations

import json
import warnings

import numpy as np
import pytest

from fringe.errors import ConfigError
from fringe.fit.joint import combine_results, fit_joint
from fringe.fit.run import fit_run
from fringe.fit.settings import FitSettings
from fringe.io.budget_file import read_budget
from fringe.io.fit_result import FitResult
from tests.helpers.runs import KE_TRUTH, simulate_run

SHORT = {"days": 0.5, "interval_s": 2.0, "period_s": 60.0}
SOUTH = {"site": {"name": "Sandveld hut (invented)", "latitude_deg": -31.5,
                  "longitude_deg": 19.2, "height_m": 300.0},
         "apparatus": {"kind": "michelson", "arm_length_m": 10.0, "wavelength_m": 633e-9,
                       "units": "fringe"},
         "noise": {"white_fm_adev_1s": 6e-8}}

RUN_BUDGET = """
[[term]]
name = "mount creep"
coefficient = "ke_ZZ"
size = 3e-17
units = "1"
[[term]]
name = "tilt residual"
harmonic = "Cs2"
size = 2e-3
units = "Hz"
[[scale]]
name = "beat calibration"
relative = 0.02
"""


@pytest.fixture(scope="module")
def stored(tmp_path_factory):
    """(north result with its budget, south result without), read back from their JSON."""
    d = tmp_path_factory.mktemp("joint_budget")
    (d / "budget.toml").write_text(RUN_BUDGET, encoding="utf-8")
    out = []
    for i, (extra, budget) in enumerate((({}, read_budget(d / "budget.toml")), (SOUTH, None))):
        p, _, _ = simulate_run(d / f"run{i}.h5", seed=9300 + i, coefficients=KE_TRUTH,
                               **SHORT, **extra)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            res, cols = fit_run(p, FitSettings(), budget=budget)
        cols.close()
        out.append((str(p), FitResult.from_dict(json.loads(json.dumps(res.to_dict())),
                                                source=str(p))))
    return d, out


def _weights(results, names):
    infos = []
    for _, r in results:
        m, order = np.asarray(r.covariance.matrix, float), list(r.covariance.names)
        idx = [order.index(n) for n in names]
        cov = m[np.ix_(idx, idx)]
        infos.append(np.linalg.inv(cov))
    total = np.linalg.inv(sum(infos))
    return [total @ f for f in infos]


def test_the_runs_terms_are_carried_through_their_weights(stored):
    _, results = stored
    joint = combine_results(results)
    names = list(joint.coefficients)
    assert len({abs(v) > 0 for v in (results[0][1].systematics.coefficients[n]["direction"]
                                     ["tilt residual"] for n in names)}) >= 1
    s = joint.systematics
    assert s is not None
    kinds = {t["name"]: t["kind"] for t in s.terms}
    assert kinds == {"run 1: mount creep": "declared-coefficient",
                     "run 1: tilt residual": "declared-harmonic",
                     "run 1: beat calibration": "run-scale"}
    w1 = _weights(results, names)[0]
    own = np.array([results[0][1].coefficients[n].value for n in names])
    j = names.index("ke_ZZ")
    run1 = results[0][1].systematics.coefficients
    signed = np.array([run1[n]["direction"]["tilt residual"] for n in names])
    # the stored direction is the term's signed effect: its size is the term's sigma
    np.testing.assert_array_equal(np.abs(signed), [run1[n]["terms"]["tilt residual"]
                                                   for n in names])
    for k, n in enumerate(names):
        c = s.coefficients[n]
        # a size on ke_ZZ of run 1 moves joint coefficient n by W_1[n, ke_ZZ] x size
        assert c["terms"]["run 1: mount creep"] == pytest.approx(abs(w1[k, j]) * 3e-17,
                                                                  rel=1e-6)
        # the scale moves run 1's values by 2 %: the joint by W_1 (0.02 c_1)
        assert c["terms"]["run 1: beat calibration"] == pytest.approx(
            abs(w1[k] @ (0.02 * own)), rel=1e-6)
        assert c["terms"]["run 1: tilt residual"] == pytest.approx(abs(w1[k] @ signed),
                                                                    rel=1e-6)
        assert c["statistical"] == pytest.approx(joint.coefficients[n].sigma, rel=1e-12)
        assert c["total"] ** 2 == pytest.approx(
            c["statistical"] ** 2 + sum(v ** 2 for v in c["terms"].values()), rel=1e-9)
    # ke_ZZ's term is smaller in the joint than in run 1 alone (the south run shares the load)
    assert 0 < s.coefficients["ke_ZZ"]["terms"]["run 1: mount creep"] < 3e-17


def test_terms_declared_on_the_joint_coefficients(stored, tmp_path):
    _, results = stored
    f = tmp_path / "joint_budget.toml"
    f.write_text('[[term]]\nname = "shared reference"\ncoefficient = "ke_XY"\nsize = 1e-17\n'
                 'units = "1"\n[[scale]]\nname = "common standard"\nrelative = 0.05\n',
                 encoding="utf-8")
    joint = combine_results(results, budget=read_budget(f))
    s = joint.systematics
    for n, c in s.coefficients.items():
        assert c["terms"]["shared reference"] == (1e-17 if n == "ke_XY" else 0.0)
        assert c["terms"]["common standard"] == pytest.approx(
            0.05 * abs(joint.coefficients[n].value), rel=1e-12)
    assert s.budget_file["sha256"] == read_budget(f).sha256
    # the budget survives the stored form
    again = FitResult.from_dict(json.loads(json.dumps(joint.to_dict())), source="joint.json")
    assert again.systematics.to_dict() == s.to_dict()


def test_a_harmonic_term_on_a_joint_result_is_refused(stored, tmp_path):
    _, results = stored
    f = tmp_path / "bad.toml"
    f.write_text('[[term]]\nname = "tilt"\nharmonic = "Cs2"\nsize = 1e-3\nunits = "Hz"\n',
                 encoding="utf-8")
    with pytest.raises(ConfigError, match=r"term\[0\]\.harmonic: expected a coefficient term"):
        combine_results(results, budget=read_budget(f))


def test_a_joint_fit_of_run_files_takes_a_budget(stored, tmp_path):
    d, results = stored
    f = tmp_path / "joint_budget.toml"
    f.write_text('[[term]]\nname = "shared reference"\ncoefficient = "ke_ZZ"\nsize = 1e-17\n'
                 'units = "1"\n', encoding="utf-8")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        joint = fit_joint([p for p, _ in results], FitSettings(), budget=read_budget(f))
    c = joint.systematics.coefficients["ke_ZZ"]
    assert c["terms"] == {"shared reference": 1e-17}
    assert c["total"] == pytest.approx(np.hypot(joint.coefficients["ke_ZZ"].sigma, 1e-17))


def test_without_any_term_there_is_no_budget():
    from fringe.fit.joint_budget import joint_systematics

    eye = np.eye(2)
    assert joint_systematics([("run 1", "a.h5", None, np.zeros(2), eye / 2),
                              ("run 2", "b.h5", None, np.zeros(2), eye / 2)],
                             ["ke_XY", "ke_ZZ"], np.zeros(2), eye, None, {}) is None


def test_a_harmonic_term_without_its_direction_is_bounded(stored):
    # a result written before `direction` existed: the joint term is sum_j |W[k, j]| s_j
    import dataclasses

    _, results = stored
    p, r = results[0]
    coefs = {n: {k: v for k, v in c.items() if k != "direction"}
             for n, c in r.systematics.coefficients.items()}
    old = dataclasses.replace(r, systematics=dataclasses.replace(r.systematics,
                                                                 coefficients=coefs))
    exact = combine_results(results).systematics
    bound = combine_results([(p, old), results[1]]).systematics
    for n in exact.coefficients:
        e = exact.coefficients[n]["terms"]["run 1: tilt residual"]
        b = bound.coefficients[n]["terms"]["run 1: tilt residual"]
        assert b >= e * (1 - 1e-12)
