"""The compiled per-turn model (fringe.fit.stencil) against the numpy form it replaced."""

from importlib import import_module

import numpy as np
import pytest

import fringe.demodulate.settings as demod_settings
from fringe.demodulate.settings import DRIFT_TERMS, DemodSettings, leak_terms
from fringe.demodulate.turns import TurnTable
from fringe.fit.stencil import measured_turns
from tests.experiment.test_memo import base_setup
from tests.fit.turn_model_reference import _stencil_sum, measured_model

tm = import_module("fringe.fit.turn_model")   # the module (fringe.fit exports a function so named)

STEP = tm.WITHIN_TURN_GRID_S

#: Agreement of the compiled and numpy forms, relative to the sum of the absolute values of the
#: terms of each output (the scale of its rounding errors). Derived: both add the same 18
#: stencil products of weights made of at most ~15 products each, in a different order (BLAS
#: matmul versus one product at a time), so each differs from the exact sum by a few tens of
#: ulps (2.2e-16) of that scale at most; 1e-13 leaves a margin of ~10 over that bound.
RTOL = 1e-13


def _grid(rng, m, k):
    stacked = rng.normal(size=(3 * m, k))
    stacked.flags.writeable = False
    return tm._ModelGrid(1.0e4, STEP, (stacked[:m], stacked[m:2 * m], stacked[2 * m:]),
                         stacked)


def _scale(grid, t, half, leak, settings, order):
    """Per output, sum over the terms of |weight| x |grid value| (the rounding scale)."""
    m = grid.stacked.shape[0] // 3
    pos = (t - grid.start_s) / grid.step_s
    i = np.clip(np.floor(pos).astype(np.intp), 2, m - 4)
    ref = import_module("tests.fit.turn_model_reference")
    lw = np.stack(ref.lagrange_derivative_weights(pos - i, grid.step_s, order), axis=1)
    x = np.abs(grid.stacked)
    terms = leak_terms(settings)
    out = []
    for r, own in ((0, 1), (1, 2)):
        w = np.zeros((t.size, 3, 6))
        w[:, own] = np.abs(lw[:, 0])
        for col, (kind, j) in enumerate(terms):
            w[:, "ACB".index(kind)] += np.abs(
                leak[:, r, col] * half ** j / np.prod(np.arange(1, j + 1)))[:, None] \
                * np.abs(lw[:, j])
        out.append(_stencil_sum(w, i - 2, m, x))
    a = _stencil_sum(np.abs(lw[:, :1]), i - 2, m, x[:m])
    return a, out[0], out[1]


@pytest.mark.parametrize("order", [1, 2, 3, 5])
@pytest.mark.parametrize("drift", sorted(DRIFT_TERMS))
@pytest.mark.parametrize("k", [1, 5, 9])
def test_compiled_equals_the_numpy_form(order, drift, k, monkeypatch):
    """Random grids and turns (some beyond the grid's ends, where the stencil is clipped), each
    leak setting (drift), several leak orders: equal to RTOL of the rounding scale."""
    monkeypatch.setattr(demod_settings, "LEAK_ORDER", order)
    rng = np.random.default_rng([order, k, len(drift)])
    settings = DemodSettings(drift=drift)
    n_terms = len(leak_terms(settings))
    grid = _grid(rng, 40, k)
    n = 700
    t = grid.start_s + rng.uniform(-3.0, 42.0, n) * STEP
    half = rng.uniform(1e-9, 2.0, n) * STEP
    # leak responses of mixed sizes and signs (the fitted ones are ~1e-3 ... 1)
    leak = rng.normal(size=(n, 2, n_terms)) * 10.0 ** rng.integers(-4, 1, size=(n, 2, n_terms))
    a, c, b = tm._measured_model(grid, t, half, leak, settings)
    want = measured_model(grid.start_s, STEP, grid.stacked, t, half, leak, settings, order)
    for got, ref, scale in zip((a, c, b), want, _scale(grid, t, half, leak, settings, order)):
        assert np.all(np.abs(got - ref) <= RTOL * scale)
    # the leak terms matter here (else the test would not see them)
    _, c0, _ = tm._measured_model(grid, t, half, np.zeros_like(leak), settings)
    assert np.max(np.abs(c - c0)) > 1e-3 * np.max(np.abs(c0))


def test_writes_into_column_slices_and_skips_a():
    rng = np.random.default_rng(5)
    settings = DemodSettings()
    n, k, n_terms = 50, 4, len(leak_terms(settings))
    grid = _grid(rng, 30, k)
    t = grid.start_s + rng.uniform(2.0, 26.0, n) * STEP
    half = np.full(n, 22.5)
    leak = rng.normal(size=(n, 2, n_terms)) * 1e-2
    wide_c, wide_b = np.full((n, k + 2), 7.0), np.full((n, k + 3), 7.0)
    a, c, b = tm._measured_model(grid, t, half, leak, settings, with_a=False,
                                 out=(wide_c[:, :k], wide_b[:, :k]))
    assert a is None and np.shares_memory(c, wide_c) and np.shares_memory(b, wide_b)
    _, want_c, want_b = tm._measured_model(grid, t, half, leak, settings)
    assert np.array_equal(wide_c[:, :k], want_c) and np.array_equal(wide_b[:, :k], want_b)
    assert np.all(wide_c[:, k:] == 7.0) and np.all(wide_b[:, k:] == 7.0)


