"""Joint fit of several runs and the combination of stored results (fringe/fit/joint.py).

Three invented laboratories' runs (tests/helpers/runs.py): a rotating cavity pair at 47.6 deg N,
a rotating Michelson at 31.5 deg S, and a second run at the first site with a tilted axis and
arms 60 deg apart. The joint fit is checked against one stacked weighted least-squares fit of
all runs' per-turn rows (an independent implementation of the same model), against the
combination of the runs' stored results, and against the Fisher sum of the runs' information.
"""

from __future__ import annotations

import dataclasses
import json
import warnings

import numpy as np
import pytest

from fringe.errors import ConfigError
from fringe.fit.joint import combine_results, fit_joint, run_part
from fringe.fit.run import fit_run
from fringe.fit.settings import FitSettings
from fringe.io.fit_result import FitResult
from tests.helpers.runs import KE_TRUTH, simulate_run

SHORT = {"days": 0.5, "interval_s": 2.0, "period_s": 60.0}
NORTH = {}                                      # tests/helpers/runs.py BASE: 47.62 deg N
SOUTH = {"site": {"name": "Sandveld hut (invented)", "latitude_deg": -31.5,
                  "longitude_deg": 19.2, "height_m": 300.0},
         "apparatus": {"kind": "michelson", "arm_length_m": 10.0, "wavelength_m": 633e-9,
                       "units": "fringe"},
         "noise": {"white_fm_adev_1s": 6e-8}}   # fringes; invented level, sigma like NORTH's
TILTED = {"turntable": {"motion": "continuous", "period_s": 60.0, "sense": "ccw",
                        "start_azimuth_deg": 40.0, "tilt_south_urad": 300.0,
                        "tilt_east_urad": 150.0},
          "apparatus": {"kind": "cavity-pair", "carrier_hz": 2.82e14,
                        "path_separation_deg": 60.0, "units": "Hz"}}


def _fit(path, settings=None):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return fit_run(path, settings or FitSettings())


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    """Paths of the three runs (read-only)."""
    d = tmp_path_factory.mktemp("joint_runs")
    out = []
    for i, extra in enumerate((NORTH, SOUTH, TILTED)):
        p, _, _ = simulate_run(d / f"run{i}.h5", seed=9100 + i, coefficients=KE_TRUTH,
                               **SHORT, **extra)
        out.append(p)
    return out


@pytest.fixture(scope="module")
def singles(runs):
    """Each run's own result (FitResult) read back from its JSON (the stored form)."""
    out = []
    for p in runs:
        res, cols = _fit(p)
        cols.close()
        out.append(FitResult.from_dict(json.loads(json.dumps(res.to_dict())), source=p))
    return out


@pytest.fixture(scope="module")
def joint(runs):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return fit_joint(runs, FitSettings())


