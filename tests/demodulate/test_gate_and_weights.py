"""Stage 1 with a counter's gate and with sample weights (run format version 2).

* The gate factor against its closed form and against a direct numerical average of a
  sinusoid over the window ([R-gate-Pi], [R-gate-Lambda]: derived, and checked against the
  closed forms of the document named there).
* demodulate_blocks with a gate: a counter-averaged 2 theta signal comes back at its true
  amplitude, 1 theta too, and the auxiliary channels are left alone.
* Weights: a sample of weight 2 is the same as the sample given twice (weighted least squares,
  [R-weights], derived), so the two fits give the same coefficients.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.integrate import trapezoid

from fringe.demodulate.blocks import demodulate_blocks, turn_boundaries
from fringe.demodulate.gate import MIN_GATE_FACTOR, gate_factor
from fringe.demodulate.settings import DemodSettings
from fringe.errors import FitError


def _window_mean(omega, tau, kind, n=200_001):
    """Mean of cos(omega t) under the counter's weight, by the trapezoid rule (no closed form)."""
    if kind == "plain":
        t = np.linspace(-tau / 2, tau / 2, n)
        w = np.ones_like(t)
    else:
        t = np.linspace(-tau, tau, n)
        w = tau - np.abs(t)                   # triangle over 2 tau
    return trapezoid(w * np.cos(omega * t), t) / trapezoid(w, t)


@pytest.mark.parametrize("kind", ["plain", "overlapping"])
@pytest.mark.parametrize("x", [0.05, 0.4, 1.0, 2.0, 3.0])      # omega tau / 2
def test_gate_factor_is_the_window_average_of_a_sinusoid(kind, x):
    tau = 1.7
    omega = 2 * x / tau
    closed = np.sin(x) / x                    # [R-gate-Pi]: sinc(omega tau / 2)
    closed = closed if kind == "plain" else closed ** 2          # [R-gate-Lambda]: sinc^2
    got = float(gate_factor(omega, tau, kind))
    assert got == pytest.approx(closed, rel=1e-12, abs=1e-15)
    # numerical average: trapezoid error ~ (2 tau / n)^2 omega^2 / 12, far below 1e-9
    assert got == pytest.approx(_window_mean(omega, tau, kind), rel=0, abs=1e-9)


def test_gate_factor_known_values():
    assert float(gate_factor(0.0, 3.0, "plain")) == 1.0                # no averaging at DC
    # omega tau / 2 = pi/2: sinc = 2/pi exactly (sin(pi/2) = 1), [R-gate-Pi]
    assert float(gate_factor(np.pi / 2.0, 2.0, "plain")) == pytest.approx(2 / np.pi, rel=1e-14)
    assert float(gate_factor(np.pi / 2.0, 2.0, "overlapping")) == pytest.approx(
        (2 / np.pi) ** 2, rel=1e-14)
    assert abs(float(gate_factor(np.pi, 2.0, "plain"))) < 1e-15     # first zero: omega tau = 2 pi
    with pytest.raises(ValueError, match="gate kind"):
        gate_factor(1.0, 1.0, "sliding")


def _counter_record(kind, tau, period=30.0, n_turns=8, per_turn=60):
    """A table at a constant rate, the signal as the counter reports it (window centre stamps)."""
    n = n_turns * per_turn
    t = np.arange(n) * (period / per_turn)
    theta = 2 * np.pi * t / period + 0.2                 # C7: theta = pi - A
    az = np.pi - theta
    omega = 2 * np.pi / period
    h1, h2 = gate_factor(omega, tau, kind), gate_factor(2 * omega, tau, kind)
    # the counter's mean of 0.7 + 0.3 cos(theta) + 0.5 cos(2 theta) - 0.2 sin(2 theta)
    y = 0.7 + 0.3 * h1 * np.cos(theta) + h2 * (0.5 * np.cos(2 * theta) - 0.2 * np.sin(2 * theta))
    tilt = 0.1 * np.cos(2 * theta)                       # an auxiliary channel, not averaged
    starts = np.flatnonzero(turn_boundaries(theta, theta[0] % (2 * np.pi), t, period / 4))
    return t, az, y, {"tilt": tilt}, np.concatenate([[0], starts[starts > 0]])