@pytest.mark.parametrize("order", [0, 1, 2, 3])
def test_quintic_sources_give_their_exact_derivatives(order, monkeypatch):
    """Grid values of polynomials of degree <= 5 (derived: the quintic through six of their
    values is the polynomial itself, so the measured C and B are C(t) + sum of leak h^j / j!
    times the exact j-th derivatives of the sources), within rounding (1e-12 of the values)."""
    monkeypatch.setattr(demod_settings, "LEAK_ORDER", order)
    rng = np.random.default_rng(11 + order)
    settings = DemodSettings(drift="offset")
    terms = leak_terms(settings)
    m, n = 24, 300
    start = 5.0e3
    coef = rng.normal(size=(3, 6)) * 0.1 ** np.arange(6)       # per source, in (t / 3600 s)^e
    poly = np.polynomial.polynomial
    nodes_h = (start + STEP * np.arange(m)) / 3600.0
    stacked = np.concatenate([poly.polyval(nodes_h, coef[q])[:, None] for q in range(3)])
    grid = tm._ModelGrid(start, STEP, (stacked[:m], stacked[m:2 * m], stacked[2 * m:]),
                         stacked)
    t = start + rng.uniform(2.0, m - 4.0, n) * STEP
    half = rng.uniform(10.0, 300.0, n)
    leak = rng.normal(size=(n, 2, len(terms)))
    a, c, b = tm._measured_model(grid, t, half, leak, settings)

    def deriv(q, j):                                            # per s^j
        return poly.polyval(t / 3600.0, poly.polyder(coef[q], j)) / 3600.0 ** j

    want = [deriv(0, 0), deriv(1, 0), deriv(2, 0)]
    for col, (kind, j) in enumerate(terms):
        q = "ACB".index(kind)
        f = half ** j / np.prod(np.arange(1, j + 1)) * deriv(q, j)
        want[1] = want[1] + leak[:, 0, col] * f
        want[2] = want[2] + leak[:, 1, col] * f
    size = np.abs(stacked).max()
    for got, ref in zip((a, c, b), want):
        assert np.allclose(got[:, 0], ref, rtol=0.0, atol=1e-12 * size)


def test_refuses_disagreeing_shapes_and_terms():
    n, m, k = 3, 10, 2
    args = dict(t_s=np.zeros(n), half_s=np.ones(n), leak=np.zeros((n, 2, 1)), start_s=0.0,
                step_s=1.0, m=m, deriv=np.zeros((2, 6, 6)), src=np.array([1]),
                power=np.array([1]), x=np.zeros((3 * m, k)), c=np.empty((n, k)),
                b=np.empty((n, k)))
    measured_turns(**args)
    for change in ({"x": np.zeros((2 * m, k))}, {"leak": np.zeros((n, 2, 2))},
                   {"b": np.empty((n + 1, k))}, {"deriv": np.zeros((2, 5, 6))}):
        with pytest.raises(ValueError, match="shapes"):
            measured_turns(**{**args, **change})
    with pytest.raises(ValueError, match="out of range"):
        measured_turns(**{**args, "power": np.array([2])})
    with pytest.raises(ValueError, match="shorter than the stencil"):
        measured_turns(**{**args, "m": 5, "x": np.zeros((15, k))})


def _table(rng, n):
    """A stage-1 table of n turns of 45 s with random leak responses (the other fields unused
    by the turn model)."""
    settings = DemodSettings()
    t0 = 86_400.0 + 45.0 * np.arange(n)
    q = len(leak_terms(settings))
    zeros = np.zeros(n)
    return TurnTable(t_mid_s=t0 + 22.5, t_start_s=t0 + 0.5, t_stop_s=t0 + 44.5,
                     n_valid=np.full(n, 45), coef=np.zeros((n, len(settings.term_names))),
                     ninv_2=np.zeros((n, 2, 2)), residual_rms=zeros, angle_gap_deg=zeros,
                     status=np.zeros(n, int), settings=settings,
                     leak=rng.normal(size=(n, 2, q)) * 1e-2)


def test_threaded_batches_equal_one_batch(monkeypatch):
    """Several TURN_BATCH batches on the pool's threads (the kernel releases the GIL) give the
    rows of one batch bit for bit (each turn's row is computed alone), and the numpy form."""
    rng = np.random.default_rng(3)
    table = _table(rng, 1500)
    sel = rng.uniform(size=table.n_blocks) < 0.9
    setup = base_setup()
    t = table.t_mid_s[sel]
    one = tm.turn_model(setup, t, table=table, sel=sel)
    monkeypatch.setattr(tm, "TURN_BATCH", 256)
    monkeypatch.setattr(tm, "MEASURE_BATCH", 100)
    monkeypatch.setattr(tm, "MODEL_THREADS", 2)
    many = tm.turn_model(setup, t, table=table, sel=sel)
    for x, y in zip(one, many):
        assert np.array_equal(x, y)
    rows = np.flatnonzero(sel)
    half = np.maximum(0.5 * (table.t_stop_s[rows] - table.t_start_s[rows]), 1e-9)
    grid = tm._model_grid(setup, t, half, None, None)
    want = measured_model(grid.start_s, grid.step_s, grid.stacked, t, half, table.leak[rows],
                          table.settings, demod_settings.LEAK_ORDER)
    for x, y in zip(one, want):
        assert np.allclose(x, y, rtol=0.0, atol=1e-13 * np.abs(grid.stacked).max())
