"""The turn model's grid: nodes anchored on the epoch, kept per setup, hits exact."""

import json
import warnings
from importlib import import_module

import numpy as np
import pytest

from fringe.errors import SystematicsWarning
from fringe.experiment.memo import clear_setup_caches
from fringe.fit.run import fit_run
from fringe.fit.settings import FitSettings
from fringe.theories.sme import KE_NAMES
from tests.experiment.test_memo import VARIANTS, base_setup
from tests.fit.turn_model_reference import lagrange_derivative_weights

tm = import_module("fringe.fit.turn_model")   # the module (fringe.fit exports a function so named)

T = 86_400.0 + 45.0 * np.arange(400)             # turns of 45 s from the second day on
HALF = np.full(T.size, 22.5)


def direct(setup, t, half, names, params):
    """The frozen model on the grid of these turns, computed without the memo."""
    lo, m = tm.grid_nodes(t, half, tm.WITHIN_TURN_GRID_S)
    values = tm._frozen_model(setup, lo + tm.WITHIN_TURN_GRID_S * np.arange(m), names, params)
    return lo, np.concatenate(values, axis=0)


def test_grid_nodes_are_multiples_of_the_step_and_cover_the_turns():
    step = tm.WITHIN_TURN_GRID_S
    lo, m = tm.grid_nodes(T, HALF, step)
    block = tm.GRID_ROUNDING_STEPS * step
    assert lo % block == 0.0 and ((m - 1) * step) % block == 0.0
    assert lo <= T[0] - HALF[0] - 4 * step
    assert lo + (m - 1) * step >= T[-1] + HALF[-1] + 4 * step
    # the first or last accepted turns change, the grid does not (within one rounding block)
    assert tm.grid_nodes(T[2:-3], HALF[2:-3], step) == (lo, m)


def test_a_hit_is_the_uncached_grid_exactly_and_read_only():
    clear_setup_caches()
    setup = base_setup()
    lo, want = direct(setup, T, HALF, KE_NAMES, None)
    first = tm._model_grid(setup, T, HALF, KE_NAMES, None)
    second = tm._model_grid(base_setup(), T[1:], HALF[1:], KE_NAMES, None)
    assert tm.GRID_MEMO.stats()["hits"] == 1
    for grid in (first, second):
        assert grid.start_s == lo and np.array_equal(grid.stacked, want)
        assert np.array_equal(np.concatenate(grid.values), want)
        assert not grid.stacked.flags.writeable
    with pytest.raises(ValueError):
        second.values[1][0, 0] = 1.0


@pytest.mark.parametrize("what", sorted(VARIANTS))
def test_no_hit_for_another_setup(what):
    clear_setup_caches()
    tm._model_grid(base_setup(), T, HALF, None, None)
    other = base_setup(**VARIANTS[what])
    got = tm._model_grid(other, T, HALF, None, None)
    assert tm.GRID_MEMO.stats()["hits"] == 0
    assert np.array_equal(got.stacked, direct(other, T, HALF, None, None)[1])


@pytest.mark.parametrize("names, params, t", [
    (KE_NAMES[:2], None, T), (None, {"ke_ZZ": 1e-17}, T), (None, {"ke_ZZ": 2e-17}, T),
    (None, {"ke_XY": 1e-17}, T), (None, None, T + 2400.0), (None, None, T[:200])])
def test_no_hit_for_other_names_params_or_grid(names, params, t):
    clear_setup_caches()
    setup = base_setup()
    if params != {"ke_ZZ": 1e-17}:
        tm._model_grid(setup, T, HALF, None, {"ke_ZZ": 1e-17})
    if (names, params, t.size) != (None, None, T.size):
        tm._model_grid(setup, T, HALF, None, None)
    before = tm.GRID_MEMO.stats()["hits"]
    got = tm._model_grid(setup, t, HALF[:t.size], names, params)
    assert tm.GRID_MEMO.stats()["hits"] == before
    assert np.array_equal(got.stacked, direct(setup, t, HALF[:t.size], names, params)[1])