def _stacked(runs):
    """Joint solution and covariance from one weighted least-squares fit of all per-turn rows.

    Per run: the rows (jc, jb) and amplitudes (C, B) of its accepted turns as stage 3 built
    them, weights P_i of its per-turn covariance with the C and B rows scaled by the run's own
    reduced chi^2 (row_scales) and then by its stage-3 reduced chi^2 -- the scaling each run's
    own fit applies (docs/fit.md, stage 3). Coefficient columns are shared, each run's nuisance
    columns are its own. Solved with numpy.linalg.lstsq on the whitened, equilibrated rows.
    """
    blocks = []
    for p in runs:
        res, cols = _fit(p)
        cache = cols.models.cache
        lik = res.likelihood
        k, m = lik.n_coefficients, len(lik.columns) - lik.n_coefficients
        r_c, r_b = lik.row_scales
        red = res.statistics.chi2_reduced
        for i in range(cache.n_segments):
            r = cache.get(i, ("jc", "jb", "c", "b", "p00", "p01", "p11"))
            p00, p01, p11 = r["p00"] / r_c, r["p01"] / np.sqrt(r_c * r_b), r["p11"] / r_b
            blocks.append((r["jc"], r["jb"], r["c"], r["b"], p00 / red, p01 / red, p11 / red,
                           k, m))
        cols.close()
    k = blocks[0][7]
    n_nuis = [b[8] for b in blocks]
    width = k + sum(n_nuis)
    rows, ys, col = [], [], k
    for jc, jb, c, b, p00, p01, p11, _, m in blocks:
        a_c, a_b = np.zeros((c.size, width)), np.zeros((c.size, width))
        a_c[:, :k], a_b[:, :k] = jc[:, :k], jb[:, :k]
        a_c[:, col:col + m], a_b[:, col:col + m] = jc[:, k:], jb[:, k:]
        col += m
        # whitening of each 2x2 block P = Wᵀ W (Cholesky of P: W = [[s0, s1], [0, s2]])
        s0 = np.sqrt(p00)
        s1 = p01 / s0
        s2 = np.sqrt(p11 - s1 ** 2)
        rows += [s0[:, None] * a_c + s1[:, None] * a_b, s2[:, None] * a_b]
        ys += [s0 * c + s1 * b, s2 * b]
    a, y = np.vstack(rows), np.concatenate(ys)
    scale = np.linalg.norm(a, axis=0)          # columns of 1e14 Hz and of 1 Hz: equilibrate
    x = np.linalg.lstsq(a / scale, y, rcond=None)[0] / scale
    cov = np.linalg.inv((a / scale).T @ (a / scale)) / np.outer(scale, scale)
    return x[:k], cov[:k, :k]


def test_joint_equals_one_stacked_least_squares_fit_of_all_turns(runs, joint):
    x, cov = _stacked(runs)
    sig = np.sqrt(np.diag(cov))
    names = list(joint.coefficients)
    got = np.array([joint.coefficients[n].value for n in names])
    got_sig = np.array([joint.coefficients[n].sigma for n in names])
    np.testing.assert_allclose((got - x) / sig, 0.0, atol=1e-6)      # derived: same model
    np.testing.assert_allclose(got_sig / sig, 1.0, rtol=1e-6)
    np.testing.assert_allclose(joint.covariance.array(), cov, rtol=1e-5,
                               atol=1e-8 * float(np.max(np.abs(cov))))


def test_combine_of_stored_results_equals_the_joint_fit(singles, joint):
    combined = combine_results([(f"fit{i}.json", r) for i, r in enumerate(singles)])
    for n, e in joint.coefficients.items():
        c = combined.coefficients[n]
        assert abs(c.value - e.value) < 0.05 * e.sigma          # issue 16: within 0.05 sigma
        assert c.sigma == pytest.approx(e.sigma, rel=1e-6)
    assert combined.runs.method == "combination" and joint.runs.method == "joint fit"
    assert [r.sha256 for r in combined.runs.runs] == [r.sha256 for r in joint.runs.runs]


def test_joint_sigma_is_the_fisher_sum_and_beats_every_single_run(singles, joint):
    names = list(joint.coefficients)
    fisher = sum(np.linalg.inv(r.covariance.array()) for r in singles)   # each run's marginal
    expect = np.sqrt(np.diag(np.linalg.inv(fisher)))
    for j, n in enumerate(names):
        s = joint.coefficients[n].sigma
        best = min(r.coefficients[n].sigma for r in singles)
        assert s <= best, f"{n}: joint sigma {s:.3g} above the best single run's {best:.3g}"
        assert s == pytest.approx(expect[j], rel=0.05)          # issue 16: within 5 %
    # ke_ZZ: the three runs together are visibly better than the best alone
    assert joint.coefficients["ke_ZZ"].sigma < 0.8 * min(r.coefficients["ke_ZZ"].sigma
                                                         for r in singles)


