"""Work stage 1 shares between its steps gives the results of doing it again.

The survey hands ``detect_motion`` the time steps and their median it computed, and the
crossing rule takes the azimuths (theta = pi - A per sample in the kernel) instead of a theta
array: both must give exactly the results of the unshared computations (derived, [R-labels]).
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest

from fringe.demodulate.blocks import azimuth_boundaries, turn_boundaries
from fringe.demodulate.motion import detect_motion, unwrapped_theta
from fringe.demodulate.settings import DemodSettings


def _records():
    rng = np.random.default_rng(5)
    t = np.cumsum(rng.uniform(0.5, 1.5, 4000))
    t[2000:] += 500.0                                     # a time gap
    yield "continuous", t, (2 * np.pi * t / 45.0 + 0.3) % (2 * np.pi)
    yield "reversing", t, 2.5 * np.pi * np.sin(2 * np.pi * t / 300.0)
    steps = np.floor(t / 5.0) * np.radians(30.0)
    yield "stepped", t, steps % (2 * np.pi)
    yield "clockwise", t, (-2 * np.pi * t / 60.0) % (2 * np.pi)


@pytest.mark.parametrize("name,t,az", list(_records()), ids=lambda x: x if isinstance(x, str)
                         else "")
def test_detect_motion_with_the_survey_steps_is_the_same(name, t, az):
    theta = unwrapped_theta(az)
    dt = np.diff(t)
    shared = detect_motion(t, az, DemodSettings(), theta_rad=theta, dt_s=dt,
                           median_dt_s=float(np.median(dt)))
    own = detect_motion(t, az, DemodSettings())
    assert dataclasses.asdict(shared) == dataclasses.asdict(own)


def test_azimuth_boundaries_equal_the_theta_ones():
    rng = np.random.default_rng(9)
    t = np.cumsum(rng.uniform(0.5, 1.5, 5000))
    t[3000] += 100.0
    for az in ((2 * np.pi * t / 45.0) % (2 * np.pi), (-2 * np.pi * t / 33.0) % (2 * np.pi),
               rng.uniform(0, 2 * np.pi, t.size)):
        for theta0 in (0.0, 1.234, 2 * np.pi - 1e-9):
            want = turn_boundaries(np.pi - az, theta0, t, 10.0)
            assert np.array_equal(azimuth_boundaries(az, theta0, t, 10.0), want)
            want = turn_boundaries(np.pi - az[1:], theta0, t[1:], 10.0,
                                   theta_prev=np.pi - az[0], t_prev=t[0])
            got = azimuth_boundaries(az[1:], theta0, t[1:], 10.0, azimuth_prev=az[0],
                                     t_prev=t[0])
            assert np.array_equal(got, want)
            assert want.sum() > 0


def test_short_record_on_the_calling_thread_is_the_one_thread_stage1(small_run, monkeypatch):
    """Two ranges, the first on the calling thread and the second on the pool, give the turn
    table of one thread to the bit, in range order; a failing range is raised."""
    import fringe.demodulate.engine as engine
    from fringe.demodulate.engine import run_stage1

    monkeypatch.setattr(engine, "LOCAL_THREADS", 2)
    threads = []
    real = engine.demodulate_range

    def spy(*args, **kw):
        import threading
        threads.append(threading.current_thread().name)
        return real(*args, **kw)

    monkeypatch.setattr(engine, "demodulate_range", spy)
    two, info2 = run_stage1(str(small_run), DemodSettings())
    assert len(threads) == 2 and "MainThread" in threads \
        and any(name.startswith("fringe-stage1") for name in threads)
    monkeypatch.setattr(engine, "LOCAL_THREADS", 1)
    one, info1 = run_stage1(str(small_run), DemodSettings())
    assert info1 == info2
    for name in ("t_mid_s", "t_start_s", "t_stop_s", "n_valid", "coef", "ninv_2",
                 "residual_rms", "angle_gap_deg", "status", "leak"):
        assert np.array_equal(getattr(one, name), getattr(two, name), equal_nan=True), name

    def broken(info, settings, a, b, run=None):
        if a > 0:
            raise RuntimeError("range failed")
        return real(info, settings, a, b, run=run)

    monkeypatch.setattr(engine, "LOCAL_THREADS", 2)
    monkeypatch.setattr(engine, "demodulate_range", broken)
    with pytest.raises(RuntimeError, match="range failed"):
        run_stage1(str(small_run), DemodSettings())
