"""Sessions of accepted turns (fringe.demodulate.sessions), fed a segment at a time."""

from __future__ import annotations

import types

import numpy as np
import pytest

from fringe.demodulate.sessions import SESSION_GAP_S, SessionBuilder, student_factor


def table(t_lo, dur, c, b, cov, accepted, n_valid=40, n_terms=6):
    """The parts of a TurnTable the builder reads."""
    return types.SimpleNamespace(
        accepted=np.asarray(accepted, bool), t_start_s=t_lo, t_stop_s=t_lo + dur,
        t_mid_s=t_lo + dur / 2, formal_cov=lambda: cov, C=c, B=b,
        n_valid=np.full(t_lo.size, n_valid), settings=types.SimpleNamespace(n_terms=n_terms))


def explicit_sessions(t_lo, t_hi, y, cov):
    """Reference: split where the pause exceeds max(SESSION_GAP_S, 3 x the previous turn's
    duration); per session the weighted mean, its covariance scaled by chi^2 / (2 (n - 1))
    (docs/fit.md, "Short records and sessions"), one turn at a time."""
    groups, cur = [], [0]
    for i in range(1, t_lo.size):
        if t_lo[i] - t_hi[i - 1] > max(SESSION_GAP_S, 3 * (t_hi[i - 1] - t_lo[i - 1])):
            groups.append(cur)
            cur = []
        cur.append(i)
    groups.append(cur)
    out = []
    for g in groups:
        w = [np.linalg.inv(cov[i]) for i in g]
        v = np.linalg.inv(sum(w))
        m = v @ sum(wi @ y[i] for wi, i in zip(w, g))
        chi2 = sum((y[i] - m) @ wi @ (y[i] - m) for wi, i in zip(w, g))
        out.append((len(g), m, v * chi2 / (2 * (len(g) - 1))))
    return out


def test_sessions_fed_in_segments_equal_the_explicit_per_session_means():
    rng = np.random.default_rng(5)
    n, dur = 90, 40.0
    t_lo = np.arange(n) * 45.0
    t_lo[30:] += 5000.0                 # a pause: a new session
    t_lo[70:] += 9000.0
    a = rng.uniform(0.5, 2.0, n) * 1e-4
    cov = np.zeros((n, 2, 2))
    cov[:, 0, 0], cov[:, 1, 1], cov[:, 0, 1] = a, 1.3 * a, 0.2 * a
    cov[:, 1, 0] = cov[:, 0, 1]
    y = rng.normal(0.0, 0.01, (n, 2)) + [0.003, -0.001]
    builder = SessionBuilder(lambda t: 7.292e-5 * np.asarray(t), "Hz")
    for lo, hi in ((0, 17), (17, 52), (52, 90)):     # segment edges inside sessions
        sl = slice(lo, hi)
        builder.add(table(t_lo[sl], dur, y[sl, 0], y[sl, 1], cov[sl], np.ones(hi - lo)))
    got = builder.finish()
    want = explicit_sessions(t_lo, t_lo + dur, y, cov)
    assert [s.n_turns for s in got.sessions] == [w[0] for w in want] == [30, 40, 20]
    for s, (k, m, v) in zip(got.sessions, want, strict=True):
        f = student_factor(2 * (k - 1))
        assert s.C.value == pytest.approx(m[0], rel=1e-10)
        assert s.B.value == pytest.approx(m[1], rel=1e-10)
        assert s.C.sigma == pytest.approx(f * np.sqrt(v[0, 0]), rel=1e-10)
        assert s.B.sigma == pytest.approx(f * np.sqrt(v[1, 1]), rel=1e-10)
    assert got.dof == 4


def test_rejected_turns_are_left_out():
    t_lo = np.arange(6) * 45.0
    cov = np.tile(np.eye(2) * 1e-4, (6, 1, 1))
    y = np.arange(12.0).reshape(6, 2)
    builder = SessionBuilder(lambda t: np.zeros_like(np.asarray(t)), "Hz")
    builder.add(table(t_lo, 40.0, y[:, 0], y[:, 1], cov, [1, 1, 0, 1, 0, 1]))
    (s,) = builder.finish().sessions
    assert s.n_turns == 4
    assert s.C.value == pytest.approx(np.mean(y[[0, 1, 3, 5], 0]))


@pytest.mark.parametrize("fraction", [0.15, 1.0])
def test_the_fits_phase_count_is_the_builders(small_run, fraction):
    # stage 2-3 counts the sidereal phases without building the sessions; the count must be
    # the builder's (which decides whether stage 2 runs), here for a whole and a cut record
    from fringe.demodulate.engine import stage1_store
    from fringe.demodulate.settings import DemodSettings
    from fringe.fit.run import setup_from_run
    from fringe.fit.stages import session_builder, sidereal_phase_count

    setup, _ = setup_from_run(str(small_run), "sme")
    from fringe.io.runreader import open_run

    with open_run(small_run) as run:
        stop = int(fraction * run.n_samples) if fraction < 1 else None
    store, _ = stage1_store(str(small_run), DemodSettings(), stop=stop)
    assert sidereal_phase_count(setup, store) == session_builder(setup, store).n_sidereal_phases