def test_runs_part_states_hashes_shares_and_nuisances(singles, joint):
    runs = joint.runs.runs
    assert [r.sha256 for r in runs] == [s.input.sha256 for s in singles]
    assert {r.apparatus["kind"] for r in runs} == {"cavity-pair", "michelson"}
    for n in joint.coefficients:
        assert sum(r.information_fraction[n] for r in runs) == pytest.approx(1.0, abs=1e-12)
        assert sum(r.weight[n] for r in runs) == pytest.approx(1.0, abs=1e-9)
        for r, s in zip(runs, singles):
            assert r.alone[n].sigma == pytest.approx(s.coefficients[n].sigma, rel=1e-9)
    # each run keeps its own nuisance (in its own units) and chi2 scaling
    assert runs[1].units == "fringe" and runs[0].units == "Hz"
    assert all("lab_B0" in r.nuisance for r in runs)
    assert [r.chi2_reduced for r in runs] == [s.statistics.chi2_reduced for s in singles]
    a = joint.runs.agreement
    assert a["dof"] == 2 * len(joint.coefficients)
    assert a["chi2"] == pytest.approx(sum(r.delta_chi2 for r in runs))
    assert 0.0 < a["p_value"] <= 1.0


def test_joint_result_round_trips_and_combines_again(singles, joint):
    d = json.loads(json.dumps(joint.to_dict()))
    back = FitResult.from_dict(d, source="joint.json")
    assert back.runs == joint.runs and back.coefficients == joint.coefficients
    # a combination of (run 1 + run 2) with run 3 is the combination of all three
    two = combine_results([("a.json", singles[0]), ("b.json", singles[1])])
    again = combine_results([("ab.json", two), ("c.json", singles[2])])
    for n, e in joint.coefficients.items():
        assert abs(again.coefficients[n].value - e.value) < 1e-9 * e.sigma
    assert "run 1" in joint.summary() and "agreement of the runs" in joint.summary()


def test_a_version_2_file_reads_and_combine_names_the_missing_likelihood(singles):
    d = singles[0].to_dict()
    d["fringe_format_version"] = 2
    for key in ("likelihood", "runs"):
        d.pop(key, None)
    old = FitResult.from_dict(d, source="old.json")
    assert old.likelihood is None and old.coefficients == singles[0].coefficients
    with pytest.raises(ConfigError, match=r"^old\.json: likelihood: expected the portable "):
        combine_results([("old.json", old), ("b.json", singles[1])])


@pytest.mark.parametrize("change,needle", [
    (lambda r: dataclasses.replace(r, theory="clock"), "b.json: theory: expected 'sme'"),
    (lambda r: dataclasses.replace(r, fixed={"ke_ZZ": 0.0}), "b.json: fixed: expected the same"),
    (lambda r: dataclasses.replace(r, conventions={**r.conventions, "theta": "other"}),
     "b.json: conventions: expected those of a.json, which differ in theta"),
])
def test_combine_refuses_what_cannot_be_combined(singles, change, needle):
    with pytest.raises(ConfigError) as info:
        combine_results([("a.json", singles[0]), ("b.json", change(singles[1]))])
    assert str(info.value).startswith(needle) and "\n" not in str(info.value)


def test_combine_refuses_the_same_run_twice_blinded_results_and_other_free_sets(runs, singles):
    with pytest.raises(ConfigError, match="already in a.json; the same run cannot enter twice"):
        combine_results([("a.json", singles[0]), ("b.json", singles[0])])
    from fringe.io.fit_budget import Blinding

    blind = dataclasses.replace(singles[1], blinding=Blinding(True, "ab12ab12", 100.0, "0" * 64,
                                                              ()))
    with pytest.raises(ConfigError, match="b.json: blinding: the result is blinded"):
        combine_results([("a.json", singles[0]), ("b.json", blind)])
    four, cols = _fit(runs[1], FitSettings(free=("ke_XY", "ke_XZ", "ke_YZ", "ke_XXmYY")))
    cols.close()
    with pytest.raises(ConfigError, match="b.json: coefficients: expected the free "):
        combine_results([("a.json", singles[0]), ("b.json", four)])