@pytest.mark.parametrize("kind", ["plain", "overlapping"])
def test_gate_correction_restores_the_amplitudes(kind):
    settings = DemodSettings(drift="offset")
    t, az, y, aux, starts = _counter_record(kind, tau=3.0)
    table = demodulate_blocks(t, az, y, starts, settings, aux=aux, gate=(3.0, kind))
    bare = demodulate_blocks(t, az, y, starts, settings, aux=aux)
    ok = table.accepted
    assert ok.sum() >= 6
    c1, s2 = settings.index("c1"), settings.index("s2")
    np.testing.assert_allclose(table.C[ok], 0.5, rtol=0, atol=1e-9)     # true 2 theta values
    np.testing.assert_allclose(table.B[ok], -0.2, rtol=0, atol=1e-9)
    np.testing.assert_allclose(table.coef[ok, c1], 0.3, rtol=0, atol=1e-9)
    h2 = float(gate_factor(2 * 2 * np.pi / 30.0, 3.0, kind))
    np.testing.assert_allclose(table.ninv_2[ok], bare.ninv_2[ok] / h2 ** 2, rtol=1e-12)
    np.testing.assert_allclose(table.aux["tilt"][ok], bare.aux["tilt"][ok], rtol=0, atol=0)
    assert bare.coef[ok, s2] == pytest.approx(-0.2 * h2, abs=1e-9)


def test_a_gate_that_averages_the_signal_away_is_refused():
    # tau = 12 s on a 30 s table: 2 theta factor sinc(4 pi 12 / 60) ~ -0.19 < MIN_GATE_FACTOR
    t, az, y, aux, starts = _counter_record("plain", tau=12.0)
    assert float(gate_factor(4 * np.pi / 30.0, 12.0, "plain")) < MIN_GATE_FACTOR
    with pytest.raises(FitError, match=r"samples/signal\.gate_s: expected a gate short enough"):
        demodulate_blocks(t, az, y, starts, DemodSettings(), gate=(12.0, "plain"))


def test_weight_two_equals_the_sample_given_twice():
    rng = np.random.default_rng(8)
    period, per_turn, n_turns = 40.0, 50, 6
    n = per_turn * n_turns
    t = np.sort(rng.uniform(0, period * n_turns, n))
    theta = 2 * np.pi * t / period
    y = 0.4 * np.cos(2 * theta) + rng.normal(0, 0.1, n)
    w = rng.integers(1, 4, n).astype(float)              # "mean of N readings", N = 1..3
    starts = np.concatenate([[0], np.flatnonzero(turn_boundaries(theta, 0.0, t, 15.0))[1:]])
    settings = DemodSettings()
    weighted = demodulate_blocks(t, np.pi - theta, y, starts, settings, weight=w)
    # the same record with each sample repeated N times (times nudged by 1e-9 s apart)
    k = w.astype(int)
    rep = np.repeat(np.arange(n), k)
    t_rep = t[rep] + 1e-9 * (np.arange(rep.size) - np.repeat(np.cumsum(k) - k, k))
    starts_rep = np.concatenate([[0], np.cumsum(k)])[starts]
    copies = demodulate_blocks(t_rep, np.pi - theta[rep], y[rep], starts_rep, settings)
    ok = weighted.accepted & copies.accepted
    assert ok.sum() >= 4
    c2, s2 = settings.index("c2"), settings.index("s2")
    for j in (c2, s2):
        np.testing.assert_allclose(weighted.coef[ok, j], copies.coef[ok, j], rtol=0, atol=1e-7)
    np.testing.assert_allclose(weighted.ninv_2[ok], copies.ninv_2[ok], rtol=1e-6)
    unweighted = demodulate_blocks(t, np.pi - theta, y, starts, settings)
    assert not np.allclose(unweighted.coef[ok, c2], weighted.coef[ok, c2], atol=1e-7)


def test_all_ones_weights_are_bit_identical_to_no_weights():
    t, az, y, aux, starts = _counter_record("plain", tau=1.0)
    y = y + np.random.default_rng(2).normal(0, 0.01, y.size)
    a = demodulate_blocks(t, az, y, starts, DemodSettings(), aux=aux)
    b = demodulate_blocks(t, az, y, starts, DemodSettings(), aux=aux, weight=np.ones(t.size))
    np.testing.assert_array_equal(a.coef, b.coef)
    np.testing.assert_array_equal(a.residual_rms, b.residual_rms)