def test_no_hit_through_a_changed_grid_constant(monkeypatch):
    clear_setup_caches()
    setup = base_setup()
    tm._model_grid(setup, T, HALF, None, None)
    monkeypatch.setattr(tm, "N_ANGLES", 16)
    got = tm._model_grid(setup, T, HALF, None, None)
    assert tm.GRID_MEMO.stats()["hits"] == 0
    assert np.array_equal(got.stacked, direct(setup, T, HALF, None, None)[1])


def test_a_long_grid_is_not_kept():
    clear_setup_caches()
    t = 45.0 * np.arange(int(40 * 86_400 / 45.0))      # 40 days: 11 550 instants x 9 x 3 x 8 B
    tm._model_grid(base_setup(), t, np.full(t.size, 22.5), None, None)
    assert tm.GRID_MEMO.stats()["entries"] == 0


def test_warm_fit_equals_cold_fit(small_run, tmp_path):
    """A fit of the same record after a first one (the caches hit) gives the same result."""
    out = []
    for cold in (True, False):
        if cold:
            clear_setup_caches()
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", SystematicsWarning)     # the small run's B0
            result, columns = fit_run(str(small_run), FitSettings(),
                                      scratch_dir=str(tmp_path))
        with columns:
            cols = {k: np.asarray(v).copy() for k, v in columns.to_dict().items()}
        d = result.to_dict()
        for part in ("created_utc", "software"):
            d.pop(part, None)
        out.append((json.dumps(d, sort_keys=True), cols))
    assert tm.GRID_MEMO.stats()["hits"] >= 1
    assert out[0][0] == out[1][0]
    for name, value in out[0][1].items():
        assert np.array_equal(value, out[1][1][name], equal_nan=value.dtype.kind == "f"), name


@pytest.mark.parametrize("order", [0, 1, 2, 3])
def test_stencil_derivative_weights_differentiate_quintics_exactly(order):
    """The kept derivative matrices: weights of the six grid values give the j-th derivative
    of any polynomial of degree <= 5 through them (derived: Lagrange interpolation is exact
    for such polynomials)."""
    rng = np.random.default_rng(order)
    step = 300.0
    s = rng.uniform(0.0, 1.0, 50)
    coef = rng.normal(size=6)                          # p(x) = sum c_e (x / step)^e, x in s
    nodes = tm.STENCIL * step
    values = np.polynomial.polynomial.polyval(nodes / step, coef)
    for _ in range(2):                                 # the second call from the kept matrices
        w = lagrange_derivative_weights(s, step, order)[order]
        dc = np.polynomial.polynomial.polyder(coef, order) / step ** order
        want = np.polynomial.polynomial.polyval(s, dc)
        assert np.allclose(w @ values, want, rtol=1e-9, atol=1e-9 * np.abs(want).max())


def test_a_grid_whose_frames_warned_is_not_kept_and_warns_every_time():
    from fringe.errors import TimeScaleWarning
    from fringe.frames import Epoch

    clear_setup_caches()
    setup = base_setup(epoch=Epoch("2150-01-01T00:00:00Z"))   # beyond epv00's 1900-2100
    for _ in range(2):
        with pytest.warns(TimeScaleWarning):
            tm._model_grid(setup, T, HALF, None, None)
    assert tm.GRID_MEMO.stats()["entries"] == 0


def test_a_fit_without_the_input_hash_gives_the_same_numbers(small_run, tmp_path):
    """hash_input=False (a study's campaigns) leaves input.sha256 empty and nothing else changes."""
    import hashlib

    from fringe.study.campaign import fit_record

    out = {}
    for hashed in (True, False):
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", SystematicsWarning)     # the small run's B0
            result, columns = fit_run(str(small_run), FitSettings(), hash_input=hashed,
                                      scratch_dir=str(tmp_path))
        columns.close()
        out[hashed] = result.to_dict()
        for part in ("created_utc", "software"):
            out[hashed].pop(part, None)
    assert out[True]["input"]["sha256"] == hashlib.sha256(small_run.read_bytes()).hexdigest()
    assert out[False]["input"]["sha256"] == ""
    out[False]["input"]["sha256"] = out[True]["input"]["sha256"]
    assert json.dumps(out[True], sort_keys=True) == json.dumps(out[False], sort_keys=True)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", SystematicsWarning)
        record = fit_record(str(small_run), FitSettings())
    assert record["value"] and record["value"] == {
        n: e["value"] for n, e in out[True]["coefficients"].items() if n in record["value"]}