def test_joint_fit_refuses_nonlinear_theories_rms_kt_and_a_file_twice(runs):
    with pytest.raises(ConfigError, match="a joint fit needs a linear theory"):
        fit_joint(runs[:2], FitSettings(theory="medium"))
    with pytest.raises(ConfigError, match="rms_kt: not available in a joint fit"):
        fit_joint(runs[:2], FitSettings(theory="rms", free=("rms_mm", "rms_kt")))
    with pytest.raises(ConfigError, match="the same run file as"):
        fit_joint([runs[0], runs[0]], FitSettings())


def test_likelihood_is_the_reported_fit_and_is_blinded_with_it(runs, singles):
    r = singles[0]
    lik = r.likelihood
    k = lik.n_coefficients
    assert lik.coefficients == tuple(r.coefficients)
    assert lik.value[:k] == tuple(e.value for e in r.coefficients.values())
    np.testing.assert_allclose(np.array(lik.covariance)[:k, :k], r.covariance.array(),
                               rtol=1e-12)
    assert lik.nuisances == tuple(r.nuisance)
    from fringe.fit.blinding import blind_fit

    res, cols = _fit(runs[0])
    blinded, bcols, key = blind_fit(res, cols)
    bcols.close()
    for i, n in enumerate(blinded.likelihood.coefficients):
        assert blinded.likelihood.value[i] == pytest.approx(
            res.likelihood.value[i] + key.offsets[n], rel=1e-12)
        assert blinded.likelihood.value[i] == blinded.coefficients[n].value
    from fringe.fit.blinding import unblind

    plain, _ = unblind(blinded, key.bound_to("a" * 64), "a" * 64)
    np.testing.assert_allclose(plain.likelihood.value, res.likelihood.value, rtol=1e-12)
    assert plain.blinding.blinded is False
    combined = combine_results([("u.json", plain), ("b.json", singles[1])])   # allowed again
    assert combined.runs.runs[0].sha256 == res.input.sha256


def test_run_part_of_a_result_without_likelihood_is_one_line(singles):
    bare = dataclasses.replace(singles[0], likelihood=None)
    with pytest.raises(ConfigError) as info:
        run_part(bare, "x.json")
    assert str(info.value).startswith("x.json: likelihood: ")


def test_joint_fit_of_one_run_is_that_run_s_fit(runs, singles):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        one = fit_joint(runs[:1], FitSettings())
    for n, e in singles[0].coefficients.items():
        assert one.coefficients[n].value == pytest.approx(e.value, rel=1e-9)
        assert one.coefficients[n].sigma == pytest.approx(e.sigma, rel=1e-9)
    assert one.runs.agreement["dof"] == 0
    assert "agreement of the runs: not tested (one run)" in one.summary()
    back = FitResult.from_dict(json.loads(json.dumps(one.to_dict())), source="one.json")
    assert back.to_dict()["runs"] == one.to_dict()["runs"]          # p_value NaN, as null


def test_dask_engine_fits_the_runs_as_tasks_with_the_same_numbers(runs, joint):
    distributed = pytest.importorskip("distributed")
    cluster = distributed.LocalCluster(n_workers=1, threads_per_worker=1, processes=False,
                                       dashboard_address=None)
    client = distributed.Client(cluster)
    try:
        got = fit_joint(runs, FitSettings(), engine="dask", scheduler=client)
    finally:
        client.close()
        cluster.close()
    assert [r.sha256 for r in got.runs.runs] == [r.sha256 for r in joint.runs.runs]
    for n, e in joint.coefficients.items():
        assert got.coefficients[n].value == pytest.approx(e.value, rel=1e-12)
        assert got.coefficients[n].sigma == pytest.approx(e.sigma, rel=1e-12)
